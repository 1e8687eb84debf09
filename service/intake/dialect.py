"""The field delimiter of a CSV upload: named by the caller, or found from its first lines.

Spreadsheet software saves "CSV" with a semicolon where the comma is the
decimal mark, and "text" exports with a tab. :func:`detect_delimiter` counts
each candidate (comma, semicolon, tab, pipe) outside quotes on the header and
the first data lines, and takes the one that appears on the header and the
same number of times on every line read; ties go to the order of
:data:`DELIMITERS`. :class:`csv.Sniffer` is not used: it guesses from the
character frequencies of any character, so a file with few columns and
commas inside names comes out as ``' '`` or ``'e'``; the four characters
people actually use can simply be counted.
"""

from __future__ import annotations

import io
from dataclasses import dataclass
from typing import BinaryIO

from .encoding import PREFIX_BYTES, open_utf8
from .errors import InvalidOption

__all__ = [
    "DELIMITER_SPELLINGS",
    "DELIMITERS",
    "DELIMITER_NAMES",
    "CsvSource",
    "open_csv",
    "parse_delimiter",
    "detect_delimiter",
    "delimiter_name",
]

#: Candidates, in order of preference when the count cannot tell.
DELIMITERS = (",", ";", "\t", "|")
DELIMITER_NAMES = {",": "comma", ";": "semicolon", "\t": "tab", "|": "pipe"}
_WORDS = {
    **{name: ch for ch, name in DELIMITER_NAMES.items()},
    **{ch: ch for ch in DELIMITERS},
    "\\t": "\t",
    "tabs": "\t",
    "semi": ";",
    "semicolons": ";",
    "commas": ",",
    "vertical_bar": "|",
    "bar": "|",
}
#: Every spelling :func:`parse_delimiter` takes (words also in other cases).
DELIMITER_SPELLINGS = sorted(_WORDS)
_LINES = 20  # data lines looked at beside the header


def parse_delimiter(text: str) -> str:
    """``"semicolon"``, ``";"``, ``"tab"``, ``"\\t"`` (a backslash and t) ... -> the character.

    >>> parse_delimiter("Tab"), parse_delimiter(";"), parse_delimiter("\\\\t")
    ('\\t', ';', '\\t')
    """
    got = _WORDS.get(text if text in DELIMITERS else text.strip().lower())
    if got is None:
        raise InvalidOption(
            f"delimiter {text!r} is not supported; use comma, semicolon, tab or pipe "
            "(or the character itself: , ; | or a tab written \\t)",
            field="delimiter",
        )
    return got


def delimiter_name(ch: str) -> str:
    """``";"`` -> ``"semicolon"``."""
    return DELIMITER_NAMES[ch]


def _counts(line: str) -> dict[str, int]:
    """Each candidate's count outside double quotes."""
    out = dict.fromkeys(DELIMITERS, 0)
    inside = False
    for ch in line:
        if ch == '"':
            inside = not inside
        elif not inside and ch in out:
            out[ch] += 1
    return out


def detect_delimiter(text: str) -> str:
    """The delimiter of the CSV text ``text`` (its first lines suffice); comma when unsure.

    >>> detect_delimiter("From;To;Calls\\nann;bob;3,5\\n")
    ';'
    >>> detect_delimiter('id\\n"Smith, Ann"\\n')
    ','
    """
    lines = [ln for ln in text.replace("\r\n", "\n").split("\n")[: _LINES + 2] if ln.strip()]
    if not text.endswith(("\n", "\r")) and len(lines) > 1:
        lines.pop()  # the prefix may end inside a line
    if not lines:
        return ","
    per_line = [_counts(ln) for ln in lines]
    head = per_line[0]
    best, best_score = ",", (-1, 0)
    for ch in DELIMITERS:
        if head[ch] == 0:
            continue
        consistent = sum(1 for c in per_line[1:] if c[ch] == head[ch])
        score = (consistent, head[ch])
        if score > best_score:
            best, best_score = ch, score
    return best


@dataclass(frozen=True)
class CsvSource:
    """A CSV body ready for the readers: UTF-8 bytes, and how it was read."""

    fh: BinaryIO
    encoding: str
    delimiter: str

    @property
    def delimiter_name(self) -> str:
        return DELIMITER_NAMES[self.delimiter]


def open_csv(fh: BinaryIO, *, charset: str | None = None, delimiter: str | None = None) -> CsvSource:
    """Settle the encoding (:func:`~.encoding.open_utf8`) and the delimiter of a seekable CSV body.

    ``delimiter`` (a word or the character, see :func:`parse_delimiter`)
    overrides detection from the first lines.
    """
    chosen = parse_delimiter(delimiter) if delimiter is not None else None
    utf8, encoding = open_utf8(fh, charset)
    if chosen is None:
        chosen = detect_delimiter(_peek(utf8).decode("utf-8", errors="ignore"))
    return CsvSource(utf8, encoding, chosen)


def _peek(fh: BinaryIO) -> bytes:
    """Up to :data:`~.encoding.PREFIX_BYTES` of ``fh`` without consuming them."""
    if fh.seekable():
        at = fh.tell()
        head = fh.read(PREFIX_BYTES)
        fh.seek(at)
        return head
    if isinstance(fh, io.BufferedReader):
        return fh.peek(PREFIX_BYTES)[:PREFIX_BYTES]
    raise TypeError("the body must be seekable or buffered")

"""Text encodings of uploaded CSV files: byte-order marks, declared charsets, detection.

The CSV reader works on UTF-8 bytes. :func:`open_utf8` looks at a bounded
prefix of the (spooled, seekable) body and returns a binary file object that
yields UTF-8, plus the encoding it used:

1. A byte-order mark wins: UTF-8, UTF-16 LE/BE or UTF-32 LE/BE (as in the
   WHATWG Encoding Standard's "BOM sniff", which also lets the BOM override a
   declared label).
2. Otherwise the ``charset`` the client declared (``Content-Type: text/csv;
   charset=windows-1252``) is used.
3. Otherwise the body must be UTF-8. When its prefix is not (or holds NUL
   bytes, as UTF-16 without a BOM does), :class:`InvalidEncoding` names the
   encoding charset-normalizer finds most likely and how to declare it.

Other encodings are decoded incrementally (:func:`codecs.getincrementaldecoder`)
block by block, so memory stays one block whatever the file's size.
"""

from __future__ import annotations

import codecs
import io
from typing import BinaryIO

from .errors import InvalidEncoding, UploadError

__all__ = ["LIKELY", "PREFIX_BYTES", "explain_not_utf8", "TextSource", "open_utf8", "guess_encoding", "charset_label"]

#: How much of the body the checks read: enough for detection, bounded whatever the size.
PREFIX_BYTES = 1 << 16
_READ = 1 << 16

# Longest first: the UTF-32 LE mark starts with the UTF-16 LE one.
_BOMS: tuple[tuple[bytes, str], ...] = (
    (codecs.BOM_UTF32_LE, "utf-32-le"),
    (codecs.BOM_UTF32_BE, "utf-32-be"),
    (codecs.BOM_UTF8, "utf-8"),
    (codecs.BOM_UTF16_LE, "utf-16-le"),
    (codecs.BOM_UTF16_BE, "utf-16-be"),
)

# Spreadsheet files sent as CSV by mistake (their first bytes): name them rather than
# guessing an encoding for binary data.
_WORKBOOKS = (
    (b"PK\x03\x04", "a zip archive such as an Excel or OpenDocument workbook (.xlsx, .ods)"),
    (b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1", "an Excel 97-2003 workbook (.xls)"),
)

# Python codec name -> the label a client puts in ``charset=`` (WHATWG / IANA spelling).
_LABELS = {
    "utf_8": "utf-8",
    "utf_16": "utf-16",
    "utf_16_le": "utf-16le",
    "utf_16_be": "utf-16be",
    "utf_32": "utf-32",
    "utf_32_le": "utf-32le",
    "utf_32_be": "utf-32be",
    "iso8859_1": "iso-8859-1",
    "cp437": "ibm437",
    "cp850": "ibm850",
    "iso8859_15": "iso-8859-15",
    "iso8859_2": "iso-8859-2",
    "mac_roman": "macintosh",
    "ascii": "us-ascii",
    "shift_jis": "shift_jis",
    "euc_jp": "euc-jp",
    "gb2312": "gb2312",
    "gb18030": "gb18030",
    "big5": "big5",
    "euc_kr": "euc-kr",
    "koi8_r": "koi8-r",
}


class TextSource(io.RawIOBase):
    """A read-only binary stream of UTF-8, decoded from ``fh`` in ``encoding``.

    ``lines`` counts the line breaks already produced, so a decoding error
    names the line it happened on.
    """

    def __init__(self, fh: BinaryIO, encoding: str) -> None:
        super().__init__()
        self._fh = fh
        self._encoding = encoding
        self._decoder = codecs.getincrementaldecoder(encoding)("strict")
        self._pending = b""
        self._done = False
        self.lines = 0

    def readable(self) -> bool:
        return True

    def readinto(self, buffer: bytearray | memoryview) -> int:  # type: ignore[override]
        view = memoryview(buffer).cast("B")
        while not self._pending and not self._done:
            raw = self._fh.read(_READ)
            final = not raw
            try:
                text = self._decoder.decode(raw, final=final)
            except UnicodeDecodeError as exc:
                before = bytes(exc.object[: exc.start])
                line = self.lines + 1 + before.decode(self._encoding, errors="replace").count("\n")
                raise UploadError(
                    f"not valid {charset_label(self._encoding)} text",
                    line=line,
                    value=repr(bytes(exc.object[exc.start : exc.start + 4])),
                ) from None
            except UnicodeError:  # a codec that refuses everything ("undefined")
                raise UploadError(f"not valid {charset_label(self._encoding)} text", line=self.lines + 1) from None
            self._done = final
            self._pending = text.encode("utf-8")
            self.lines += text.count("\n")
        n = min(len(view), len(self._pending))
        view[:n] = self._pending[:n]
        self._pending = self._pending[n:]
        return n


def charset_label(encoding: str) -> str:
    """The ``charset=`` label of a Python codec name (``cp1252`` -> ``windows-1252``)."""
    name = codecs.lookup(encoding).name.replace("-", "_")
    if name.startswith("cp") and name[2:].isdigit() and len(name) == 6 and name[2:4] == "12":
        return "windows-" + name[2:]
    return _LABELS.get(name, name.replace("_", "-"))


# What spreadsheet and office software save "CSV" or "text" in (common practice): the
# Windows and DOS code pages, Mac Roman, UTF-16 without a mark, the usual East Asian
# and Cyrillic encodings. Detection picks among these only: on a few short lines, the
# full list lets rare encodings win by chance (a two-line Windows-1252 file came out
# as the Korean "johab").
LIKELY = (
    "cp1252", "cp1250", "cp1251", "cp1253", "cp1254", "cp1255", "cp1256", "cp1257", "cp1258",
    "latin_1", "iso8859_2", "iso8859_15", "mac_roman", "cp437", "cp850",
    "utf_16_le", "utf_16_be", "cp932", "gb18030", "big5", "cp949", "koi8_r",
)


def guess_encoding(prefix: bytes) -> str | None:
    """The most likely encoding of ``prefix`` among :data:`LIKELY`, by charset-normalizer.

    Among encodings that decode the prefix to the very same text
    (charset-normalizer's ``could_be_from_charset``), Windows-1252 is
    preferred: it is what spreadsheet software in Western locales saves
    (common practice), and the text is identical either way.
    """
    from charset_normalizer import from_bytes  # imported on first use: loading it costs time

    best = from_bytes(prefix, cp_isolation=list(LIKELY)).best()
    if best is None:
        return None
    same = set(best.could_be_from_charset)
    return "cp1252" if "cp1252" in same else str(best.encoding)


def _declared(charset: str | None) -> str | None:
    if charset is None or not charset.strip():
        return None
    try:
        name = codecs.lookup(charset.strip().strip('"')).name
        "a".encode(name)  # refuses codecs that are not text encodings (base64, rot13, undefined)
        return name
    except (LookupError, UnicodeError):
        raise InvalidEncoding(
            f"the declared charset {charset!r} is not one this service knows; send the file as UTF-8 "
            "or declare a standard charset such as windows-1252 or utf-16",
            charset=charset,
        ) from None


def _valid_utf8_prefix(prefix: bytes, complete: bool) -> bool:
    try:
        codecs.getincrementaldecoder("utf-8")("strict").decode(prefix, final=complete)
    except UnicodeDecodeError:
        return False
    return True


def open_utf8(fh: BinaryIO, charset: str | None = None) -> tuple[BinaryIO, str]:
    """A binary stream of UTF-8 (without BOM) for ``fh`` and the encoding's label.

    ``fh`` must be seekable; it is read from its current position. Raises
    :class:`InvalidEncoding` when no BOM and no ``charset`` are given and
    the body's first :data:`PREFIX_BYTES` are not UTF-8.
    """
    start = fh.tell()
    prefix = fh.read(PREFIX_BYTES)
    complete = len(prefix) < PREFIX_BYTES
    fh.seek(start)
    for bom, name in _BOMS:
        if prefix.startswith(bom):
            fh.seek(start + len(bom))
            if name == "utf-8":
                return fh, "utf-8"
            # The BOM says the byte order: decode without it (the plain codec would keep U+FEFF).
            return _wrap(fh, name), charset_label(name)
    for magic, what in _WORKBOOKS:
        if prefix.startswith(magic):
            raise UploadError(
                f"the file is {what}, not CSV text; save it from the spreadsheet as \"CSV UTF-8\" "
                "(or CSV) and upload that file"
            )
    declared = _declared(charset)
    if declared is not None and declared != "utf-8":
        return _wrap(fh, declared), charset_label(declared)
    if declared is None and (b"\x00" in prefix or not _valid_utf8_prefix(prefix, complete)):
        likely = guess_encoding(prefix)
        if likely is None or codecs.lookup(likely).name == "utf-8":
            raise InvalidEncoding(
                "the file is not UTF-8 text and its encoding could not be recognised; save it as "
                "UTF-8 (\"CSV UTF-8\" in spreadsheet software) or declare its encoding, e.g. "
                "Content-Type: text/csv; charset=windows-1252"
            )
        label = charset_label(likely)
        raise InvalidEncoding(
            f"The file is not UTF-8; it looks like {_display(label)} text. Send it with the header "
            f"Content-Type: text/csv; charset={label} (or save it as UTF-8)",
            likely=label,
        )
    return fh, "utf-8"


def explain_not_utf8(fh: BinaryIO, line: int | None) -> InvalidEncoding:
    """The problem for a body that turned out not to be UTF-8 past the prefix :func:`open_utf8`
    checked: the encoding of the bytes around the first fault, and how to declare it.

    ``fh`` is read again from the start, one block at a time (this is the failure path).
    """
    fh.seek(0)
    decoder = codecs.getincrementaldecoder("utf-8")("strict")
    previous = b""
    while True:
        block = fh.read(_READ)
        try:
            decoder.decode(block, final=not block)
        except UnicodeDecodeError:
            window = (previous + block + fh.read(_READ))[-3 * _READ:]
            break
        if not block:
            window = b""
            break
        previous = block
    likely = guess_encoding(window) if window else None
    where = f" (line {line})" if line is not None else ""
    if likely is None or codecs.lookup(likely).name == "utf-8":
        return InvalidEncoding(
            f"the file is not valid UTF-8 text{where} and its encoding could not be recognised; save it as "
            "UTF-8 or declare its encoding, e.g. Content-Type: text/csv; charset=windows-1252",
            line=line,
        )
    label = charset_label(likely)
    return InvalidEncoding(
        f"The file is not UTF-8{where}; it looks like {_display(label)} text. Send it with the header "
        f"Content-Type: text/csv; charset={label} (or save it as UTF-8)",
        likely=label,
        line=line,
    )


def _wrap(fh: BinaryIO, encoding: str) -> BinaryIO:
    return io.BufferedReader(TextSource(fh, encoding), buffer_size=_READ)


def _display(label: str) -> str:
    """A readable name: ``windows-1252`` -> ``Windows-1252``, ``utf-16le`` -> ``UTF-16LE``."""
    if label.startswith("windows-"):
        return "Windows-" + label[len("windows-"):]
    if label.startswith(("utf-", "iso-", "us-")):
        return label.upper()
    return label

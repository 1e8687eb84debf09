"""Records out of a JSON document or NDJSON lines, read incrementally and within bounds.

ijson (with its C backend, yajl2_c, when installed) turns the bytes into
events; :class:`_Builder` assembles each record from them with an explicit
stack, so nothing recurses however deep the input, and memory holds one
chunk of the body and the records completed in it, never the whole document.
Nesting deeper than :data:`MAX_DEPTH`, numbers longer than
:data:`MAX_NUMBER_CHARS` characters and records of more than
:data:`MAX_RECORD_VALUES` values are refused as soon as they are met.

Faults of the document itself (syntax, nesting, numbers) are found while
reading in 64 KiB chunks, which know their line only roughly; the body is
then read again up to the fault one line at a time to name the exact line.
Faults of a record's content are the caller's, by record number.
"""

from __future__ import annotations

import json
from collections.abc import Iterable, Iterator
from decimal import Decimal
from typing import Any, BinaryIO

import ijson
import numpy as np

from .errors import TooDeep, TooLong, UploadError
from .limits import MAX_DEPTH, MAX_LINE_BYTES, MAX_NUMBER_CHARS, MAX_RECORD_VALUES

try:  # the C backend: several times faster than ijson's pure-Python one
    from ijson.backends import yajl2_c as _backend
except ImportError:  # pragma: no cover - a platform without the compiled wheel
    _backend = ijson

__all__ = ["json_records", "ndjson_records", "BACKEND"]

BACKEND: str = getattr(_backend, "backend_name", "") or getattr(_backend, "backend", "python")
CHUNK_BYTES = 1 << 16
_BOM = b"\xef\xbb\xbf"
_BIG = 10**MAX_NUMBER_CHARS
# ijson's C backend turns an integer of more digits than Python converts
# (4,300) into a broken event that crashes the process when read; a run of
# digits that long is refused before the parser sees it. No value may be
# that long anyway (ids, labels and notes are shorter, numbers far shorter).
MAX_DIGIT_RUN = 4000
_OPEN = ("start_map", "start_array")
_CLOSE = ("end_map", "end_array")


def _too_deep(depth: int, line: int | None) -> TooDeep:
    return TooDeep(
        f"JSON nested {depth} levels deep; at most {MAX_DEPTH} are read: "
        "send each record as a flat object of names and values",
        depth=depth, limit=MAX_DEPTH, line=line,
    )


def _long_number(length: int | None, line: int | None, column: str | None = None) -> TooLong:
    return TooLong(
        f"a number longer than {MAX_NUMBER_CHARS} characters: "
        "send amounts in plain decimal notation (for example 12.5 or 3e-4)",
        length=length, limit=MAX_NUMBER_CHARS, line=line, column=column,
    )


def _shape(member: str) -> UploadError:
    return UploadError(f'expected a JSON array, or an object with a "{member}" array')


class _Builder:
    """Turns ijson events into records; faults are kept in :attr:`fault` (records before them stand).

    ``member`` names the records array of a JSON document (``"edges"``); a
    top-level array is read as the records too. With ``member=None`` every
    top-level value is a record (NDJSON).
    """

    def __init__(self, member: str | None) -> None:
        self.member = member
        self.depth = 0
        self.stack: list[Any] = []  # containers of the record being built
        self.keys: list[str] = []  # the pending key of each container ("" in lists)
        self.top_map = False
        self.at_member = False
        self.in_records = member is None
        self.rec_depth = 0 if member is None else -1  # depth of the values that are records
        self.found = member is None
        self.values = 0  # scalars and containers in the record being built
        self.count = 0  # records completed
        self.out: list[tuple[int, object]] = []
        self.fault: UploadError | None = None

    def feed(self, events: Iterable[tuple[str, Any]], line: int | None) -> None:
        if self.fault is not None:
            return
        try:
            self._feed(events, line)
        except UploadError as exc:
            self.fault = exc

    def take(self) -> list[tuple[int, object]]:
        out, self.out = self.out, []
        return out

    def _feed(self, events: Iterable[tuple[str, Any]], line: int | None) -> None:
        it = iter(events)
        for ev, v in it:
            if ev == "start_map" and not self.stack and self.in_records and self.depth == self.rec_depth:
                self._flat_record(it, line)
            else:
                self._event(ev, v, line)

    def _flat_record(self, it: Iterator[tuple[str, Any]], line: int | None) -> None:
        """A record object read in one loop while it stays flat (the common case).

        A nested value, or the end of the events mid-record, hands the record
        over to the general path (:meth:`_event`) with its stack.
        """
        rec: dict[str, object] = {}
        key = ""
        count = 1
        for ev, v in it:
            if ev == "map_key":
                key = v
            elif ev == "end_map":
                if count > MAX_RECORD_VALUES:
                    self.values = count
                    self._count(line)
                self.count += 1
                self.out.append((self.count, rec))
                return
            elif ev == "number":
                rec[key] = v if type(v) is int and -_BIG < v < _BIG else self._number(v, line, key)
                count += 1
            elif ev in _OPEN:
                self._open_record(rec, key, count)
                self._event(ev, v, line)
                return
            else:
                rec[key] = v
                count += 1
        self._open_record(rec, key, count)  # continued in the next piece

    def _open_record(self, rec: dict[str, object], key: str, count: int) -> None:
        self.depth += 1
        self.stack.append(rec)
        self.keys.append(key)
        self.values = count

    def _event(self, ev: str, v: Any, line: int | None) -> None:
        stack, keys = self.stack, self.keys
        if ev == "map_key":
            if stack:
                keys[-1] = v
            elif self.depth == 1 and self.top_map:
                self.at_member = v == self.member
        elif ev in _OPEN:
            self.depth += 1
            if self.depth > MAX_DEPTH:
                raise _too_deep(self.depth, line)
            if stack or (self.in_records and self.depth == self.rec_depth + 1):
                self._count(line)
                stack.append({} if ev == "start_map" else [])
                keys.append("")
            elif self.depth == 1:
                if ev == "start_array":
                    self.in_records, self.rec_depth, self.found = True, 1, True
                else:
                    self.top_map = True
            elif self.depth == 2 and self.top_map and self.at_member:
                if ev != "start_array":
                    raise _shape(self.member or "")
                self.in_records, self.rec_depth, self.found = True, 2, True
        elif ev in _CLOSE:
            self.depth -= 1
            if stack:
                keys.pop()
                self._put(stack.pop())
            elif self.in_records and self.depth == self.rec_depth - 1:
                self.in_records = False  # the records array closed
        else:
            if ev == "number":
                v = self._number(v, line, keys[-1] if keys and keys[-1] else None)
            if stack:
                self._count(line)
                self._put(v)
            elif self.in_records and self.depth == self.rec_depth:
                self._put(v)
            elif self.depth == 0 or (self.depth == 1 and self.top_map and self.at_member):
                raise _shape(self.member or "")

    def _count(self, line: int | None) -> None:
        self.values += 1
        if self.values > MAX_RECORD_VALUES:
            raise TooLong(
                f"a record holding more than {MAX_RECORD_VALUES:,} values: "
                "send one record per edge or person, with its values side by side",
                length=self.values, limit=MAX_RECORD_VALUES, line=line,
            )

    def _put(self, value: object) -> None:
        if self.stack:
            top = self.stack[-1]
            if type(top) is dict:
                top[self.keys[-1]] = value
            else:
                top.append(value)
            return
        self.count += 1
        self.values = 0
        self.out.append((self.count, value))

    def _number(self, v: int | Decimal, line: int | None, column: str | None) -> int | float:
        if type(v) is int:
            if -_BIG < v < _BIG:
                return v
            raise _long_number(len(str(v)), line, column)
        if len(str(v)) > MAX_NUMBER_CHARS:
            raise _long_number(len(str(v)), line, column)
        return float(v)  # 1e999 becomes inf, refused by the value rules with its column


def _parser_fault(exc: Exception, line: int | None) -> UploadError:
    """The UploadError for an exception ijson raised; re-raises what is not about the input."""
    if isinstance(exc, ijson.JSONError):
        first = str(exc).strip().split("\n")[0]
        if "utf8" in first.lower() or "utf-8" in first.lower():
            return UploadError("not valid UTF-8", line=line)
        return UploadError(f"invalid JSON: {first.partition(': ')[2] or first}", line=line)
    cause = exc.__cause__ or exc.__context__
    if isinstance(exc, ArithmeticError) or isinstance(cause, ArithmeticError):
        return _long_number(None, line)  # a number decimal cannot hold (an exponent of 200 digits)
    if isinstance(exc, (SystemError, ValueError)) and "digits" in f"{exc} {cause}":
        return _long_number(None, line)  # an integer past Python's own conversion limit
    raise exc


def _records(member: str | None, pieces: Iterable[bytes], multiple: bool = False) -> Iterator[tuple[int, object]]:
    events: list[tuple[str, Any]] = ijson.sendable_list()
    coro = _backend.basic_parse_coro(events, use_float=False, multiple_values=multiple)
    builder = _Builder(member)
    line = 1
    first = True
    fault: UploadError | None = None
    run = 0  # digits at the end of the pieces so far
    for piece in pieces:
        if first:
            first = False
            if piece.startswith(_BOM):
                piece = piece[len(_BOM):]
        longest, run = _digit_runs(piece, run)
        if longest > MAX_DIGIT_RUN:
            fault = _long_number(None, line)  # the piece is not parsed
        elif piece:  # an empty piece would end the document
            try:
                coro.send(piece)
            except Exception as exc:  # noqa: BLE001 - sorted out by _parser_fault
                fault = _parser_fault(exc, line)
                # The events of a failed piece may hold a half-made entry the
                # C backend never filled in: reading it crashes; drop them all.
                del events[:]
        builder.feed(events, line)
        del events[:]
        yield from builder.take()
        if builder.fault is not None:
            raise builder.fault
        if fault is not None:
            raise fault
        line += piece.count(b"\n")
    try:
        coro.close()
    except Exception as exc:  # noqa: BLE001
        fault = _parser_fault(exc, line)
        del events[:]
    builder.feed(events, line)
    yield from builder.take()
    if builder.fault is not None:
        raise builder.fault
    if fault is not None:
        raise fault
    if not builder.found:
        raise _shape(member or "")


def _digit_runs(piece: bytes, carry: int) -> tuple[int, int]:
    """Longest run of ASCII digits in ``piece`` (counting ``carry`` digits before it), and its trailing run."""
    b = np.frombuffer(piece, dtype=np.uint8)
    if b.size == 0:
        return carry, carry
    other = np.flatnonzero((b < 48) | (b > 57))
    if other.size == 0:
        return carry + b.size, carry + b.size
    bounds = np.empty(other.size + 2, dtype=np.int64)
    bounds[0], bounds[1:-1], bounds[-1] = -1 - carry, other, b.size
    gaps = np.diff(bounds) - 1
    return int(gaps.max()), int(gaps[-1])


def _chunks(fh: BinaryIO) -> Iterator[bytes]:
    while chunk := fh.read(CHUNK_BYTES):
        yield chunk


def _lines(fh: BinaryIO) -> Iterator[bytes]:
    """The body in pieces that never straddle a line break (long lines in several pieces)."""
    while piece := fh.readline(CHUNK_BYTES):
        yield piece


def json_records(fh: BinaryIO, member: str) -> Iterator[tuple[int, object]]:
    """(record number, record) for each item of the document's records array.

    Raises :class:`UploadError` (syntax, shape, UTF-8), :class:`TooDeep` and
    :class:`TooLong` with the physical line.
    """
    try:
        start: int | None = fh.tell() if fh.seekable() else None
    except (AttributeError, OSError):
        start = None
    try:
        yield from _records(member, _chunks(fh))
    except UploadError as exc:
        if start is None or exc.line is None:
            raise
        # Read again, line by line, up to the fault: its exact line.
        fh.seek(start)
        try:
            for _ in _records(member, _lines(fh)):
                pass
        except UploadError as again:
            raise again from None
        raise


def ndjson_records(fh: BinaryIO) -> Iterator[tuple[int, object]]:
    """(line, record) for each non-blank line; faults name the line.

    A line is read only up to :data:`MAX_LINE_BYTES`. Lines with few brackets
    (every flat record) are parsed by :func:`json.loads` with number hooks;
    others go through the event builder, which bounds their depth.
    """
    line = 0
    while raw := fh.readline(MAX_LINE_BYTES + 1):
        line += 1
        if len(raw) > MAX_LINE_BYTES and not raw.endswith(b"\n"):
            raise TooLong(
                f"a line longer than {MAX_LINE_BYTES // 2**20} MiB: NDJSON holds one record per "
                "line, and a record of an edge or a person is far shorter",
                length=None, limit=MAX_LINE_BYTES, line=line,
            )
        try:
            text = raw.decode("utf-8")
        except UnicodeDecodeError as exc:
            raise UploadError(
                "not valid UTF-8", line=line, value=repr(raw[exc.start : exc.start + 4])
            ) from None
        if line == 1 and text.startswith("\ufeff"):
            text = text[1:]
            raw = raw[len(_BOM):]
        if not text.strip():
            continue
        if raw.count(b"[") + raw.count(b"{") > MAX_DEPTH:
            yield line, _deep_line(raw, line)
            continue
        try:
            yield line, json.loads(text, parse_int=_int, parse_float=_float)
        except _NumberTooLong as exc:
            raise _long_number(exc.length, line) from None
        except json.JSONDecodeError as exc:
            raise UploadError(
                f"invalid JSON: {exc.msg} (column {exc.colno})", line=line
            ) from None


def _deep_line(raw: bytes, line: int) -> object:
    """The one record of an NDJSON line with many brackets, through the bounded builder."""
    try:
        got = [rec for _, rec in _records(None, (raw,), multiple=True)]
    except UploadError as exc:
        exc.line = line
        raise
    if len(got) != 1:
        raise UploadError("one JSON record per line expected", line=line)
    return got[0]


class _NumberTooLong(Exception):
    def __init__(self, length: int) -> None:
        self.length = length


def _int(text: str) -> int:
    if len(text) > MAX_NUMBER_CHARS:
        raise _NumberTooLong(len(text))
    return int(text)


def _float(text: str) -> float:
    if len(text) > MAX_NUMBER_CHARS:
        raise _NumberTooLong(len(text))
    return float(text)

"""Readers for event tables: one row per (person, event), in CSV, NDJSON or JSON.

An event table says who took part in what: a tasting, a delivery round, a
household, a thread. Each row names a person and an event, and may carry a
``time`` (seconds since 1970 or an ISO 8601 date or date-time; naive ones are
read as UTC) and a ``weight`` (how strongly the person took part, a positive
number). People and events are numbered by two separate :class:`Interner`
objects, so a person and an event may share a name.

The CSV reader goes through the same blocks as the edge reader
(:mod:`.csvfile`: records cut at newlines outside quotes, a fast path for
blocks without quotes), the JSON readers through the same bounded record
streams (:mod:`._jsonstream`); memory holds one block plus the growing
output arrays.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass
from datetime import datetime, timezone
from itertools import chain
from typing import BinaryIO

import numpy as np
import pyarrow as pa
from numpy.typing import NDArray

from . import _arrow_csv as arrow_csv
from . import csvfile
from ._jsonstream import json_records, ndjson_records
from .errors import EmptyUpload, InvalidOption, MissingColumn, TooLong, UnknownColumn, UploadError
from .interner import Interner
from .limits import MAX_NUMBER_CHARS, SizeLimits, first_too_long
from .tables import BLOCK_RECORDS, DEFAULT_LIMITS, ExtraColumns, Locate, Unit, json_id, to_floats

__all__ = ["EventColumns", "EventRows", "read_events_csv", "read_events_ndjson", "read_events_json"]


@dataclass(frozen=True)
class EventColumns:
    """Which columns hold the person, the event, and the optional time and weight.

    ``time`` and ``weight`` default to columns of those names when present.
    """

    person: str = "person"
    event: str = "event"
    time: str | None = None
    weight: str | None = None
    extra_columns: ExtraColumns = "error"

    def __post_init__(self) -> None:
        if self.extra_columns not in ("error", "ignore"):
            raise InvalidOption("extra_columns must be 'error' or 'ignore'", field="extra_columns")
        names = [self.person, self.event, self.time_column, self.weight_column]
        if any(not n for n in names) or len(set(names)) != 4:
            raise InvalidOption(
                "person, event, time and weight must name four different columns",
                field="event" if self.person == self.event else "time",
            )

    @property
    def time_column(self) -> str:
        return "time" if self.time is None else self.time

    @property
    def weight_column(self) -> str:
        return "weight" if self.weight is None else self.weight

    @property
    def known(self) -> frozenset[str]:
        return frozenset((self.person, self.event, self.time_column, self.weight_column))


@dataclass(frozen=True, eq=False)
class EventRows:
    """An event table as read (duplicates kept; the projection merges them).

    Attributes
    ----------
    person : int32 indices from the people :class:`Interner`.
    event : int32 indices from the events :class:`Interner`.
    weight : float64 > 0, or None when no row had a weight.
    time : float64 seconds since 1970-01-01 UTC, or None when the table has no times.
    records : rows read.
    """

    person: NDArray[np.int32]
    event: NDArray[np.int32]
    weight: NDArray[np.float64] | None
    time: NDArray[np.float64] | None
    records: int


def parse_times(cells: Sequence[object]) -> NDArray[np.float64]:
    """Seconds since 1970 from numbers or ISO 8601 text; NaN where neither.

    Examples
    --------
    >>> parse_times(["86400", "1970-01-02", "1970-01-01T01:00:00+01:00", "soon"]).tolist()
    [86400.0, 86400.0, 0.0, nan]
    """
    out = to_floats(cells)
    for i in np.flatnonzero(~np.isfinite(out)).tolist():
        cell = cells[i]
        if not isinstance(cell, str) or not cell.strip():
            continue
        try:
            when = datetime.fromisoformat(cell.strip())
        except ValueError:
            continue
        if when.tzinfo is None:
            when = when.replace(tzinfo=timezone.utc)
        out[i] = when.timestamp()
    return out


class EventSink:
    """Checks blocks of event rows and collects them in growing arrays."""

    def __init__(self, people: Interner, events: Interner, cols: EventColumns, *, unit: Unit = "line",
                 limits: SizeLimits | None = None) -> None:
        self.people, self.events, self.cols, self.unit = people, events, cols, unit
        self.limits = DEFAULT_LIMITS if limits is None else limits
        self.person = np.empty(0, np.int32)
        self.event = np.empty(0, np.int32)
        self.weight: NDArray[np.float64] | None = None
        self.time: NDArray[np.float64] | None = None
        self.has_time: bool | None = None
        self.records = 0

    def add(self, persons: list[str], events: list[str], weight: Sequence[object] | None,
            time: Sequence[object] | None, locate: Locate) -> None:
        """Add one block of rows; ``locate(i)`` gives the line (or record) of row ``i``."""
        rows = len(persons)
        if not rows:
            return
        cols = self.cols
        faults: list[tuple[int, str, str, object, int | None]] = []
        lim = self.limits.id_chars
        for col, ids, what in ((cols.person, persons, "person"), (cols.event, events, "event")):
            if "" in ids:
                faults.append((ids.index(""), col, f"empty {what} id", None, None))
            i = first_too_long(ids, lim)
            if i >= 0:
                faults.append((i, col, f"{what} id longer than {lim} characters: use a shorter key "
                               f"for each {what} (a number or a short code)", ids[i], lim))
        w = None
        if weight is not None:
            i = first_too_long(weight, MAX_NUMBER_CHARS)
            if i >= 0:
                faults.append((i, cols.weight_column, "a number longer than "
                               f"{MAX_NUMBER_CHARS} characters", weight[i], MAX_NUMBER_CHARS))
            w = to_floats(weight)
            bad = ~((w > 0.0) & (w < math.inf))
            if bad.any():
                i = int(np.argmax(bad))
                faults.append((i, cols.weight_column, "weight must be a positive number", weight[i], None))
        t = None
        if time is not None:
            i = first_too_long(time, 64)
            if i >= 0:
                faults.append((i, cols.time_column, "a time longer than 64 characters", time[i], 64))
            t = parse_times(time)
            bad = ~np.isfinite(t)
            if bad.any():
                i = int(np.argmax(bad))
                faults.append((i, cols.time_column, "time must be seconds since 1970 or an ISO 8601 date "
                               "(for example 2026-03-14 or 2026-03-14T18:30:00Z)", time[i], None))
        if faults:
            row, col, reason, value, limit = min(faults, key=lambda f: f[0])
            text = None if value is None else str(value)
            if limit is not None and text is not None:
                raise TooLong(reason, line=locate(row), column=col, value=text, unit=self.unit,
                              length=len(text), limit=limit)
            raise UploadError(reason, line=locate(row), column=col, value=text, unit=self.unit)
        if (t is not None) is not self.has_time:
            if self.has_time is None:
                self.has_time = t is not None
            else:
                raise UploadError("time missing (earlier rows have one)" if self.has_time else
                                  "time given here but not for earlier rows",
                                  line=locate(0), column=cols.time_column, unit=self.unit)
        p = self.people.intern_many(persons)
        e = self.events.intern_many(events)
        r0, r1 = self.records, self.records + rows
        self._room(r1, w is not None and self.weight is None, t is not None and self.time is None, r0)
        self.person[r0:r1] = p
        self.event[r0:r1] = e
        if self.weight is not None:
            self.weight[r0:r1] = 1.0 if w is None else w
        if self.time is not None and t is not None:
            self.time[r0:r1] = t
        self.records = r1

    def _room(self, rows: int, new_weight: bool, new_time: bool, filled: int) -> None:
        cap = self.person.shape[0]
        if new_weight:
            self.weight = np.ones(cap)
        if new_time:
            self.time = np.zeros(cap)
        if rows <= cap:
            return
        cap = max(rows, cap + (cap >> 3) + 4096)
        for name in ("person", "event", "weight", "time"):
            arr = getattr(self, name)
            if arr is not None:
                arr.resize(cap, refcheck=False)
                if name == "weight":
                    arr[filled:] = 1.0

    def rows(self) -> EventRows:
        """The rows read; :class:`EmptyUpload` when there are none."""
        if not self.records:
            raise EmptyUpload("the upload holds no event rows", unit=self.unit)
        n = self.records
        for name in ("person", "event", "weight", "time"):
            arr = getattr(self, name)
            if arr is not None:
                arr.resize(n, refcheck=False)
        return EventRows(self.person, self.event, self.weight, self.time, n)


def read_events_csv(fh: BinaryIO, people: Interner, events: Interner, *, columns: EventColumns | None = None,
                    limits: SizeLimits | None = None, delimiter: str = ",",
                    block_bytes: int = csvfile.BLOCK_BYTES, threads: int = 1) -> EventRows:
    """Read an event table from CSV with a header row (RFC 4180, as :func:`read_edges_csv`).

    A large plain file (``threads`` >= 1, at least :data:`~._arrow_csv.FAST_BYTES`, no quotes)
    is read by Arrow's reader on ``threads`` threads; the exact reader below reads the rest,
    and reads again any file the fast path does not accept, to find its problem and line.
    ``threads=0`` always takes the exact reader.

    Raises
    ------
    MissingColumn
        The person or event column (or a named time or weight column) is absent.
    UnknownColumn
        Another column, unless ``extra_columns="ignore"``.
    UploadError
        With the line: an empty or too long id, a weight that is not a
        positive number, a time that is neither a number nor an ISO 8601 date.

    Examples
    --------
    >>> import io
    >>> p, e = Interner(), Interner()
    >>> t = read_events_csv(io.BytesIO(b"person,event\\nann,t1\\nbob,t1\\n"), p, e)
    >>> t.person.tolist(), t.event.tolist(), p.ids, e.ids
    ([0, 1], [0, 0], ['ann', 'bob'], ['t1'])
    """
    cols = columns or EventColumns()
    n_p, n_e = len(people), len(events)
    if threads and csvfile._body_size(fh) >= arrow_csv.FAST_BYTES and arrow_csv.plain_utf8(fh):
        start = fh.tell()
        try:
            fast = _read_fast(fh, people, events, cols, DEFAULT_LIMITS if limits is None else limits, delimiter,
                              threads)
        except BaseException:
            people.truncate(n_p)
            events.truncate(n_e)
            raise
        if fast is not None:
            return fast
        people.truncate(n_p)
        events.truncate(n_e)
        fh.seek(start)
    try:
        sink = EventSink(people, events, cols, limits=limits)
        blocks = csvfile._blocks(fh, block_bytes)
        header, hline, first = csvfile._header(blocks, delimiter)
        plan = _plan(header, hline, cols)
        k = len(header)
        for raw, text, line0, quoted in chain(first, blocks):
            flat = None if quoted else csvfile._plain_fields(raw, text, k, delimiter)
            if flat is None:
                rows, locate = csvfile._csv_rows(text, line0, delimiter)
                bad = next((i for i, r in enumerate(rows) if len(r) != k), -1)
                if bad >= 0:
                    _block(sink, list(chain.from_iterable(rows[:bad])), k, plan, locate)
                    raise csvfile._field_count(locate(bad), k, len(rows[bad]))
                flat = list(chain.from_iterable(rows))
            else:
                locate = csvfile._plain_locator(line0)
            _block(sink, flat, k, plan, locate)
        return sink.rows()
    except BaseException:
        people.truncate(n_p)
        events.truncate(n_e)
        raise


def _read_fast(fh: BinaryIO, people: Interner, events: Interner, cols: EventColumns, limits: SizeLimits,
               delimiter: str, threads: int) -> EventRows | None:
    """The rows by Arrow's reader (:mod:`.arrow_csv`); None when the exact reader must decide."""
    try:
        return _rows_fast(fh, people, events, cols, limits, delimiter, threads)
    finally:
        # Arrow's allocator keeps freed blocks for reuse: hand them back, the job that
        # follows an upload needs the memory more.
        pa.default_memory_pool().release_unused()


def _rows_fast(fh: BinaryIO, people: Interner, events: Interner, cols: EventColumns, limits: SizeLimits,
               delimiter: str, threads: int) -> EventRows | None:
    tc, wc = cols.time_column, cols.weight_column
    got = arrow_csv.read_string_columns(fh, delimiter, [cols.person, cols.event, tc, wc], threads=threads)
    if got is None:
        return None
    header, table = got
    try:
        _plan(header, 1, cols)
    except UploadError:
        return None
    ids = [table.column(cols.person), table.column(cols.event)]
    for col in ids:
        fewest, most = arrow_csv.lengths(col)
        if fewest == 0 or most > limits.id_chars:
            return None
    weight = time = None
    if wc in header:
        col = table.column(wc)
        if arrow_csv.lengths(col)[1] > MAX_NUMBER_CHARS:
            return None
        try:
            weight = col.cast(pa.float64()).to_numpy()
        except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
            return None
        if not bool(np.all((weight > 0.0) & (weight < math.inf))):
            return None
    if tc in header:
        col = table.column(tc)
        if arrow_csv.lengths(col)[1] > 64:
            return None
        time = parse_times(col.to_pylist())
        if not bool(np.isfinite(time).all()):
            return None
    person, event = arrow_csv.intern_columns([(people, ids[0]), (events, ids[1])], threads=threads)
    if person is None or event is None:
        return None
    return EventRows(person, event, weight, time, table.num_rows)


def _plan(header: list[str], line: int, cols: EventColumns) -> tuple[int, int, int | None, int | None]:
    missing = [c for c in (cols.person, cols.event) if c not in header]
    missing += [c for c in (cols.time, cols.weight) if c is not None and c not in header]
    if missing:
        raise MissingColumn(
            f"missing column{'s' if len(missing) > 1 else ''} {', '.join(repr(c) for c in missing)}; "
            f"header found: {', '.join(header)}. Name the columns in the query, for example "
            "?person=member&event=tasting",
            line=line, column=missing[0], header=tuple(header),
        )
    unknown = [c for c in header if c not in cols.known]
    if unknown and cols.extra_columns == "error":
        raise UnknownColumn(
            f"unknown column{'s' if len(unknown) > 1 else ''} {', '.join(repr(c) for c in unknown)}; "
            f"expected {cols.person}, {cols.event}, {cols.time_column}, {cols.weight_column} "
            "(or pass extra_columns=ignore)",
            line=line, column=unknown[0], header=tuple(header),
        )
    tc, wc = cols.time_column, cols.weight_column
    return (header.index(cols.person), header.index(cols.event),
            header.index(tc) if tc in header else None, header.index(wc) if wc in header else None)


def _block(sink: EventSink, flat: list[str], k: int, plan: tuple[int, int, int | None, int | None],
           locate: Locate) -> None:
    pi, ei, ti, wi = plan
    if len(flat) // k:
        sink.add(flat[pi::k], flat[ei::k], None if wi is None else flat[wi::k],
                 None if ti is None else flat[ti::k], locate)


def read_events_ndjson(fh: BinaryIO, people: Interner, events: Interner, *,
                       columns: EventColumns | None = None, limits: SizeLimits | None = None) -> EventRows:
    """Read an event table from NDJSON: one object per line (``person``, ``event``, ...).

    Examples
    --------
    >>> import io
    >>> body = b'{"person": 7, "event": "t1", "time": "2026-01-01"}\\n{"person": "8", "event": "t1", "time": 0}\\n'
    >>> t = read_events_ndjson(io.BytesIO(body), Interner(), Interner())
    >>> t.person.tolist(), t.time.tolist()
    ([0, 1], [1767225600.0, 0.0])
    """
    return _read_records(ndjson_records(fh), people, events, columns or EventColumns(), "line", limits)


def read_events_json(fh: BinaryIO, people: Interner, events: Interner, *,
                     columns: EventColumns | None = None, limits: SizeLimits | None = None) -> EventRows:
    """Read an event table from a JSON array of objects, or an object with an ``events`` array."""
    return _read_records(json_records(fh, "events"), people, events, columns or EventColumns(), "record",
                         limits)


def _read_records(records: Iterable[tuple[int, object]], people: Interner, events: Interner,
                  cols: EventColumns, unit: Unit, limits: SizeLimits | None) -> EventRows:
    n_p, n_e = len(people), len(events)
    try:
        sink = EventSink(people, events, cols, unit=unit, limits=limits)
        for block in _record_blocks(records, cols, unit):
            sink.add(*block)
        return sink.rows()
    except BaseException:
        people.truncate(n_p)
        events.truncate(n_e)
        raise


Block = tuple[list[str], list[str], list[object] | None, list[object] | None, Locate]


def _record_blocks(records: Iterable[tuple[int, object]], cols: EventColumns, unit: Unit) -> Iterator[Block]:
    persons: list[str] = []
    evs: list[str] = []
    weights: list[object] = []
    times: list[object] = []
    where: list[int] = []
    any_w = any_t = False
    strict = cols.extra_columns == "error"
    for line, rec in records:
        if type(rec) is not dict:
            raise UploadError("an event row must be a JSON object", line=line, value=json.dumps(rec)[:80],
                              unit=unit)
        if strict and not cols.known.issuperset(rec):
            key = next(k for k in rec if k not in cols.known)
            raise UnknownColumn("unknown column (or pass extra_columns=ignore)", line=line, column=key, unit=unit)
        ends = []
        for col in (cols.person, cols.event):
            if col not in rec:
                raise MissingColumn(f"missing column {col!r}; name the columns in the query, for example "
                                    "?person=member&event=tasting", line=line, column=col, unit=unit)
            try:
                ends.append(json_id(rec[col]))
            except ValueError as exc:
                raise UploadError(str(exc), line=line, column=col, value=json.dumps(rec[col])[:80],
                                  unit=unit) from None
        w, t = rec.get(cols.weight_column), rec.get(cols.time_column)
        any_w |= w is not None
        any_t |= t is not None
        persons.append(ends[0])
        evs.append(ends[1])
        weights.append(1.0 if w is None else (json.dumps(w) if type(w) is bool or isinstance(w, (list, dict)) else w))
        times.append("" if t is None else (json.dumps(t) if type(t) is bool or isinstance(t, (list, dict)) else t))
        where.append(line)
        if len(where) >= BLOCK_RECORDS:
            yield persons, evs, weights if any_w else None, times if any_t else None, where.__getitem__
            persons, evs, weights, times, where = [], [], [], [], []
    for named, seen in ((cols.weight, any_w), (cols.time, any_t)):
        if named is not None and not seen:
            raise MissingColumn(f"the column {named!r} is in no row", column=named, unit=unit)
    if where:
        yield persons, evs, weights if any_w else None, times if any_t else None, where.__getitem__

"""Event-table readers: CSV, NDJSON and JSON give the same rows; bad rows are refused with their line."""

from __future__ import annotations

import io
from datetime import datetime, timezone

import numpy as np
import pytest

from service.intake import Interner, SizeLimits
from service.intake.errors import EmptyUpload, MissingColumn, TooLong, UnknownColumn, UploadError
from service.intake.events import (
    EventColumns,
    parse_times,
    read_events_csv,
    read_events_json,
    read_events_ndjson,
)

ROWS = [("ann", "t1", "2026-03-14", 1), ("bob", "t1", "2026-03-14T18:30:00Z", 2), ("ann", "t2", "86400", 1)]


def _csv(rows=ROWS) -> bytes:
    return ("member,tasting,when,w\n" + "".join(f"{p},{e},{t},{w}\n" for p, e, t, w in rows)).encode()


def _ndjson(rows=ROWS) -> bytes:
    return "".join(f'{{"member": "{p}", "tasting": "{e}", "when": "{t}", "w": {w}}}\n' for p, e, t, w in rows).encode()


COLS = EventColumns(person="member", event="tasting", time="when", weight="w")


def test_the_three_formats_read_the_same_table() -> None:
    got = []
    for read, body in ((read_events_csv, _csv()), (read_events_ndjson, _ndjson()),
                       (read_events_json, b'{"events": [' + _ndjson().replace(b"}\n", b"},")[:-1] + b"]}")):
        people, events = Interner(), Interner()
        t = read(io.BytesIO(body), people, events, columns=COLS)
        got.append((t.person.tolist(), t.event.tolist(), t.weight.tolist(), t.time.tolist(), people.ids, events.ids))
    assert got[0] == got[1] == got[2]
    # Source: Python's datetime (standard library) for the ISO 8601 times, read as UTC when naive.
    day = datetime(2026, 3, 14, tzinfo=timezone.utc).timestamp()
    assert got[0][3] == [day, day + 18.5 * 3600, 86400.0]
    assert got[0][4] == ["ann", "bob"] and got[0][5] == ["t1", "t2"]


def test_person_and_event_may_share_a_name_and_numbers_count_once_per_interner() -> None:
    people, events = Interner(), Interner()
    t = read_events_csv(io.BytesIO(b"person,event\n7,7\n8,7\n"), people, events)
    assert t.person.tolist() == [0, 1] and t.event.tolist() == [0, 0] and t.weight is None and t.time is None


def test_missing_person_or_event_column_names_the_fix() -> None:
    with pytest.raises(MissingColumn) as info:
        read_events_csv(io.BytesIO(b"who,event\nann,t1\n"), Interner(), Interner())
    assert info.value.column == "person" and "?person=" in info.value.reason
    with pytest.raises(MissingColumn):
        read_events_ndjson(io.BytesIO(b'{"person": "a"}\n'), Interner(), Interner())


def test_unknown_columns_are_refused_unless_ignored() -> None:
    body = b"person,event,note\nann,t1,hi\nbob,t1,x\n"
    with pytest.raises(UnknownColumn):
        read_events_csv(io.BytesIO(body), Interner(), Interner())
    t = read_events_csv(io.BytesIO(body), Interner(), Interner(), columns=EventColumns(extra_columns="ignore"))
    assert t.records == 2


def test_bad_rows_name_their_line_and_column() -> None:
    cases = [
        (b"person,event\nann,t1\n,t1\n", UploadError, 3, "person"),
        (b"person,event,weight\nann,t1,1\nbob,t1,-2\n", UploadError, 3, "weight"),
        (b"person,event,time\nann,t1,2026-01-01\nbob,t1,soon\n", UploadError, 3, "time"),
    ]
    for body, cls, line, column in cases:
        with pytest.raises(cls) as info:
            read_events_csv(io.BytesIO(body), Interner(), Interner())
        assert (info.value.line, info.value.column) == (line, column), body


def test_a_person_id_over_the_limit_is_refused_and_nothing_is_kept() -> None:
    people, events = Interner.from_ids(["old"]), Interner()
    body = b"person,event\nann,t1\n" + b"x" * 41 + b",t1\n"
    with pytest.raises(TooLong) as info:
        read_events_csv(io.BytesIO(body), people, events, limits=SizeLimits(id_chars=40))
    assert info.value.line == 3 and info.value.column == "person"
    assert people.ids == ["old"] and events.ids == []


def test_empty_table_and_times_on_some_rows_only() -> None:
    with pytest.raises(EmptyUpload):
        read_events_csv(io.BytesIO(b"person,event\n"), Interner(), Interner())
    body = b'{"person": "a", "event": "e", "time": 5}\n{"person": "b", "event": "e"}\n'
    with pytest.raises(UploadError):
        read_events_ndjson(io.BytesIO(body), Interner(), Interner())


def test_many_blocks_keep_every_row() -> None:
    rng = np.random.default_rng(3)
    p, e = rng.integers(0, 500, 20_000), rng.integers(0, 900, 20_000)
    body = ("person,event\n" + "".join(f"p{a},e{b}\n" for a, b in zip(p, e))).encode()
    people, events = Interner(), Interner()
    t = read_events_csv(io.BytesIO(body), people, events, block_bytes=4096)
    assert [people.ids[i] for i in t.person] == [f"p{a}" for a in p]
    assert [events.ids[i] for i in t.event] == [f"e{b}" for b in e]


def test_parse_times_reads_numbers_and_iso_dates() -> None:
    out = parse_times(["1.5", "2026-03-14T00:00:00+02:00", "", "tomorrow"])
    assert out[0] == 1.5 and out[1] == datetime(2026, 3, 13, 22, tzinfo=timezone.utc).timestamp()
    assert np.isnan(out[2]) and np.isnan(out[3])

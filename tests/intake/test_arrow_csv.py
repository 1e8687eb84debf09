"""The fast path for large CSV event tables reads exactly what the exact reader reads.

Source of truth: the exact reader (``threads=0``), itself checked against Python's ``csv``
module and hand-made tables in tests/intake/test_event_tables.py. Every file here is read
both ways; the rows, the numbering of people and events, and any refusal (class, line,
column) must agree. The fast path's size threshold is lowered so small files take it.
"""

from __future__ import annotations

import io

import numpy as np
import pytest

from service.intake import Interner, UploadError
from service.intake import _arrow_csv
from service.intake.events import EventColumns, read_events_csv


@pytest.fixture(autouse=True)
def _small_files_take_the_fast_path(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(_arrow_csv, "FAST_BYTES", 0)


def _read(body: bytes, threads: int, *, people: list[str] | None = None, events: list[str] | None = None,
          **kw: object) -> tuple[object, ...]:
    p = Interner.from_ids(people) if people else Interner()
    e = Interner.from_ids(events) if events else Interner()
    try:
        rows = read_events_csv(io.BytesIO(body), p, e, threads=threads, **kw)  # type: ignore[arg-type]
    except UploadError as exc:
        return ("refused", type(exc).__name__, str(exc), exc.line, exc.column, list(p.ids), list(e.ids))
    return ("read", rows.person.tolist(), rows.event.tolist(),
            None if rows.weight is None else rows.weight.tolist(),
            None if rows.time is None else rows.time.tolist(), rows.records, list(p.ids), list(e.ids))


def _same(body: bytes, **kw: object) -> tuple[object, ...]:
    exact = _read(body, 0, **kw)  # type: ignore[arg-type]
    for threads in (1, 2):
        assert _read(body, threads, **kw) == exact, threads  # type: ignore[arg-type]
    return exact


def _table(rng: np.random.Generator, rows: int, people: int, events: int) -> tuple[np.ndarray, np.ndarray]:
    return rng.integers(0, people, rows), rng.integers(0, events, rows)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_random_tables_are_read_the_same(seed: int) -> None:
    rng = np.random.default_rng(seed)
    p, e = _table(rng, 20_000, 3_000, 900)
    body = "person,event\n" + "".join(f"m{a},t{b}\n" for a, b in zip(p.tolist(), e.tolist()))
    got = _same(body.encode())
    assert got[0] == "read" and got[5] == 20_000
    it = Interner()
    read_events_csv(io.BytesIO(body.encode()), it, Interner(), threads=2)
    assert it._index is None  # read by the fast path, not handed to the exact reader


def test_weights_times_crlf_blank_lines_and_other_delimiters() -> None:
    rows = ["a;t1;2.5;2026-03-14", "b;t1;1;1773446400", "", "c;t2;0.25;2026-03-14T18:30:00+01:00", "a;t2;3;0"]
    body = ("person;event;weight;time\r\n" + "\r\n".join(rows) + "\r\n").encode()
    got = _same(body, delimiter=";")
    assert got[0] == "read" and got[3] == [2.5, 1.0, 0.25, 3.0]


def test_seeded_interners_number_new_ids_after_the_known_ones() -> None:
    body = b"person,event\nzed,t9\nann,t1\nbob,t9\nzed,t2\n"
    got = _same(body, people=["bob", "ann"], events=["t2"])
    assert got[6] == ["bob", "ann", "zed"] and got[7] == ["t2", "t9", "t1"]
    assert got[1] == [2, 1, 0, 2] and got[2] == [1, 2, 1, 0]


def test_extra_columns_ignored_or_refused_alike() -> None:
    body = b"person,event,note\nann,t1,x\nbob,t1,y\n"
    assert _same(body)[0] == "refused"
    assert _same(body, columns=EventColumns(extra_columns="ignore"))[0] == "read"
    assert _same(b"member,tasting\nann,t1\nbob,t1\n", columns=EventColumns(person="member", event="tasting"))[1] == [0, 1]


@pytest.mark.parametrize("body", [
    b"person,event\nann,t1\n,t1\n",                    # an empty person id
    b"person,event\nann,t1\nbob\n",                    # a row with too few fields
    b"person,event\nann,t1,extra\n",                   # a row with too many fields
    b"person,event\nann,t1\nb\xffb,t1\n",              # bytes that are not UTF-8
    b"person,event\nann,t1\nb\x00b,t1\n",              # a NUL character
    b"person,event\n\"ann, jr\",t1\nbob,t1\n",         # quotes: read by the exact reader
    b"person,event\n\"ann\nbeth\",t1\nbob,t1\n",       # a quoted line break
    b"person,person\nann,t1\n",                        # a repeated column
    b"person,tasting\nann,t1\n",                       # a missing column
    b"person,event\n",                                  # no rows
    b"person,event,weight\nann,t1,-1\n",               # a weight that is not positive
    b"person,event,weight\nann,t1,heavy\n",            # a weight that is not a number
    b"person,event,time\nann,t1,soon\n",               # a time that is neither number nor date
    ("person,event\n" + "x" * 300 + ",t1\n").encode(),  # an id over the length limit
])
def test_what_the_fast_path_declines_is_decided_by_the_exact_reader(body: bytes) -> None:
    _same(body)


def test_a_fresh_interner_builds_no_lookup_map_until_one_is_needed() -> None:
    it = Interner()
    read_events_csv(io.BytesIO(b"person,event\nann,t1\nbob,t1\n"), it, Interner(), threads=1)
    assert it._index is None  # the fast path numbered them without a Python dict
    assert it.get("bob") == 1 and it.intern("cy") == 2 and it.ids == ["ann", "bob", "cy"]

"""Campaign logs checked against a version (the use case, without HTTP), and read from each format."""

from __future__ import annotations

import io
from datetime import UTC, datetime

import numpy as np
import pytest

from service.analytics.errors import InvalidParameter
from service.analytics.graph import GraphArrays, NodeAttributes
from service.analytics.learning import bucket_rounds
from service.intake import UploadError, read_campaign_log
from service.usecases.campaigns import MAX_LISTED, check_log
from service.usecases.loading import LoadedVersion

START = datetime(2026, 3, 1, 9, tzinfo=UTC)


def version(n: int = 30) -> LoadedVersion:
    src = np.arange(n - 1, dtype=np.int32)
    g = GraphArrays(n, False, src, src + 1, np.ones(n - 1))
    return LoadedVersion("v_test", 1, g, [f"p{i}" for i in range(n)], NodeAttributes.empty(n))


def rows(text: str) -> list:  # type: ignore[type-arg]
    return read_campaign_log(io.BytesIO(text.encode()), "csv", started=START)


def test_unknown_people_are_counted_and_the_first_twenty_listed() -> None:
    known = "".join(f"p{i},adopter,{i + 1}\n" for i in range(1, 26))
    unknown = "".join(f"x{i},adopter,{i + 1}\n" for i in range(24))
    log, report = check_log(rows("person,role,time\np0,seed,0\n" + known + unknown), version())
    assert report["unknown"]["count"] == 24 and len(report["unknown"]["ids"]) == MAX_LISTED == 20
    assert report["people"] == 50 and report["seeds"] == 1 and len(log) == 50
    (w,) = report["warnings"]
    assert w["code"] == "unknown_people" and w["count"] == 24 and w["ids"] == [f"x{i}" for i in range(20)]


def test_hours_and_timestamps_agree_and_bucket_into_rounds() -> None:
    """'6' (hours after the start) and a timestamp 6 hours after it are the same time; rounds of
    24 hours put 6 h and 30 h in rounds 1 and 2 (ceil((t - t0) / window), Saito et al. 2008 rounds)."""
    a = rows("person,role,time\np0,seed,2026-03-01T09:00:00Z\np1,adopter,2026-03-01T15:00:00+00:00\n"
             "p2,adopter,30\n")
    assert [r.time for r in a] == [0.0, 6.0, 30.0]
    assert bucket_rounds([r.time for r in a], [r.role == "seed" for r in a], window=24.0).tolist() == [0, 1, 2]


def test_bad_rows_name_their_line() -> None:
    with pytest.raises(UploadError) as e:
        rows("person,role,time\np0,seed,0\np1,boss,3\n")
    assert e.value.line == 3 and e.value.column == "role"
    with pytest.raises(UploadError) as e:
        rows("person,role,time\np0,seed,yesterday\n")
    assert e.value.line == 2 and e.value.column == "time"


@pytest.mark.parametrize("text, words", [
    ("person,role,round\np1,adopter,1\np2,adopter,2\n", "no seeds"),
    ("person,role,round\np1,seed,0\n", "one adopter"),
    ("person,role,round\np1,seed,3\np2,adopter,1\n", "out of order"),
    ("person,role,time\np1,seed,0\nz1,adopter,1\nz2,adopter,2\n", "2 of the 3 people"),
])
def test_unusable_logs_are_refused(text: str, words: str) -> None:
    with pytest.raises(InvalidParameter) as e:
        check_log(rows(text), version())
    assert words in str(e.value)

"""Campaign logs: who a past campaign contacted first and who adopted, and when.

A log has one row per person: ``person``, ``role`` (``seed`` for the people
the campaign contacted itself, ``adopter`` for the others who took it up),
either ``time`` (an ISO 8601 timestamp with a time zone, or a number of hours
after the campaign started) or ``round`` (a whole number, 0 for the seeds,
when only rounds are known), and optionally ``referred_by`` (who passed it
on). The body is CSV with a header row, NDJSON, or JSON (an array of records
or an object whose ``log`` member is that array), read as a stream: rows are
checked one at a time and at most ``max_rows`` are kept.

Errors name the line (CSV, NDJSON) or record (JSON) and the column. Checks
that need the graph (unknown people, duplicates, order) are made by the
caller against a version.
"""

from __future__ import annotations

import csv
import io
from collections.abc import Callable, Iterator
from datetime import datetime
from typing import BinaryIO, Literal, NamedTuple

from ._jsonstream import json_records, ndjson_records
from .dialect import open_csv
from .encoding import open_utf8
from .errors import EmptyUpload, MissingColumn, TooLong, UploadError
from .limits import SizeLimits

__all__ = ["LogRow", "LOG_COLUMNS", "LOG_ROLES", "read_campaign_log"]

LOG_COLUMNS = ("person", "role", "time", "round", "referred_by")
LOG_ROLES = ("seed", "adopter")
LogFormat = Literal["csv", "ndjson", "json"]
Bad = Callable[..., UploadError]


class LogRow(NamedTuple):
    """One row of a campaign log, as read (``time`` in hours after ``started``)."""

    line: int
    person: str
    role: str
    time: float | None
    round: int | None
    referred_by: str | None


def read_campaign_log(
    fh: BinaryIO,
    fmt: LogFormat,
    *,
    started: datetime,
    charset: str | None = None,
    limits: SizeLimits | None = None,
    max_rows: int = 1_000_000,
) -> list[LogRow]:
    """Read and check every row of a campaign log.

    Parameters
    ----------
    fh : the body, seekable.
    fmt : ``csv``, ``ndjson`` or ``json``.
    started : when the campaign started (timezone-aware); timestamps become
        hours after it.
    charset : the declared character set (CSV), if any.
    limits : longest id and value in characters.
    max_rows : most rows one log may hold.

    Raises
    ------
    UploadError
        A malformed row (missing person or role, an unknown role, neither or
        both of time and round, an unreadable time), naming its line.
    EmptyUpload
        No rows.

    Examples
    --------
    >>> from datetime import UTC, datetime
    >>> body = b"person,role,time\\na,seed,2026-01-01T00:00:00Z\\nb,adopter,2026-01-01T06:00:00Z\\n"
    >>> rows = read_campaign_log(io.BytesIO(body), "csv", started=datetime(2026, 1, 1, tzinfo=UTC))
    >>> [(r.person, r.role, r.time) for r in rows]
    [('a', 'seed', 0.0), ('b', 'adopter', 6.0)]
    """
    lim = limits or SizeLimits()
    unit: Literal["line", "record"] = "record" if fmt == "json" else "line"
    out: list[LogRow] = []
    for line, rec in _records(fh, fmt, charset):
        if len(out) >= max_rows:
            raise TooLong(f"a campaign log holds at most {max_rows:,} rows; split it",
                          length=None, limit=max_rows, line=line)
        out.append(_row(line, rec, started, lim, unit))
    if not out:
        raise EmptyUpload("the log holds no rows: one row per seed and per adopter")
    return out


def _records(fh: BinaryIO, fmt: str, charset: str | None) -> Iterator[tuple[int, object]]:
    if fmt == "csv":
        src = open_csv(fh, charset=charset)
        text = io.TextIOWrapper(src.fh, encoding="utf-8", newline="")
        reader = csv.reader(text, delimiter=src.delimiter)
        header = next(reader, None)
        if header is None:
            return
        names = [h.strip().lstrip("\ufeff") for h in header]
        for need in ("person", "role"):
            if need not in names:
                raise MissingColumn(f"the header has no {need!r} column; columns are "
                                    f"{', '.join(LOG_COLUMNS)}", header=tuple(names), line=1,
                                    column=need)
        for row in reader:
            if not any(cell.strip() for cell in row):
                continue
            yield reader.line_num, {k: v for k, v in zip(names, row) if v.strip() != ""}
        return
    utf8, _ = open_utf8(fh, charset)
    yield from (json_records(utf8, "log") if fmt == "json" else ndjson_records(utf8))


def _row(line: int, rec: object, started: datetime, lim: SizeLimits,
         unit: Literal["line", "record"]) -> LogRow:
    def bad(reason: str, column: str | None = None, value: object = None) -> UploadError:
        return UploadError(reason, line=line, column=column, value=value, unit=unit)

    if not isinstance(rec, dict):
        raise bad("each row must be an object with person, role and time or round")
    unknown = sorted(set(rec) - set(LOG_COLUMNS))
    if unknown:
        raise bad(f"unknown column; a log has {', '.join(LOG_COLUMNS)}", unknown[0])
    person = _text(rec.get("person"), "person", lim.id_chars, bad)
    if person is None:
        raise bad("every row names the person", "person")
    role = _text(rec.get("role"), "role", 20, bad)
    if role is None or role.lower() not in LOG_ROLES:
        raise bad("role must be 'seed' (contacted by the campaign) or 'adopter'", "role", role)
    referred = _text(rec.get("referred_by"), "referred_by", lim.id_chars, bad)
    has_t, has_r = rec.get("time") is not None, rec.get("round") is not None
    if has_t == has_r:
        raise bad("give either time (when it happened) or round (0 for seeds), not "
                  + ("both" if has_t else "neither"), "time")
    when = _hours(rec["time"], started, bad) if has_t else None
    rnd = _round(rec["round"], bad) if has_r else None
    return LogRow(line, person, role.lower(), when, rnd, referred)


def _text(value: object, column: str, limit: int, bad: Bad) -> str | None:
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, (str, int)):
        raise bad(f"{column} must be text", column, value)
    s = str(value).strip()
    if len(s) > limit:
        raise bad(f"{column} is longer than {limit} characters", column, s)
    return s or None


def _hours(value: object, started: datetime, bad: Bad) -> float:
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return float(value)
    if isinstance(value, str):
        try:
            return float(value)
        except ValueError:
            pass
        try:
            t = datetime.fromisoformat(value.strip().replace("Z", "+00:00"))
        except ValueError:
            t = None
        if t is not None and t.tzinfo is not None:
            return (t - started).total_seconds() / 3600.0
    raise bad("time must be an ISO 8601 timestamp with a time zone (2026-03-01T09:30:00Z) "
              "or a number of hours after the campaign started", "time", value)


def _round(value: object, bad: Bad) -> int:
    if isinstance(value, str) and value.strip().isdigit():
        return int(value.strip())
    if isinstance(value, (int, float)) and not isinstance(value, bool) and float(value).is_integer() \
            and value >= 0:
        return int(value)
    raise bad("round must be a whole number >= 0 (0 for the seeds)", "round", value)

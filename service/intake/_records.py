"""Dict records (JSON, NDJSON, GraphML) into blocks for :class:`~service.intake.tables.EdgeSink`."""

from __future__ import annotations

import json

from . import tables
from .errors import MissingColumn, UnknownColumn, UploadError
from .tables import EdgeOptions, EdgeSink, Unit, json_id

__all__ = ["EdgeRecords"]

_SCALARS = (int, float, str)  # JSON values a weight or probability may be


class EdgeRecords:
    """Buffers dict records (JSON, GraphML) into blocks for :class:`EdgeSink`.

    Checks keys on the way. A missing or ``null`` weight is 1; probabilities
    are all or nothing. ``seen`` collects the weight/probability keys met.
    """

    def __init__(self, sink: EdgeSink, opts: EdgeOptions, unit: Unit) -> None:
        self.sink, self.opts, self.unit = sink, opts, unit
        self.known = opts.known
        self.strict = opts.extra_columns == "error"
        self.wcol, self.pcol = opts.weight_column, opts.probability_column
        self.seen: set[str] = set()
        self.has_p: bool | None = None
        self._reset()

    def _reset(self) -> None:
        self.ids: list[str] = []
        self.w: list[object] = []
        self.p: list[object] = []
        self.where: list[int] = []
        self.any_w = False

    def fail(self, reason: str, where: int, column: str | None = None, value: object = None,
             cls: type[UploadError] = UploadError) -> None:
        self.flush()  # an earlier record's fault is reported first
        raise cls(reason, line=where, column=column, value=value, unit=self.unit)

    def add(self, rec: object, where: int) -> None:
        opts = self.opts
        if type(rec) is not dict:
            self.fail("an edge record must be a JSON object", where, value=json.dumps(rec))
        rec_d: dict[str, object] = rec  # type: ignore[assignment]
        if self.strict and not self.known.issuperset(rec_d):
            key = next(k for k in rec_d if k not in self.known)
            self.fail("unknown column (or pass extra_columns=ignore)", where, key,
                      cls=UnknownColumn)
        s, t = rec_d.get(opts.source), rec_d.get(opts.target)
        if type(s) is not str or type(t) is not str or "\x00" in s or "\x00" in t:
            s, t = self._ends(rec_d, where)
        w = rec_d.get(self.wcol)
        if w is None:
            w = 1.0
        else:
            if not self.any_w:
                self.seen.add(self.wcol)
                self.any_w = True
            if type(w) is bool or not isinstance(w, _SCALARS):
                w = json.dumps(w)  # refused by the sink, shown as written
        p = rec_d.get(self.pcol)
        has_p = p is not None
        if has_p is not self.has_p:
            self._probability_change(has_p, where)
        if has_p and (type(p) is bool or not isinstance(p, _SCALARS)):
            p = json.dumps(p)
        self.ids += (s, t)
        self.w.append(w)
        self.p.append(p)
        self.where.append(where)
        if len(self.where) >= tables.BLOCK_RECORDS:
            self.flush()

    def _ends(self, rec: dict[str, object], where: int) -> tuple[str, str]:
        ends = []
        for col in (self.opts.source, self.opts.target):
            if col not in rec:
                self.fail(f"missing required column {col!r}", where, col, cls=MissingColumn)
            try:
                ends.append(json_id(rec[col]))
            except ValueError as exc:
                self.fail(str(exc), where, col, json.dumps(rec[col]))
        return ends[0], ends[1]

    def _probability_change(self, has_p: bool, where: int) -> None:
        if self.has_p is None:
            self.has_p = has_p
            if has_p:
                self.seen.add(self.pcol)
            return
        self.fail(
            "probability missing (earlier edges have one)" if self.has_p
            else "probability given here but not for earlier edges",
            where, self.pcol,
        )

    def flush(self) -> None:
        if self.where:
            self.sink.add(
                self.ids,
                self.w if self.any_w else None,
                self.p if self.has_p else None,
                self.where.__getitem__,
            )
        any_w = self.any_w
        self._reset()
        self.any_w = any_w  # later blocks may leave weights out; the sink fills in 1

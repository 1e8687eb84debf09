"""What the readers return, and the checks every format shares.

The format modules (``csvfile``, ``jsonfile``, ``graphml``) only split their
input into fields; the value rules (positive weights, probabilities in
[0, 1], consent words, ...) live here once, so every format refuses the same
things with the same words.
"""

from __future__ import annotations

import json
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Literal, TypeVar

import numpy as np
from numpy.typing import NDArray

from .errors import EmptyUpload, InvalidOption, MissingColumn, UnknownColumn, UploadError
from .interner import Interner

__all__ = [
    "EdgeTable",
    "NodeTable",
    "EdgeOptions",
    "NODE_COLUMNS",
    "CONSENT_WORDS",
]

ExtraColumns = Literal["error", "ignore"]
Unit = Literal["line", "record"]
Locate = Callable[[int], int]
BLOCK_RECORDS = 1 << 16  # records per EdgeSink block for the dict-record formats

NODE_COLUMNS: tuple[str, ...] = ("segment", "region", "consent", "cost", "value", "label")
CONSENT_WORDS: dict[str, int] = {
    "true": 1, "yes": 1, "y": 1, "1": 1,
    "false": 0, "no": 0, "n": 0, "0": 0,
}  # fmt: skip


@dataclass(frozen=True, eq=False)
class EdgeTable:
    """Edges as read, before duplicates are merged.

    Attributes
    ----------
    src, dst : int32 node indices from the caller's :class:`Interner`.
    weight : float64, > 0 and finite; 1.0 when the upload had no weight column.
    probability : float64 in [0, 1], or None when the upload had no
        probability column.
    records : edge records read (rows, objects or ``<edge>`` elements).
    """

    src: NDArray[np.int32]
    dst: NDArray[np.int32]
    weight: NDArray[np.float64]
    probability: NDArray[np.float64] | None
    records: int

    @property
    def m(self) -> int:
        return int(self.src.shape[0])


@dataclass(frozen=True, eq=False)
class NodeTable:
    """Node attributes as read, one entry per distinct node id (last record wins).

    Attributes
    ----------
    index : int64 node index of each entry (interned, so unseen ids are new nodes).
    segment, region, label : strings, None when missing.
    consent : int8, 1 yes, 0 no, -1 missing.
    cost, value : float64, finite and >= 0, NaN when missing.
    extra : every other column, as strings (None when missing).
    columns : the known columns (of :data:`NODE_COLUMNS`) the upload had, so a
        column given with empty cells differs from a column not given.
    records : node records read, repeats included.
    """

    index: NDArray[np.int64]
    segment: list[str | None]
    region: list[str | None]
    consent: NDArray[np.int8]
    cost: NDArray[np.float64]
    value: NDArray[np.float64]
    label: list[str | None]
    extra: dict[str, list[str | None]] = field(default_factory=dict)
    columns: tuple[str, ...] = ()
    records: int = 0

    def __len__(self) -> int:
        return int(self.index.shape[0])


@dataclass(frozen=True)
class EdgeOptions:
    """Column mapping and rules shared by the edge readers (see ``read_edges_csv``)."""

    source: str = "source"
    target: str = "target"
    weight: str | None = None
    probability: str | None = None
    allow_self_loops: bool = False
    extra_columns: ExtraColumns = "error"

    def __post_init__(self) -> None:
        if self.extra_columns not in ("error", "ignore"):
            raise InvalidOption(
                f"extra_columns must be 'error' or 'ignore', got {self.extra_columns!r}",
                field="extra_columns",
            )
        names = [self.source, self.target, self.weight_column, self.probability_column]
        if any(not n for n in names) or len(set(names)) != 4:
            raise InvalidOption(
                "source, target, weight and probability must name four different columns",
                field="source" if self.source == self.target else "weight",
            )

    @property
    def weight_column(self) -> str:
        return "weight" if self.weight is None else self.weight

    @property
    def probability_column(self) -> str:
        return "probability" if self.probability is None else self.probability

    @property
    def known(self) -> frozenset[str]:
        return frozenset(
            (self.source, self.target, self.weight_column, self.probability_column)
        )


def to_floats(values: Sequence[object]) -> NDArray[np.float64]:
    """Parse numbers (numeric strings or numbers) with ``float``; NaN where unparsable."""
    try:
        return np.array(values, dtype=np.float64)
    except (ValueError, TypeError, OverflowError):
        return np.array([_float_or_nan(v) for v in values], dtype=np.float64)


def _float_or_nan(v: object) -> float:
    if isinstance(v, bool):
        return math.nan
    try:
        return float(v)  # type: ignore[arg-type]
    except (ValueError, TypeError, OverflowError):
        return math.nan


def _first(bad: NDArray[np.bool_]) -> int:
    return int(np.argmax(bad)) if bad.size and bool(bad.any()) else -1


class EdgeSink:
    """Checks edge blocks and collects them into growing int32/float64 buffers.

    Each block reports its first bad record; checks run on whole blocks with
    numpy, and when several records are bad the earliest one is reported.

    The buffers are numpy arrays with spare room at the end: they grow in
    place (``realloc``) by a sixteenth, or at once to a size the reader
    expects (:meth:`reserve`, whose untouched room costs no resident memory),
    and :meth:`table` trims them, so the table holds the edges without a copy.
    """

    def __init__(self, interner: Interner, opts: EdgeOptions, *, unit: Unit = "line") -> None:
        self.interner = interner
        self.opts = opts
        self.unit: Unit = unit
        self.src: NDArray[np.int32] = np.empty(0, np.int32)
        self.dst: NDArray[np.int32] = np.empty(0, np.int32)
        self.weight: NDArray[np.float64] | None = None
        self.probability: NDArray[np.float64] | None = None
        self.records = 0

    def _columns(self) -> list[str]:
        return [c for c in ("src", "dst", "weight", "probability") if getattr(self, c) is not None]

    def reserve(self, rows: int) -> None:
        """Make room for ``rows`` edges in all (a hint, e.g. from the body's size).

        Fresh arrays of that size take address space only: their pages become
        resident as edges are written into them.
        """
        if rows <= self.src.shape[0]:
            return
        for c in self._columns():
            old = getattr(self, c)
            new = np.empty(rows, dtype=old.dtype)
            new[: self.records] = old[: self.records]
            setattr(self, c, new)

    def _room(self, rows: int) -> None:
        """Grow the buffers in place to hold ``rows`` edges (new room is zeroed)."""
        cap = self.src.shape[0]
        if rows <= cap:
            return
        cap = max(rows, cap + (cap >> 4) + 1024)
        for c in self._columns():
            getattr(self, c).resize(cap, refcheck=False)  # no view of a buffer outlives a call

    def add(
        self,
        ids: list[str],
        weight: Sequence[object] | None,
        probability: Sequence[object] | None,
        locate: Locate,
    ) -> None:
        """Add ``len(ids) // 2`` edges; ``ids`` interleaves source, target per record.

        ``locate(i)`` gives the line (or record) number of block record ``i``.
        """
        rows = len(ids) // 2
        if rows == 0:
            return
        opts = self.opts
        faults: list[tuple[int, str, str, object]] = []  # (row, column, reason, value)
        if "" in ids:
            pos = ids.index("")
            col = opts.source if pos % 2 == 0 else opts.target
            faults.append((pos // 2, col, "empty node id", None))
        w = None
        if weight is not None:
            w = to_floats(weight)
            i = _first(~((w > 0.0) & (w < math.inf)))
            if i >= 0:
                faults.append((i, opts.weight_column, "must be a positive number", weight[i]))
        p = None
        if probability is not None:
            p = to_floats(probability)
            i = _first(~((p >= 0.0) & (p <= 1.0)))
            if i >= 0:
                faults.append(
                    (i, opts.probability_column, "must be a number in [0, 1]", probability[i])
                )
        cut = min((f[0] for f in faults), default=rows)
        codes = self.interner.intern_many(ids if cut == rows else ids[: 2 * cut])
        s, d = codes[0::2], codes[1::2]
        if not opts.allow_self_loops:
            i = _first(s == d)
            if i >= 0:
                faults.append(
                    (i, opts.target, "self-loop (source equals target) not allowed", ids[2 * i])
                )
        if faults:
            row, col, reason, value = min(faults, key=lambda f: f[0])
            raise UploadError(
                reason,
                line=locate(row),
                column=col,
                value=None if value is None else str(value),
                unit=self.unit,
            )
        r0, r1 = self.records, self.records + rows
        if w is not None and self.weight is None:
            # JSON records may leave the weight out: earlier edges weigh 1.
            self.weight = np.empty(self.src.shape[0])
            self.weight[:r0] = 1.0
        if w is None and self.weight is not None:
            w = np.ones(rows)
        if p is not None and self.probability is None:
            if self.records:
                raise UploadError(
                    "probability given for some edges but not for this one",
                    line=locate(0),
                    column=opts.probability_column,
                    unit=self.unit,
                )
            self.probability = np.empty(self.src.shape[0])
        if p is None and self.probability is not None:
            raise UploadError(
                "probability missing (earlier edges have one)",
                line=locate(0),
                column=opts.probability_column,
                unit=self.unit,
            )
        self._room(r1)
        self.src[r0:r1] = s
        self.dst[r0:r1] = d
        if w is not None:
            self.weight[r0:r1] = w  # type: ignore[index]
        if p is not None:
            self.probability[r0:r1] = p  # type: ignore[index]
        self.records = r1

    def table(self) -> EdgeTable:
        """The collected edges; :class:`EmptyUpload` when there are none.

        The table takes the buffers (trimmed in place); the sink is spent.
        """
        if not self.records:
            raise EmptyUpload("the upload holds no edges", unit=self.unit)
        n = self.records
        for c in self._columns():
            getattr(self, c).resize(n, refcheck=False)  # shrinking realloc: no copy
        weight = np.ones(n) if self.weight is None else self.weight
        return EdgeTable(
            src=self.src,
            dst=self.dst,
            weight=weight,
            probability=self.probability,
            records=n,
        )


def json_id(v: object) -> str:
    """A node id from a JSON (or GraphML) value: strings as they are, integers as decimals."""
    if isinstance(v, str):
        if "\x00" in v:
            raise ValueError("NUL character not allowed")
        return v
    if isinstance(v, int) and not isinstance(v, bool):
        return str(v)
    raise ValueError("node id must be a string or an integer")


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
            if type(w) is bool or not isinstance(w, int | float | str):
                w = json.dumps(w)  # refused by the sink, shown as written
        p = rec_d.get(self.pcol)
        has_p = p is not None
        if has_p is not self.has_p:
            self._probability_change(has_p, where)
        if has_p and (type(p) is bool or not isinstance(p, int | float | str)):
            p = json.dumps(p)
        self.ids += (s, t)
        self.w.append(w)
        self.p.append(p)
        self.where.append(where)
        if len(self.where) >= BLOCK_RECORDS:
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


# ---------------------------------------------------------------- node attributes


def parse_consent(v: object) -> int:
    """1, 0 or -1 (missing) from a consent cell or JSON value; ValueError otherwise."""
    if v is None:
        return -1
    if isinstance(v, bool):
        return int(v)
    if isinstance(v, int) and v in (0, 1):
        return v
    if isinstance(v, str):
        word = v.strip().lower()
        if not word:
            return -1
        if word in CONSENT_WORDS:
            return CONSENT_WORDS[word]
    raise ValueError("must be one of true/false, yes/no, y/n, 1/0")


def parse_amount(v: object) -> float:
    """A finite number >= 0 (cost, value), NaN when missing; ValueError otherwise."""
    if v is None or v == "":
        return math.nan
    x = _float_or_nan(v)
    if not (x >= 0.0 and x < math.inf):
        raise ValueError("must be a finite number >= 0")
    return x


def parse_label(v: object) -> str | None:
    """A category or label string (JSON integers become decimal text)."""
    if v is None or v == "":
        return None
    if isinstance(v, str):
        return v
    if isinstance(v, int) and not isinstance(v, bool):
        return str(v)
    raise ValueError("must be a string")


def parse_extra(v: object) -> str | None:
    """Any other column, kept as text (JSON values other than strings as JSON)."""
    if v is None or v == "":
        return None
    if isinstance(v, str):
        return v
    return json.dumps(v, ensure_ascii=False)


_T = TypeVar("_T")


def _put(col: list[_T | None], n: int, cell: _T | None) -> None:
    """Set record ``n`` of a column, filling earlier records that left it out with None."""
    col.extend([None] * (n - len(col)))
    col.append(cell)


class NodeSink:
    """Collects node records; repeated ids keep the last record."""

    def __init__(self, interner: Interner, *, id_column: str = "id", unit: Unit = "line") -> None:
        if not id_column:
            raise InvalidOption("id must name a column", field="id")
        self.interner = interner
        self.id_column = id_column
        self.unit: Unit = unit
        self.index: list[int] = []
        # One typed list per known column (a record that leaves a column out
        # is None there), and the other columns as text.
        self.text: dict[str, list[str | None]] = {"segment": [], "region": [], "label": []}
        self.amounts: dict[str, list[float | None]] = {"cost": [], "value": []}
        self.consent: list[int | None] = []
        self.extra: dict[str, list[str | None]] = {}
        self.present: set[str] = set()
        self.records = 0

    def add(self, node_id: str, values: dict[str, object], where: int) -> None:
        """Add one record; ``values`` maps column name -> raw cell (missing keys = missing)."""
        if not node_id:
            raise UploadError("empty node id", line=where, column=self.id_column, unit=self.unit)
        n = self.records
        for col, raw in values.items():
            try:
                if col in self.text:
                    _put(self.text[col], n, parse_label(raw))
                elif col in self.amounts:
                    _put(self.amounts[col], n, parse_amount(raw))
                elif col == "consent":
                    _put(self.consent, n, parse_consent(raw))
                else:
                    _put(self.extra.setdefault(col, [None] * n), n, parse_extra(raw))
                    continue
            except ValueError as exc:
                raise UploadError(
                    str(exc), line=where, column=col, value=str(raw), unit=self.unit
                ) from None
            self.present.add(col)
        self.index.append(self.interner.intern(node_id))
        self.records = n + 1

    def table(self, *, allow_empty: bool = False) -> NodeTable:
        """The node table, last record per id; :class:`EmptyUpload` when empty."""
        n = self.records
        if not n and not allow_empty:
            raise EmptyUpload("the upload holds no node records", unit=self.unit)
        index = np.asarray(self.index, dtype=np.int64)
        # Last record wins: first occurrence in the reversed order, kept in file order.
        _, first_rev = np.unique(index[::-1], return_index=True)
        keep = np.sort(n - 1 - first_rev)
        whole = keep.size == n
        pick = keep.tolist()

        def column(col: list[_T | None]) -> list[_T | None]:
            col = col + [None] * (n - len(col))
            return col if whole else [col[i] for i in pick]

        def floats(col: list[float | None]) -> NDArray[np.float64]:
            return np.array([math.nan if x is None else x for x in column(col)], np.float64)

        consent = np.array(
            [-1 if x is None else x for x in column(self.consent)], dtype=np.int8
        )
        return NodeTable(
            index=index[keep],
            segment=column(self.text["segment"]),
            region=column(self.text["region"]),
            consent=consent,
            cost=floats(self.amounts["cost"]),
            value=floats(self.amounts["value"]),
            label=column(self.text["label"]),
            extra={k: column(v) for k, v in self.extra.items()},
            columns=tuple(c for c in NODE_COLUMNS if c in self.present),
            records=n,
        )

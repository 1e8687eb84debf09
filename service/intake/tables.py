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

from .errors import EmptyUpload, InvalidOption, TooLong, UploadError
from .interner import Interner
from .limits import MAX_NUMBER_CHARS, SizeLimits, first_too_long

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
F64 = NDArray[np.float64]
I32 = NDArray[np.int32]
# Merges repeated edges of (src, dst, weight, probability) by the upload's rule.
Fold = Callable[[I32, I32, F64, F64 | None], tuple[I32, I32, F64, F64 | None]]
BLOCK_RECORDS = 1 << 16  # records per EdgeSink block for the dict-record formats
FOLD_MIN = 1 << 20  # an EdgeSink with a fold merges repeats once it holds this many edges
DEFAULT_LIMITS = SizeLimits()

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

    With a ``fold`` (the upload's duplicate rule), repeated edges are merged
    whenever the buffers hold :data:`FOLD_MIN` edges and twice as many as
    after the last merge, so memory follows the distinct edges, not the
    records: 25 million rows over a thousand edges hold a million at most.
    Every rule folds in parts to the same result as at once (sums and
    products are associative; the last record of an edge stays last).
    """

    def __init__(
        self,
        interner: Interner,
        opts: EdgeOptions,
        *,
        unit: Unit = "line",
        limits: SizeLimits | None = None,
        fold: Fold | None = None,
    ) -> None:
        self.interner = interner
        self.opts = opts
        self.unit: Unit = unit
        self.limits = DEFAULT_LIMITS if limits is None else limits
        self.fold = fold
        self.fold_at = FOLD_MIN
        self.src: NDArray[np.int32] = np.empty(0, np.int32)
        self.dst: NDArray[np.int32] = np.empty(0, np.int32)
        self.weight: NDArray[np.float64] | None = None
        self.probability: NDArray[np.float64] | None = None
        self.records = 0  # records read
        self.m = 0  # edges in the buffers (fewer than records once repeats are folded)

    def _columns(self) -> list[str]:
        return [c for c in ("src", "dst", "weight", "probability") if getattr(self, c) is not None]

    def reserve(self, rows: int) -> None:
        """Make room for ``rows`` edges in all (a hint, e.g. from the body's size).

        Fresh arrays of that size take address space only: their pages become
        resident as edges are written into them.
        """
        if self.fold is not None:
            rows = min(rows, self.fold_at + BLOCK_RECORDS)  # folding keeps the buffers short
        if rows <= self.src.shape[0]:
            return
        for c in self._columns():
            old = getattr(self, c)
            new = np.empty(rows, dtype=old.dtype)
            new[: self.m] = old[: self.m]
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
        # (row, column, reason, value, (length, limit) for a value too long)
        faults: list[tuple[int, str, str, object, tuple[int, int] | None]] = []
        if "" in ids:
            pos = ids.index("")
            col = opts.source if pos % 2 == 0 else opts.target
            faults.append((pos // 2, col, "empty node id", None, None))
        id_chars = self.limits.id_chars
        pos = first_too_long(ids, id_chars)
        if pos >= 0:
            col = opts.source if pos % 2 == 0 else opts.target
            faults.append((pos // 2, col, id_too_long(id_chars), ids[pos], (len(ids[pos]), id_chars)))
        for col, cells in ((opts.weight_column, weight), (opts.probability_column, probability)):
            i = -1 if cells is None else first_too_long(cells, MAX_NUMBER_CHARS)
            if i >= 0 and cells is not None:
                cell = str(cells[i])
                faults.append((i, col, NUMBER_TOO_LONG, cell, (len(cell), MAX_NUMBER_CHARS)))
        w = None
        if weight is not None:
            w = to_floats(weight)
            i = _first(~((w > 0.0) & (w < math.inf)))
            if i >= 0:
                faults.append((i, opts.weight_column, "must be a positive number", weight[i], None))
        p = None
        if probability is not None:
            p = to_floats(probability)
            i = _first(~((p >= 0.0) & (p <= 1.0)))
            if i >= 0:
                faults.append(
                    (i, opts.probability_column, "must be a number in [0, 1]", probability[i], None)
                )
        cut = min((f[0] for f in faults), default=rows)
        codes = self.interner.intern_many(ids if cut == rows else ids[: 2 * cut])
        s, d = codes[0::2], codes[1::2]
        if not opts.allow_self_loops:
            i = _first(s == d)
            if i >= 0:
                faults.append(
                    (i, opts.target, "self-loop (source equals target) not allowed", ids[2 * i], None)
                )
        if faults:
            row, col, reason, value, size = min(faults, key=lambda f: f[0])
            text = None if value is None else str(value)
            if size is not None:
                raise TooLong(reason, line=locate(row), column=col, value=text, unit=self.unit,
                              length=size[0], limit=size[1])
            raise UploadError(reason, line=locate(row), column=col, value=text, unit=self.unit)
        r0, r1 = self.m, self.m + rows
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
        self.records += rows
        self.m = r1
        if self.fold is not None and r1 >= self.fold_at:
            self._fold()

    def _fold(self) -> None:
        """Merge repeated edges in the buffers by the upload's rule (see the class notes)."""
        assert self.fold is not None
        n = self.m
        if self.weight is None:  # counts come out of merging: weights from here on
            self.weight = np.empty(self.src.shape[0])
            self.weight[:n] = 1.0
        prob = None if self.probability is None else self.probability[:n]
        s, d, w, p = self.fold(self.src[:n], self.dst[:n], self.weight[:n], prob)
        k = int(s.shape[0])
        self.src[:k] = s
        self.dst[:k] = d
        self.weight[:k] = w
        if p is not None and self.probability is not None:
            self.probability[:k] = p
        del s, d, w, p, prob
        self.m = k
        self.fold_at = max(FOLD_MIN, 2 * k)

    def table(self) -> EdgeTable:
        """The collected edges; :class:`EmptyUpload` when there are none.

        The table takes the buffers (trimmed in place); the sink is spent.
        """
        if not self.records:
            raise EmptyUpload("the upload holds no edges", unit=self.unit)
        n = self.m
        for c in self._columns():
            getattr(self, c).resize(n, refcheck=False)  # shrinking realloc: no copy
        weight = np.ones(n) if self.weight is None else self.weight
        return EdgeTable(
            src=self.src,
            dst=self.dst,
            weight=weight,
            probability=self.probability,
            records=self.records,
        )


NUMBER_TOO_LONG = (
    f"a number longer than {MAX_NUMBER_CHARS} characters: "
    "send amounts in plain decimal notation (for example 12.5 or 3e-4)"
)


def id_too_long(limit: int) -> str:
    return (
        f"node id longer than {limit} characters: use a shorter key for each person "
        "(an account handle or a number) and put longer text in a node column"
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
    if isinstance(v, float) and not math.isfinite(v):
        raise ValueError("must be a finite number: this one overflows (write it as text to keep it)")
    return json.dumps(v, ensure_ascii=False, allow_nan=False)


_T = TypeVar("_T")


def _put(col: list[_T | None], n: int, cell: _T | None) -> None:
    """Set record ``n`` of a column, filling earlier records that left it out with None."""
    col.extend([None] * (n - len(col)))
    col.append(cell)


class NodeSink:
    """Collects node records; repeated ids keep the last record."""

    def __init__(
        self,
        interner: Interner,
        *,
        id_column: str = "id",
        unit: Unit = "line",
        limits: SizeLimits | None = None,
    ) -> None:
        if not id_column:
            raise InvalidOption("id must name a column", field="id")
        self.limits = DEFAULT_LIMITS if limits is None else limits
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
        lim = self.limits
        if len(node_id) > lim.id_chars:
            self._too_long(id_too_long(lim.id_chars), where, self.id_column, node_id, lim.id_chars)
        n = self.records
        for col, raw in values.items():
            if len(col) > lim.label_chars:
                self._too_long(
                    f"column name longer than {lim.label_chars} characters: name columns in a few words",
                    where, col[:80], col, lim.label_chars,
                )
            try:
                if col in self.text:
                    label = parse_label(raw)
                    if label is not None and len(label) > lim.label_chars:
                        self._too_long(
                            f"{col} longer than {lim.label_chars} characters: "
                            "keep labels to a name or a short phrase",
                            where, col, label, lim.label_chars,
                        )
                    _put(self.text[col], n, label)
                elif col in self.amounts:
                    if type(raw) is str and len(raw) > MAX_NUMBER_CHARS:
                        self._too_long(NUMBER_TOO_LONG, where, col, raw, MAX_NUMBER_CHARS)
                    _put(self.amounts[col], n, parse_amount(raw))
                elif col == "consent":
                    _put(self.consent, n, parse_consent(raw))
                else:
                    cell = parse_extra(raw)
                    if cell is not None and len(cell) > lim.value_chars:
                        self._too_long(
                            f"value longer than {lim.value_chars} characters: keep notes short, "
                            "or store long text elsewhere and upload a reference to it",
                            where, col, cell, lim.value_chars,
                        )
                    _put(self.extra.setdefault(col, [None] * n), n, cell)
                    continue
            except ValueError as exc:
                raise UploadError(
                    str(exc), line=where, column=col, value=str(raw), unit=self.unit
                ) from None
            self.present.add(col)
        self.index.append(self.interner.intern(node_id))
        self.records = n + 1

    def _too_long(self, reason: str, where: int, column: str, value: str, limit: int) -> None:
        raise TooLong(reason, line=where, column=column, value=value, unit=self.unit,
                      length=len(value), limit=limit)

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

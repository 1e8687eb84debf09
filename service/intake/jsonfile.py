"""NDJSON and JSON readers for edges and node attributes.

NDJSON is read line by line (memory: one line plus the output); a JSON
document is parsed incrementally with ijson (memory: one 64 KiB chunk and
the records completed in it). Both refuse nesting, numbers and records
beyond the bounds of :mod:`service.intake.limits` (see ``_jsonstream``).
Keys are the column names; ``source``/``target``/``id`` values are strings
or integers (integers become their decimal text).
"""

from __future__ import annotations

import json
from collections.abc import Iterable, Iterator
from typing import BinaryIO

from ._jsonstream import json_records, ndjson_records
from .errors import EmptyUpload, MissingColumn, UploadError
from .interner import Interner
from .limits import SizeLimits
from ._records import EdgeRecords
from .tables import (
    EdgeOptions,
    EdgeSink,
    EdgeTable,
    ExtraColumns,
    Fold,
    NodeSink,
    NodeTable,
    Unit,
    json_id,
)

__all__ = ["read_edges_ndjson", "read_edges_json", "read_nodes_ndjson", "read_nodes_json"]


def read_edges_ndjson(
    fh: BinaryIO,
    interner: Interner,
    *,
    source: str = "source",
    target: str = "target",
    weight: str | None = None,
    probability: str | None = None,
    allow_self_loops: bool = False,
    extra_columns: ExtraColumns = "error",
    limits: SizeLimits | None = None,
    fold: Fold | None = None,
) -> EdgeTable:
    """Read edges from NDJSON: one JSON object per line, blank lines allowed.

    Options (``limits``, ``fold`` included) as in :func:`service.intake.read_edges_csv`. A record without the
    weight key (or with ``null``) weighs 1. Probabilities are all or nothing:
    either every record has one or none has.

    Raises
    ------
    UploadError
        ``line`` is the physical line (1-based) of the failing record.

    Examples
    --------
    >>> import io
    >>> body = b'{"source": "a", "target": 7, "weight": 2}\\n\\n{"source": "7", "target": "b"}\\n'
    >>> t = read_edges_ndjson(io.BytesIO(body), it := Interner())
    >>> t.src.tolist(), t.dst.tolist(), t.weight.tolist(), it.ids
    ([0, 1], [1, 2], [2.0, 1.0], ['a', '7', 'b'])
    """
    opts = EdgeOptions(source, target, weight, probability, allow_self_loops, extra_columns)
    return _read_edges(_ndjson_records(fh), interner, opts, "line", limits, fold)


def read_edges_json(
    fh: BinaryIO,
    interner: Interner,
    *,
    source: str = "source",
    target: str = "target",
    weight: str | None = None,
    probability: str | None = None,
    allow_self_loops: bool = False,
    extra_columns: ExtraColumns = "error",
    limits: SizeLimits | None = None,
    fold: Fold | None = None,
) -> EdgeTable:
    """Read edges from a JSON array of objects, or an object with an ``edges`` array.

    Other members of the top-level object (``nodes``, ``directed``, ...) are
    ignored here (read past without being built). Errors give the record number
    (1-based) in ``line`` with ``unit="record"``; a syntax error gives the
    physical line with ``unit="line"``.

    Examples
    --------
    >>> import io
    >>> body = b'{"edges": [{"source": "a", "target": "b", "probability": 0.5}]}'
    >>> t = read_edges_json(io.BytesIO(body), Interner())
    >>> t.probability.tolist()
    [0.5]
    """
    opts = EdgeOptions(source, target, weight, probability, allow_self_loops, extra_columns)
    return _read_edges(_json_records(fh, "edges"), interner, opts, "record", limits, fold)


def read_nodes_ndjson(
    fh: BinaryIO,
    interner: Interner,
    *,
    id: str = "id",  # noqa: A002 - the API's query parameter name
    limits: SizeLimits | None = None,
) -> NodeTable:
    """Read node attributes from NDJSON (see :func:`service.intake.read_nodes_csv`).

    ``consent`` also takes JSON booleans; ``cost``/``value`` JSON numbers;
    keys other than the known ones are kept as text (non-strings as JSON).

    Examples
    --------
    >>> import io
    >>> t = read_nodes_ndjson(io.BytesIO(b'{"id": 5, "consent": true, "tier": 2}\\n'), Interner())
    >>> t.consent.tolist(), t.extra
    ([1], {'tier': ['2']})
    """
    return _read_nodes(_ndjson_records(fh), interner, id, "line", limits)


def read_nodes_json(
    fh: BinaryIO,
    interner: Interner,
    *,
    id: str = "id",  # noqa: A002 - the API's query parameter name
    limits: SizeLimits | None = None,
) -> NodeTable:
    """Read node attributes from a JSON array of objects or ``{"nodes": [...]}``.

    Read incrementally, like :func:`read_edges_json`.

    Examples
    --------
    >>> import io
    >>> t = read_nodes_json(io.BytesIO(b'{"nodes": [{"id": "a", "segment": "gold"}]}'), Interner())
    >>> t.segment, t.columns
    (['gold'], ('segment',))
    """
    return _read_nodes(_json_records(fh, "nodes"), interner, id, "record", limits)


# ------------------------------------------------------------------ records


def _ndjson_records(fh: BinaryIO) -> Iterator[tuple[int, object]]:
    return ndjson_records(fh)


def _json_records(fh: BinaryIO, member: str) -> Iterator[tuple[int, object]]:
    return json_records(fh, member)


# ------------------------------------------------------------------ edges


def _read_edges(
    records: Iterable[tuple[int, object]], interner: Interner, opts: EdgeOptions, unit: Unit,
    limits: SizeLimits | None, fold: Fold | None,
) -> EdgeTable:
    n0 = len(interner)
    try:
        buf = EdgeRecords(EdgeSink(interner, opts, unit=unit, limits=limits, fold=fold), opts, unit)
        for where, rec in records:
            buf.add(rec, where)
        buf.flush()
        for name, col in (("weight", opts.weight), ("probability", opts.probability)):
            if col is not None and col not in buf.seen:
                raise MissingColumn(
                    f"the {name} column {col!r} is in no record", column=col, unit=unit
                )
        return buf.sink.table()
    except BaseException:
        interner.truncate(n0)
        raise


# ------------------------------------------------------------------ nodes


def _read_nodes(
    records: Iterable[tuple[int, object]], interner: Interner, id_column: str, unit: Unit,
    limits: SizeLimits | None,
) -> NodeTable:
    n0 = len(interner)
    try:
        sink = NodeSink(interner, id_column=id_column, unit=unit, limits=limits)
        for where, rec in records:
            if not isinstance(rec, dict):
                raise UploadError(
                    "a node record must be a JSON object", line=where, value=json.dumps(rec),
                    unit=unit,
                )
            if id_column not in rec:
                raise MissingColumn(
                    f"missing required column {id_column!r}", line=where, column=id_column,
                    unit=unit,
                )
            values = dict(rec)
            raw_id = values.pop(id_column)
            try:
                node_id = json_id(raw_id)
            except ValueError as exc:
                raise UploadError(
                    str(exc), line=where, column=id_column, value=json.dumps(raw_id), unit=unit
                ) from None
            sink.add(node_id, values, where)
        if not sink.records:
            raise EmptyUpload("the upload holds no node records", unit=unit)
        return sink.table()
    except BaseException:
        interner.truncate(n0)
        raise

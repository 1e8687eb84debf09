"""A fast path for large, plain CSV tables: Apache Arrow's multi-threaded CSV reader and hash tables.

Numbering ids through a Python dict costs about half a microsecond a key on a table of
millions of distinct ids, which made reading a 10-million-row event table take longer than
projecting it. Arrow's reader parses blocks on every core and its dictionary encoding numbers
ids in C++ hash tables, in order of first appearance, like :class:`~.interner.Interner`.

The fast path never decides that an upload is bad. It applies to UTF-8 files without quote
or NUL characters, and it gives up (returns None) at anything the exact reader would refuse or
read differently: a missing or repeated column, a row with the wrong number of fields, bytes
that are not UTF-8, an empty or too long id, a number or a time it cannot read. The caller
then reads the file again with the exact reader, which finds the problem and its line. Both
readers give the same rows and the same numbering for every file the fast path accepts
(``tests/intake/test_arrow_csv.py``).
"""

from __future__ import annotations

from collections.abc import Sequence
from concurrent.futures import ThreadPoolExecutor
from typing import Any, BinaryIO

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pcsv
from numpy.typing import NDArray

from .interner import MAX_NODES, Interner

__all__ = ["FAST_BYTES", "plain_utf8", "read_string_columns", "intern_column", "intern_columns", "lengths"]

#: Bodies smaller than this are read by the exact reader (the fast path pays off on large files).
FAST_BYTES = 4 << 20
_SCAN = 16 << 20


def plain_utf8(fh: BinaryIO) -> bool:
    """True when the rest of the seekable file holds no double quote and no NUL byte.

    Reads the file once from its current position (C-level byte searches) and goes back.
    """
    start = fh.tell()
    try:
        while block := fh.read(_SCAN):
            if b'"' in block or b"\x00" in block:
                return False
        return True
    finally:
        fh.seek(start)


def read_string_columns(fh: BinaryIO, delimiter: str, names: Sequence[str], *,
                        threads: int) -> tuple[list[str], pa.Table] | None:
    """The header and the columns ``names`` (as text) of a plain CSV file; None to use the exact reader.

    ``fh`` is positioned after any byte-order mark. Columns of ``names`` absent from the
    header are left out of the table (the caller checks the header). None when the file
    cannot be read as-is: a repeated column name, a row with the wrong field count, bytes
    that are not UTF-8, no data rows.
    """
    start = fh.tell()
    first = fh.readline()
    fh.seek(start)
    try:
        header = first.decode("utf-8").rstrip("\r\n").split(delimiter)
    except UnicodeDecodeError:
        return None
    if len(set(header)) != len(header):
        return None
    wanted = [n for n in names if n in header]
    try:
        reader = pcsv.open_csv(
            fh,
            read_options=pcsv.ReadOptions(use_threads=threads > 1, block_size=1 << 22),
            parse_options=pcsv.ParseOptions(delimiter=delimiter, quote_char=False, newlines_in_values=False),
            convert_options=pcsv.ConvertOptions(
                include_columns=wanted, strings_can_be_null=False, quoted_strings_can_be_null=False,
                column_types={n: pa.string() for n in wanted}),
        )
        table = reader.read_all()
    except (pa.ArrowException, UnicodeDecodeError):
        return None
    return None if table.num_rows == 0 else (header, table)


def lengths(column: pa.ChunkedArray) -> tuple[int, int]:
    """The fewest and the most characters in one cell of a text column."""
    got = pc.min_max(pc.utf8_length(column)).as_py()
    return (0, 0) if got["min"] is None else (int(got["min"]), int(got["max"]))


def intern_columns(work: Sequence[tuple[Interner, pa.ChunkedArray]], *,
                   threads: int) -> list[NDArray[np.int32] | None]:
    """:func:`intern_column` of each (interner, column) pair, on up to ``threads`` threads at once
    (Arrow's hash tables release the GIL). The interners must be distinct."""
    if threads < 2 or len(work) < 2:
        return [intern_column(it, col) for it, col in work]
    with ThreadPoolExecutor(min(threads, len(work))) as pool:
        return list(pool.map(lambda pair: intern_column(*pair), work))


def intern_column(interner: Interner, column: pa.ChunkedArray) -> NDArray[np.int32] | None:
    """Number a column's ids with ``interner`` (new ids after the known ones, in order of first
    appearance), as :meth:`Interner.intern_many` would; None when there would be too many ids.

    Examples
    --------
    >>> it = Interner.from_ids(["bob"])
    >>> intern_column(it, pa.chunked_array([["ann", "bob"], ["cy", "ann"]])).tolist(), it.ids
    ([1, 0, 2, 1], ['bob', 'ann', 'cy'])
    """
    encoded = column.dictionary_encode()
    if encoded.num_chunks == 0:
        return np.empty(0, np.int32)
    uniques: pa.Array = encoded.chunk(0).dictionary  # one dictionary shared by every chunk
    n0 = len(interner)
    if n0:
        found = pc.index_in(uniques, value_set=pa.array(interner.ids, pa.string()))
        where = pc.fill_null(found, -1).to_numpy().astype(np.int64)
        fresh = where < 0
    else:
        fresh = np.ones(len(uniques), bool)
        where = np.zeros(len(uniques), np.int64)
    new = int(fresh.sum())
    if n0 + new > MAX_NODES:
        return None
    where[fresh] = n0 + np.arange(new, dtype=np.int64)
    interner.extend_new(uniques.filter(pa.array(fresh)).to_pylist() if n0 else uniques.to_pylist())
    codes = np.empty(len(column), np.int32)
    at = 0
    for chunk in encoded.chunks:
        idx: Any = chunk.indices.to_numpy(zero_copy_only=False)
        codes[at:at + idx.size] = where[idx]
        at += idx.size
    return codes

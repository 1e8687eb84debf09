"""CSV readers (RFC 4180) for edges and node attributes.

The body is read in blocks of about 64 KiB that end at a record boundary (a
newline outside quotes; quote parity tells which), so memory holds one block
plus the output arrays, never the whole body. Small blocks keep the Python
strings of a block (several times its size) few; they cost no speed. When
the body is a seekable file, its size sizes the edge buffers up front. A
block without any ``"`` is split with ``str.split`` and checked with numpy;
any other block goes through :mod:`csv`. Both paths give the same fields for the same input.
"""

from __future__ import annotations

import csv
import io
from collections.abc import Iterator
from itertools import chain
from typing import BinaryIO

import numpy as np

from .errors import EmptyUpload, InvalidEncoding, MissingColumn, UnknownColumn, UploadError
from .interner import Interner
from .limits import SizeLimits
from .tables import EdgeOptions, EdgeSink, EdgeTable, ExtraColumns, Fold, Locate, NodeSink, NodeTable

__all__ = ["read_edges_csv", "read_nodes_csv"]

BLOCK_BYTES = 1 << 16
_BOM = b"\xef\xbb\xbf"


def read_edges_csv(
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
    delimiter: str = ",",
    block_bytes: int = BLOCK_BYTES,
) -> EdgeTable:
    """Read edges from an RFC 4180 CSV file with a header row.

    Parameters
    ----------
    fh : binary file object, read from its current position.
    interner : numbers the node ids; new ids are added to it (on error it is
        restored to its state before the call).
    source, target : header names of the two endpoint columns.
    weight : header name of the weight column; by default a column named
        ``weight`` is used when there is one (otherwise every weight is 1).
    probability : likewise for explicit edge probabilities (``probability``).
    allow_self_loops : accept edges whose source equals their target.
    extra_columns : ``"error"`` refuses other columns, ``"ignore"`` skips them.
    limits : longest id (and label, value) accepted; the defaults of
        :class:`~service.intake.limits.SizeLimits` when None.
    fold : merges repeated edges as blocks arrive (the upload's duplicate
        rule), so memory follows distinct edges; None keeps every record.
    delimiter : the field separator, one character (``,`` ``;`` tab ``|``).
    block_bytes : read size; only tests change it.

    Returns
    -------
    EdgeTable

    Raises
    ------
    UploadError
        With the 1-based physical ``line`` of the record that failed (its
        first line when a quoted field spans several): broken quoting, wrong
        field count, empty id, a weight that is not a positive finite number,
        a probability outside [0, 1], a self-loop, invalid UTF-8 or a NUL
        character. :class:`MissingColumn` and :class:`UnknownColumn` point at
        the header; :class:`EmptyUpload` when there is no header or no row.

    Notes
    -----
    RFC 4180 [1]_ with the usual relaxations of :mod:`csv`: LF as well as
    CRLF line breaks (2.1), the last record may lack a line break (2.2),
    blank lines are skipped, a UTF-8 byte-order mark is skipped, and a quote
    inside an unquoted field is kept as a literal character (2.5). Ids are
    kept exactly (spaces included); numbers are parsed with Python's
    ``float`` (which allows surrounding spaces and ``1_000``).

    References
    ----------
    .. [1] Y. Shafranovich (2005). Common Format and MIME Type for
       Comma-Separated Values (CSV) Files. RFC 4180.

    Examples
    --------
    >>> import io
    >>> it = Interner()
    >>> t = read_edges_csv(io.BytesIO(b'source,target,weight\\nann,"b,ob",2\\n'), it)
    >>> t.src.tolist(), t.dst.tolist(), t.weight.tolist(), it.ids
    ([0], [1], [2.0], ['ann', 'b,ob'])
    """
    opts = EdgeOptions(source, target, weight, probability, allow_self_loops, extra_columns)
    n0 = len(interner)
    try:
        sink = EdgeSink(interner, opts, limits=limits, fold=fold)
        size, seen = _body_size(fh), 0
        blocks = _blocks(fh, block_bytes)
        header, hline, first = _header(blocks, delimiter)
        plan = _edge_plan(header, hline, opts)
        k = len(header)
        for raw, text, line0, quoted in chain(first, blocks):
            if size and seen < size and sink.records:
                # Room for the whole body at the first block's bytes per row
                # (plus a margin), so the buffers never grow by copies.
                sink.reserve(min(int(sink.records * size / seen * 1.05) + 1024, size // 2 + 1))
                size = 0
            seen += len(raw)
            flat = None if quoted else _plain_fields(raw, text, k, delimiter)
            if flat is None:
                rows, locate = _csv_rows(text, line0, delimiter)
                bad = next((i for i, r in enumerate(rows) if len(r) != k), -1)
                if bad >= 0:
                    _edge_block(sink, list(chain.from_iterable(rows[:bad])), k, plan, locate)
                    raise _field_count(locate(bad), k, len(rows[bad]))
                flat = list(chain.from_iterable(rows))
            else:
                locate = _plain_locator(line0)
            _edge_block(sink, flat, k, plan, locate)
        return sink.table()
    except BaseException:
        interner.truncate(n0)
        raise


def read_nodes_csv(
    fh: BinaryIO,
    interner: Interner,
    *,
    id: str = "id",  # noqa: A002 - the API's query parameter name
    limits: SizeLimits | None = None,
    delimiter: str = ",",
    block_bytes: int = BLOCK_BYTES,
) -> NodeTable:
    """Read node attributes from a CSV file with a header row.

    Columns ``segment``, ``region``, ``consent``, ``cost``, ``value`` and
    ``label`` are parsed (see :class:`NodeTable`); any other column is kept
    as text. An empty cell is a missing value. A repeated id: the last row wins.

    Raises
    ------
    UploadError
        With the line: bad consent word, negative or non-finite cost/value,
        empty id, wrong field count, broken quoting. :class:`MissingColumn`
        when the id column is absent; :class:`EmptyUpload` with no rows.

    Examples
    --------
    >>> import io
    >>> it = Interner.from_ids(["ann"])
    >>> t = read_nodes_csv(io.BytesIO(b"id,consent,cost\\nbob,yes,2\\nann,N,\\n"), it)
    >>> t.index.tolist(), t.consent.tolist(), t.cost.tolist(), t.columns
    ([1, 0], [1, 0], [2.0, nan], ('consent', 'cost'))
    """
    n0 = len(interner)
    try:
        sink = NodeSink(interner, id_column=id, limits=limits)
        blocks = _blocks(fh, block_bytes)
        header, hline, first = _header(blocks, delimiter)
        if id not in header:
            raise MissingColumn(
                f"missing required column {id!r}; header found: {', '.join(header)}",
                line=hline,
                column=id,
                header=tuple(header),
            )
        k = len(header)
        pos = header.index(id)
        for _, text, line0, _ in chain(first, blocks):
            reader = csv.reader(io.StringIO(text, newline=""), strict=True, delimiter=delimiter)
            prev = 0
            try:
                for row in reader:
                    line, prev = line0 + prev, reader.line_num
                    if not row:
                        continue
                    if len(row) != k:
                        raise _field_count(line, k, len(row))
                    values = dict(zip(header, row))
                    del values[id]
                    sink.add(row[pos], values, line)  # type: ignore[arg-type]
            except csv.Error as exc:
                raise UploadError(f"broken CSV: {exc}", line=line0 + reader.line_num - 1) from None
        if not sink.records:
            raise EmptyUpload("the upload holds no node rows")
        return sink.table()
    except BaseException:
        interner.truncate(n0)
        raise


# ------------------------------------------------------------------ blocks


def _body_size(fh: BinaryIO) -> int:
    """Bytes from the current position to the end of a seekable file; 0 when unknown."""
    try:
        if not fh.seekable():
            return 0
        pos = fh.tell()
        end = fh.seek(0, io.SEEK_END)
        fh.seek(pos)
    except (AttributeError, OSError, ValueError):
        return 0
    return max(int(end) - int(pos), 0)


Block = tuple[bytes, str, int, bool]  # raw bytes, text, first line, has a quote


def _blocks(fh: BinaryIO, size: int) -> Iterator[Block]:
    """Yield blocks of whole records, each ending in a newline."""
    pieces: list[bytes] = []
    quotes = 0  # quote characters in ``pieces``: odd means inside a quoted field
    line = 1
    data = fh.read(size)
    while data and len(data) < len(_BOM) and _BOM.startswith(data):
        more = fh.read(size)
        if not more:
            break
        data += more
    if data.startswith(_BOM):
        data = data[len(_BOM) :]
    while True:
        if not data:
            if pieces:
                raw = b"".join(pieces)
                if not raw.endswith(b"\n"):
                    raw += b"\n"
                yield raw, _decode(raw, line), line, quotes > 0
            return
        cut = data.rfind(b"\n") + 1
        head_quotes = data.count(b'"', 0, cut)
        if cut == 0 or (quotes + head_quotes) % 2:
            pieces.append(data)
            quotes += data.count(b'"')
        else:
            raw = b"".join((*pieces, data[:cut])) if pieces else data[:cut]
            yield raw, _decode(raw, line), line, quotes + head_quotes > 0
            line += raw.count(b"\n")
            rest = data[cut:]
            pieces = [rest] if rest else []
            quotes = rest.count(b'"')
        data = fh.read(size)


def _decode(raw: bytes, line: int) -> str:
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        bad = raw[exc.start : exc.start + 4]
        raise InvalidEncoding(
            "not valid UTF-8", line=line + raw.count(b"\n", 0, exc.start), value=repr(bad)
        ) from None
    if "\x00" in text:
        at = raw.index(b"\x00")
        raise UploadError("NUL character not allowed", line=line + raw.count(b"\n", 0, at))
    return text


def _header(blocks: Iterator[Block], delimiter: str) -> tuple[list[str], int, list[Block]]:
    """The header row, its line, and the rest of its block (as a one-block list)."""
    for raw, text, line0, quoted in blocks:
        sio = io.StringIO(text, newline="")
        reader = csv.reader(iter(sio.readline, ""), strict=True, delimiter=delimiter)
        prev = 0
        try:
            for row in reader:
                if row:
                    break
                prev = reader.line_num
            else:
                continue
        except csv.Error as exc:
            raise UploadError(f"broken CSV: {exc}", line=line0 + reader.line_num - 1) from None
        if len(set(row)) != len(row):
            dup = next(c for c in row if row.count(c) > 1)
            raise UploadError("duplicate column name", line=line0 + prev, column=dup)
        at = sio.tell()
        rest = text[at:]
        head_bytes = len(text[:at].encode("utf-8"))
        tail: list[Block] = []
        if rest:
            tail.append((raw[head_bytes:], rest, line0 + reader.line_num, '"' in rest))
        return row, line0 + prev, tail
    raise EmptyUpload("the upload is empty (no header row)")


def _plain_fields(raw: bytes, text: str, k: int, delimiter: str) -> list[str] | None:
    """Split a block without quotes; None when a line has the wrong field count."""
    b = np.frombuffer(raw, dtype=np.uint8)
    ends = np.flatnonzero(b == 10)
    commas = np.flatnonzero(b == ord(delimiter))
    per_line = np.diff(np.searchsorted(commas, ends), prepend=0)
    if not bool(np.all(per_line == k - 1)):
        return None  # blank lines or a bad row: let the csv path find the line
    if "\r" in text:
        text = text.replace("\r\n", "\n")
        if "\r" in text:
            return None  # a bare CR is a line break to csv; let it decide
    flat = text.replace("\n", delimiter).split(delimiter)
    flat.pop()  # the empty string after the final newline
    return flat


def _plain_locator(line0: int) -> Locate:
    return lambda i: line0 + i


def _csv_rows(text: str, line0: int, delimiter: str) -> tuple[list[list[str]], Locate]:
    """Rows of a block (blank lines dropped) and their first physical lines."""
    reader = csv.reader(io.StringIO(text, newline=""), strict=True, delimiter=delimiter)
    try:
        rows = list(reader)
    except csv.Error as exc:
        raise UploadError(f"broken CSV: {exc}", line=line0 + reader.line_num - 1) from None

    def locate(i: int) -> int:
        again = csv.reader(io.StringIO(text, newline=""), strict=True, delimiter=delimiter)
        prev, j = 0, -1
        for row in again:
            j += bool(row)
            if j == i:
                return line0 + prev
            prev = again.line_num
        return line0 + prev

    if [] in rows:
        rows = [r for r in rows if r]
    return rows, locate


def _field_count(line: int, k: int, got: int) -> UploadError:
    return UploadError(f"expected {k} fields like the header, found {got}", line=line)


# ------------------------------------------------------------------ edges


def _edge_plan(
    header: list[str], line: int, opts: EdgeOptions
) -> tuple[int, int, int | None, int | None]:
    """Positions of source, target, weight and probability in the header."""
    missing = [c for c in (opts.source, opts.target) if c not in header]
    missing += [c for c in (opts.weight, opts.probability) if c is not None and c not in header]
    if missing:
        names = ", ".join(repr(c) for c in missing)
        raise MissingColumn(
            f"missing required column{'s' if len(missing) > 1 else ''} {names}; "
            f"header found: {', '.join(header)}",
            line=line,
            column=missing[0],
            header=tuple(header),
        )
    unknown = [c for c in header if c not in opts.known]
    if unknown and opts.extra_columns == "error":
        raise UnknownColumn(
            f"unknown column{'s' if len(unknown) > 1 else ''} "
            f"{', '.join(repr(c) for c in unknown)}; expected "
            f"{opts.source}, {opts.target}, {opts.weight_column}, {opts.probability_column} "
            "(or pass extra_columns=ignore)",
            line=line,
            column=unknown[0],
            header=tuple(header),
        )
    wc, pc = opts.weight_column, opts.probability_column
    return (
        header.index(opts.source),
        header.index(opts.target),
        header.index(wc) if wc in header else None,
        header.index(pc) if pc in header else None,
    )


def _edge_block(
    sink: EdgeSink,
    flat: list[str],
    k: int,
    plan: tuple[int, int, int | None, int | None],
    locate: Locate,
) -> None:
    si, ti, wi, pi = plan
    rows = len(flat) // k
    if not rows:
        return
    ids: list[str] = [""] * (2 * rows)
    ids[0::2] = flat[si::k]
    ids[1::2] = flat[ti::k]
    sink.add(
        ids,
        None if wi is None else flat[wi::k],
        None if pi is None else flat[pi::k],
        locate,
    )

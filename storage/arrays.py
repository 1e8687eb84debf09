"""Numpy arrays stored as chunked binary rows.

Versions and results keep their large arrays (edges, weights, scores) as
raw little-endian bytes split into chunks of at most ``CHUNK_BYTES``, well
under SQLite's and PostgreSQL's 1 GB value limits, and small enough that
writing or reading an array adds only a few chunks to the memory it takes.
Reading back is one query per array copying chunks into place: no
per-element Python work.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import NDArray
from sqlalchemy import insert, select
from sqlalchemy.orm import Session

from .models import ResultArray, VersionArray

__all__ = ["CHUNK_BYTES", "write_arrays", "read_array", "read_arrays", "encode_strings", "decode_strings"]

CHUNK_BYTES = 1024 * 1024
ArrayTable = type[VersionArray] | type[ResultArray]


def _owner_column(table: ArrayTable) -> str:
    return "version_id" if table is VersionArray else "job_id"


def write_arrays(
    db: Session, table: ArrayTable, owner: str, arrays: dict[str, NDArray[Any]]
) -> dict[str, dict[str, Any]]:
    """Insert each array in chunks; return the manifest (dtype and length per name).

    Chunks are views of the array, not copies, and small: the database driver
    copies a bound value once more, so the memory a write adds on top of the
    arrays themselves is a few chunks, whatever the array's size.
    """
    manifest: dict[str, dict[str, Any]] = {}
    key = _owner_column(table)
    for name, arr in arrays.items():
        a = np.ascontiguousarray(arr)
        dt = a.dtype.newbyteorder("<") if a.dtype.byteorder == ">" else a.dtype
        raw = a.astype(dt, copy=False).data.cast("B")
        for i, off in enumerate(range(0, max(len(raw), 1), CHUNK_BYTES)):
            db.execute(
                insert(table), {key: owner, "name": name, "seq": i, "data": raw[off : off + CHUNK_BYTES]}
            )
        manifest[name] = {"dtype": dt.str, "length": int(a.shape[0])}
    return manifest


def read_array(
    db: Session, table: ArrayTable, owner: str, name: str, manifest: dict[str, Any]
) -> NDArray[Any]:
    """Read one array named in ``manifest`` back (read-only).

    Chunks are copied into the array as they arrive, so reading holds the
    array plus about one chunk, not every chunk and then their concatenation.
    """
    meta = manifest[name]
    dtype = np.dtype(meta["dtype"])
    key = getattr(table, _owner_column(table))
    chunks = db.execute(
        select(table.data).where(key == owner, table.name == name).order_by(table.seq)
    ).scalars()
    nbytes = int(meta["length"]) * dtype.itemsize
    out = np.empty(nbytes, dtype=np.uint8)
    at = 0
    for chunk in chunks:
        size = len(chunk)
        if at + size > nbytes:
            raise ValueError(f"array {name!r} of {owner} is longer than its manifest says")
        out[at : at + size] = np.frombuffer(chunk, dtype=np.uint8)
        at += size
        del chunk
    if at != nbytes:
        raise ValueError(f"array {name!r} of {owner} is truncated")
    arr: NDArray[Any] = out.view(dtype)
    arr.flags.writeable = False
    return arr


def read_arrays(
    db: Session, table: ArrayTable, owner: str, manifest: dict[str, Any], names: list[str]
) -> dict[str, NDArray[Any]]:
    return {n: read_array(db, table, owner, n, manifest) for n in names if n in manifest}


def encode_strings(values: list[str]) -> NDArray[np.uint8]:
    """Join strings with NUL as one UTF-8 byte array (ids never contain NUL)."""
    return np.frombuffer("\x00".join(values).encode("utf-8"), dtype=np.uint8)


def decode_strings(raw: NDArray[np.uint8], count: int) -> list[str]:
    if count == 0:
        return []
    out = raw.tobytes().decode("utf-8").split("\x00")
    if len(out) != count:
        raise ValueError(f"expected {count} strings, found {len(out)}")
    return out

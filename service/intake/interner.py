"""The caller's string node ids <-> dense node indices ``0..n-1``."""

from __future__ import annotations

from collections.abc import Iterable
from itertools import repeat

import numpy as np
from numpy.typing import NDArray

from .errors import UploadError

__all__ = ["Interner", "MAX_NODES"]

MAX_NODES = 2**31 - 1  # indices are stored as int32


class Interner:
    """Number node ids densely, in order of first appearance.

    Ids are any non-empty Unicode strings, kept exactly as given (no
    stripping or case folding). An append upload starts from the previous
    version's ids with :meth:`from_ids`, so old nodes keep their numbers and
    new ones are numbered after them.

    Attributes
    ----------
    ids : ``ids[i]`` is the caller's id of node ``i``.
    index : the inverse map, id -> node index.

    Examples
    --------
    >>> it = Interner.from_ids(["ann", "bob"])
    >>> it.intern("cy"), it.intern("ann")
    (2, 0)
    >>> it.intern_many(["bob", "dee", "cy"]).tolist()
    [1, 3, 2]
    >>> it.ids
    ['ann', 'bob', 'cy', 'dee']
    """

    __slots__ = ("ids", "_index")

    def __init__(self) -> None:
        self.ids: list[str] = []
        self._index: dict[str, int] | None = {}

    @property
    def index(self) -> dict[str, int]:
        """The map id -> index, built when first needed after :meth:`trusted` or :meth:`extend_new`."""
        if self._index is None:
            self._index = dict(zip(self.ids, range(len(self.ids))))
        return self._index

    @index.setter
    def index(self, value: dict[str, int]) -> None:
        self._index = value

    @classmethod
    def from_ids(cls, ids: Iterable[str]) -> Interner:
        """Start from a previous version's ids (index ``i`` is ``ids[i]``).

        Raises
        ------
        ValueError
            An id is repeated or empty: the previous version was not built
            by an interner.
        """
        it = cls()
        it.ids = list(ids)
        it.index = dict(zip(it.ids, range(len(it.ids))))
        if len(it.index) != len(it.ids) or "" in it.index:
            raise ValueError("ids must be unique and non-empty")
        return it

    @classmethod
    def trusted(cls, ids: Iterable[str]) -> Interner:
        """Start from ids known to be unique and non-empty (a stored version's), unchecked.

        The map from id to index is built only if a lookup needs it: a dict of millions of
        ids takes seconds to build.
        """
        it = cls()
        it.ids = list(ids)
        it._index = None
        return it

    def extend_new(self, ids: list[str]) -> None:
        """Number ``ids``, known to be new, unique and non-empty, after the existing ones."""
        self._index = None  # rebuilt if a lookup needs it
        self.ids.extend(ids)

    def __len__(self) -> int:
        return len(self.ids)

    def __contains__(self, s: object) -> bool:
        return s in self.index

    def get(self, s: str) -> int | None:
        """The index of ``s``, or None when it is not known (nothing is added)."""
        return self.index.get(s)

    def intern(self, s: str) -> int:
        """The index of ``s``, numbering it next when it is new."""
        i = self.index.get(s)
        if i is None:
            if not s:
                raise UploadError("empty node id")
            i = len(self.ids)
            if i >= MAX_NODES:
                raise UploadError(f"more than {MAX_NODES} distinct node ids")
            self.index[s] = i
            self.ids.append(s)
        return i

    def intern_many(self, keys: list[str]) -> NDArray[np.int32]:
        """Intern ``keys`` in order; return their indices as int32.

        The caller checks for empty ids first (it knows the line numbers);
        an empty id reaching here is still refused.

        Notes
        -----
        Built from C-level passes, no Python loop per key: one lookup per key
        in the map, then ``dict.fromkeys`` numbers the misses in order of
        first appearance.
        """
        index = self.index
        codes = np.fromiter(map(index.get, keys, repeat(-1)), dtype=np.int64, count=len(keys))
        miss = np.flatnonzero(codes < 0)
        if miss.size:
            missing = [keys[i] for i in miss.tolist()]
            fresh = dict.fromkeys(missing)  # in order of first appearance
            if "" in fresh:
                raise UploadError("empty node id")
            n0 = len(self.ids)
            if n0 + len(fresh) > MAX_NODES:
                raise UploadError(f"more than {MAX_NODES} distinct node ids")
            index.update(zip(fresh, range(n0, n0 + len(fresh))))
            self.ids.extend(fresh)
            codes[miss] = np.fromiter(map(index.__getitem__, missing), np.int64, len(missing))
        return codes.astype(np.int32)

    def copy(self) -> Interner:
        """An independent copy (ids are shared strings, the containers are not)."""
        it = Interner()
        it.ids = list(self.ids)
        it._index = None if self._index is None else dict(self._index)
        return it

    def truncate(self, n: int) -> None:
        """Forget every id numbered ``n`` or later (undo a failed read)."""
        if self._index is not None:
            for s in self.ids[n:]:
                del self._index[s]
        del self.ids[n:]

    def compact(self, keep: NDArray[np.bool_]) -> Interner:
        """A new interner holding only the ids where ``keep`` is true, renumbered.

        Matches :func:`service.intake.merge.remove_nodes`, which compacts the
        graph's indices the same way.
        """
        keep = np.asarray(keep, dtype=bool)
        if keep.shape != (len(self.ids),):
            raise ValueError(f"keep must have length {len(self.ids)}")
        return Interner.from_ids([self.ids[i] for i in np.flatnonzero(keep).tolist()])

"""The per-process caches, under one byte bound.

Graph versions and job results are immutable, so whatever is derived from one
can be kept by its id and shared by every request and job of the process; it
is never stale. Five caches do that, named ``<what>_cache``:

- :data:`version_cache`: a version's graph, ids and attributes (:mod:`service.usecases.loading`),
  keyed by version id;
- :data:`index_cache`: the recommendation neighbour index (:mod:`service.usecases.indexes`),
  keyed by version id;
- :data:`measure_cache`: per-node follow-on measures (:mod:`service.usecases.indexes`),
  keyed by ``(version id, measure)``;
- :data:`diffusion_cache`: diffusion arrays (:mod:`service.usecases.diffusion_inputs`),
  keyed by version id and probability settings;
- :data:`ranking_cache`: stored score arrays and orders derived from them
  (:mod:`service.usecases._ranking_tables`), keyed by result id and what was derived.

They are views of one :class:`ByteLRU` store, so one bound covers them all:
``Settings.cache_bytes``, passed to :func:`set_max_bytes` when the API process
or a worker starts. Past the bound the least recently used entry of any cache
goes first; an entry larger than the whole bound is handed to its caller but
not kept. Each missing entry is built once: concurrent callers of the same key
wait for that build, and a failed build is not kept (each waiter gets the
error, the next caller tries again). Sizes are approximate: the bytes of the
numpy arrays an entry holds (see :func:`nbytes`).
"""

from __future__ import annotations

import dataclasses
import threading
from collections import OrderedDict
from collections.abc import Callable, Hashable
from concurrent.futures import Future
from typing import TYPE_CHECKING, Any, Generic, NamedTuple, TypeVar

import numpy as np

if TYPE_CHECKING:
    from numpy.typing import NDArray

    from service.analytics.graph import DiffusionGraph
    from service.analytics.ties.strength import NeighbourIndex
    from service.usecases.loading import LoadedVersion

__all__ = [
    "DEFAULT_CACHE_BYTES",
    "ByteLRU",
    "NamedCache",
    "CacheInfo",
    "nbytes",
    "store",
    "set_max_bytes",
    "clear_all",
    "version_cache",
    "index_cache",
    "measure_cache",
    "diffusion_cache",
    "ranking_cache",
]

#: The default of ``Settings.cache_bytes`` (see there for why 2 GiB).
DEFAULT_CACHE_BYTES = 2 * 1024**3
#: Size counted for a cached value that holds no arrays (a small dict or object).
OTHER_VALUE_BYTES = 1024

K = TypeVar("K", bound=Hashable)
V = TypeVar("V")


def nbytes(value: Any) -> int:
    """Approximate bytes held by a cached value.

    A numpy array counts its ``nbytes``; an object with an ``nbytes()`` method
    counts what that says; tuples (named ones too) and dataclasses count their
    members; numbers, strings and None count nothing (their arrays dominate);
    anything else counts :data:`OTHER_VALUE_BYTES`.
    """
    if isinstance(value, np.ndarray):
        return int(value.nbytes)
    own = getattr(value, "nbytes", None)
    if callable(own):
        return int(own())
    if isinstance(value, tuple):
        return sum(nbytes(v) for v in value)
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return sum(nbytes(v) for v in vars(value).values())
    if value is None or isinstance(value, (bool, int, float, str, bytes)):
        return 0
    return OTHER_VALUE_BYTES


class CacheInfo(NamedTuple):
    """One cache's entries and bytes now, and its builds and hits so far."""

    entries: int
    nbytes: int
    builds: int
    hits: int


class _Counts:
    __slots__ = ("entries", "nbytes", "builds", "hits")

    def __init__(self) -> None:
        self.entries = self.nbytes = self.builds = self.hits = 0


class ByteLRU:
    """A thread-safe least-recently-used store bounded by bytes; each entry built once.

    Keys are ``(cache name, key)`` pairs of immutable ids. ``max_bytes`` 0
    keeps nothing (every call builds).
    """

    def __init__(self, max_bytes: int) -> None:
        if max_bytes < 0:
            raise ValueError("max_bytes must be 0 or more")
        self._max_bytes = max_bytes
        self._lock = threading.Lock()
        self._items: OrderedDict[tuple[str, Hashable], tuple[Any, int]] = OrderedDict()
        self._building: dict[tuple[str, Hashable], Future[Any]] = {}
        self._counts: dict[str, _Counts] = {}
        self._total = 0

    @property
    def max_bytes(self) -> int:
        return self._max_bytes

    @property
    def total_bytes(self) -> int:
        """Bytes held by every entry now."""
        with self._lock:
            return self._total

    def set_max_bytes(self, max_bytes: int) -> None:
        """Change the bound; entries past it go at once, least recently used first."""
        if max_bytes < 0:
            raise ValueError("max_bytes must be 0 or more")
        with self._lock:
            self._max_bytes = max_bytes
            self._evict()

    def get(self, name: str, key: Hashable, build: Callable[[], V], size: Callable[[V], int]) -> V:
        """The entry ``key`` of cache ``name``, built by ``build()`` when missing."""
        full = (name, key)
        with self._lock:
            counts = self._counts.setdefault(name, _Counts())
            hit = self._items.get(full)
            if hit is not None:
                self._items.move_to_end(full)
                counts.hits += 1
                return hit[0]  # type: ignore[no-any-return]
            pending = self._building.get(full)
            owner = pending is None
            if pending is None:
                pending = self._building[full] = Future()
        if not owner:
            return pending.result()  # type: ignore[no-any-return]
        try:
            value = build()
            n = max(int(size(value)), 0)
        except BaseException as exc:  # not kept: the next caller tries again
            with self._lock:
                self._building.pop(full, None)
            pending.set_exception(exc)
            raise
        with self._lock:
            counts.builds += 1
            self._building.pop(full, None)
            if n <= self._max_bytes:
                self._items[full] = (value, n)
                self._total += n
                counts.entries += 1
                counts.nbytes += n
                self._evict()
        pending.set_result(value)
        return value

    def _evict(self) -> None:
        """Drop least recently used entries until the total fits (lock held)."""
        while self._total > self._max_bytes and self._items:
            (name, _), (_, n) = self._items.popitem(last=False)
            self._total -= n
            counts = self._counts[name]
            counts.entries -= 1
            counts.nbytes -= n

    def contains(self, name: str, key: Hashable) -> bool:
        with self._lock:
            return (name, key) in self._items

    def info(self, name: str) -> CacheInfo:
        with self._lock:
            c = self._counts.get(name) or _Counts()
            return CacheInfo(c.entries, c.nbytes, c.builds, c.hits)

    def clear(self, name: str | None = None) -> None:
        """Forget the entries of cache ``name`` (every cache when None); counters stay."""
        with self._lock:
            for full in [k for k in self._items if name is None or k[0] == name]:
                _, n = self._items.pop(full)
                self._total -= n
                counts = self._counts[full[0]]
                counts.entries -= 1
                counts.nbytes -= n


class NamedCache(Generic[K, V]):
    """One named cache: a view of a :class:`ByteLRU` store with its own way of sizing values."""

    def __init__(self, store: ByteLRU, name: str, size: Callable[[V], int] = nbytes) -> None:
        self.store = store
        self.name = name
        self._size = size

    def get(self, key: K, build: Callable[[], V]) -> V:
        """The entry ``key``; ``build()`` makes it when missing (once, however many wait)."""
        return self.store.get(self.name, key, build, self._size)

    def __contains__(self, key: object) -> bool:
        return self.store.contains(self.name, key)

    def info(self) -> CacheInfo:
        return self.store.info(self.name)

    def clear(self) -> None:
        self.store.clear(self.name)


def _index_nbytes(index: NeighbourIndex) -> int:
    from service.usecases.indexes import index_nbytes  # the scratch arrays depend on the compute pool

    return index_nbytes(index)


#: The one store of this process; its bound is ``Settings.cache_bytes``.
store = ByteLRU(DEFAULT_CACHE_BYTES)
version_cache: NamedCache[str, LoadedVersion] = NamedCache(store, "version")
index_cache: NamedCache[str, NeighbourIndex] = NamedCache(store, "index", _index_nbytes)
measure_cache: NamedCache[tuple[str, str], NDArray[np.float64]] = NamedCache(store, "measure")
diffusion_cache: NamedCache[Hashable, DiffusionGraph] = NamedCache(store, "diffusion")
ranking_cache: NamedCache[Hashable, Any] = NamedCache(store, "ranking")


def set_max_bytes(max_bytes: int) -> None:
    """Bound every cache of this process together (``Settings.cache_bytes``, at start)."""
    store.set_max_bytes(max_bytes)


def clear_all() -> None:
    """Forget every cached entry of this process (tests)."""
    store.clear()

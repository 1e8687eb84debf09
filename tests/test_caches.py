"""The shared per-process cache store: LRU order, one byte bound, build once, threads."""

from __future__ import annotations

import threading
from dataclasses import dataclass
from typing import Any, NamedTuple

import numpy as np
import pytest

from service.usecases import caches
from service.usecases.caches import ByteLRU, NamedCache, nbytes


def blob(n: int) -> np.ndarray[Any, np.dtype[np.uint8]]:
    return np.zeros(n, dtype=np.uint8)


def test_least_recently_used_goes_first_across_caches() -> None:
    store = ByteLRU(300)
    a: NamedCache[str, Any] = NamedCache(store, "a")
    b: NamedCache[str, Any] = NamedCache(store, "b")
    a.get("1", lambda: blob(100))
    b.get("1", lambda: blob(100))
    a.get("2", lambda: blob(100))
    a.get("1", lambda: blob(100))  # a/1 is now the most recent; b/1 the least
    b.get("2", lambda: blob(100))  # 400 bytes: one must go
    assert "1" in a and "2" in a and "2" in b and "1" not in b
    assert store.total_bytes == 300
    assert a.info() == caches.CacheInfo(entries=2, nbytes=200, builds=2, hits=1)
    assert b.info() == caches.CacheInfo(entries=1, nbytes=100, builds=2, hits=0)


def test_byte_bound_counts_bytes_not_entries() -> None:
    store = ByteLRU(1000)
    c: NamedCache[int, Any] = NamedCache(store, "c")
    for i in range(10):
        c.get(i, lambda: blob(100))
    assert c.info().entries == 10 and store.total_bytes == 1000
    c.get(10, lambda: blob(550))  # pushes out the six oldest (100 each) to fit
    assert [i for i in range(11) if i in c] == [6, 7, 8, 9, 10]
    assert store.total_bytes == 950
    store.set_max_bytes(600)  # a lower bound evicts at once
    assert [i for i in range(11) if i in c] == [10] and store.total_bytes == 550


def test_oversize_entry_is_returned_but_not_kept() -> None:
    store = ByteLRU(100)
    c: NamedCache[str, Any] = NamedCache(store, "c")
    c.get("small", lambda: blob(60))
    big = c.get("big", lambda: blob(101))
    assert big.nbytes == 101
    assert "big" not in c and "small" in c  # the small one was not pushed out for nothing
    again = c.get("big", lambda: blob(101))
    assert again is not big and c.info().builds == 3
    off = ByteLRU(0)  # 0 keeps nothing
    d: NamedCache[str, Any] = NamedCache(off, "d")
    d.get("x", lambda: blob(1))
    assert "x" not in d and off.total_bytes == 0


def test_failed_build_is_not_kept() -> None:
    store = ByteLRU(1000)
    c: NamedCache[str, Any] = NamedCache(store, "c")
    calls = []

    def fail() -> Any:
        calls.append(1)
        raise RuntimeError("boom")

    for _ in range(2):
        with pytest.raises(RuntimeError):
            c.get("k", fail)
    assert len(calls) == 2 and "k" not in c
    assert c.get("k", lambda: blob(10)).nbytes == 10


def test_concurrent_callers_of_one_key_share_one_build() -> None:
    store = ByteLRU(10_000)
    c: NamedCache[str, Any] = NamedCache(store, "c")
    calls: list[int] = []
    release = threading.Event()
    start = threading.Barrier(8)
    got: list[Any] = []

    def build() -> Any:
        calls.append(1)
        release.wait(5)
        return blob(10)

    def ask() -> None:
        start.wait()
        got.append(c.get("k", build))

    threads = [threading.Thread(target=ask) for _ in range(8)]
    for t in threads:
        t.start()
    while not calls:  # one thread is building; the others are waiting for it
        threading.Event().wait(0.001)
    release.set()
    for t in threads:
        t.join()
    assert len(calls) == 1 and len(got) == 8 and all(x is got[0] for x in got)


def test_many_threads_keep_the_bound_and_the_books() -> None:
    store = ByteLRU(2_000)
    c: NamedCache[int, Any] = NamedCache(store, "c")

    def work(seed: int) -> None:
        rng = np.random.default_rng(seed)
        for k in rng.integers(0, 50, size=400).tolist():
            assert c.get(k, lambda k=k: np.full(100, k % 256, dtype=np.uint8))[0] == k % 256

    threads = [threading.Thread(target=work, args=(s,)) for s in range(8)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    info = c.info()
    assert store.total_bytes <= 2_000 and info.nbytes == store.total_bytes == 100 * info.entries
    assert info.builds + info.hits <= 8 * 400 and info.builds >= 50


def test_clear_one_cache_leaves_the_others() -> None:
    store = ByteLRU(1000)
    a: NamedCache[str, Any] = NamedCache(store, "a")
    b: NamedCache[str, Any] = NamedCache(store, "b")
    a.get("k", lambda: blob(10))
    b.get("k", lambda: blob(20))
    a.clear()
    assert "k" not in a and "k" in b and store.total_bytes == 20


def test_sizes_count_the_arrays_held() -> None:
    class Pair(NamedTuple):
        n: int
        x: np.ndarray[Any, np.dtype[np.float64]]

    @dataclass
    class Holder:
        pair: Pair
        label: str
        other: dict[str, int]

    class Sized:
        def nbytes(self) -> int:
            return 77

    pair = Pair(3, np.zeros(4))
    assert nbytes(pair) == 32
    assert nbytes(Holder(pair, "x", {})) == 32 + caches.OTHER_VALUE_BYTES
    assert nbytes((pair, Sized())) == 32 + 77


def test_the_process_caches_share_one_store() -> None:
    named = [caches.version_cache, caches.index_cache, caches.measure_cache,
             caches.diffusion_cache, caches.ranking_cache]
    assert all(c.store is caches.store for c in named)
    assert len({c.name for c in named}) == len(named)


def test_the_setting_bounds_the_process_store(tmp_path: Any) -> None:
    from service.settings import Settings

    assert Settings().cache_bytes == caches.DEFAULT_CACHE_BYTES
    before = caches.store.max_bytes
    try:
        from service.app import create_app

        app = create_app(Settings(data_dir=tmp_path, cache_bytes=12345,
                                  database_url=f"sqlite:///{tmp_path / 'db.sqlite3'}"))

        async def start() -> None:
            async with app.router.lifespan_context(app):
                assert caches.store.max_bytes == 12345

        import asyncio

        asyncio.run(start())
    finally:
        caches.set_max_bytes(before)

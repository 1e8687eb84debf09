"""Work in bounded chunks: sizes measured so one chunk takes about a quarter second,
and a memory limit that growing buffers check before they grow.

Long compiled loops hold the interpreter (and many hold the GIL) until they
return, so nothing else in the process runs meanwhile: not the
``progress(fraction, message)`` callback through which a job is cancelled,
not a signal handler. Every long loop therefore runs in chunks, and
:class:`ChunkSizer` picks each chunk's size from how long the previous one
took: it starts small, grows at most fourfold a step while chunks are
quick, and shrinks in proportion when one was slow, so a chunk takes about
``target`` seconds whatever the graph or the machine. The kernels carry
their random state across calls, so the chunked result equals one call over
all the work (the tests hold both equal for fixed seeds).

:data:`memory_limit` is the bytes one computation may hold in its large
buffers (None: no limit). The job worker sets it per job; buffers that grow
with the request (RR-set stores, per-run simulation arrays) call
:func:`check_memory` before they grow and raise :class:`TooExpensive`
instead of being killed by the operating system.

:data:`thread_limit` is the number of threads one computation may use (None:
every core the process may run on, :func:`usable_cores`). The job worker sets
it per job from its setting, as it sets :data:`memory_limit`; functions that
take ``threads=`` fall back to it through :func:`thread_count`. Work is split
into contiguous index ranges, one per thread, run by :func:`map_ordered` in one
process-wide pool of threads (the compiled loops release the GIL), and the parts
are merged in index order, so results never depend on the thread count. Where
parts of equal size take unequal time (RR sets vary in size, and on a shared
virtual machine one core may run slower than the other), :func:`map_shared` cuts
the work into several pieces per thread, which the threads take in turn.
"""

from __future__ import annotations

import os
import threading
import time
from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor
from contextvars import ContextVar
from typing import TypeVar

from .errors import InvalidParameter, TooExpensive

__all__ = [
    "ChunkSizer", "TARGET_SECONDS", "memory_limit", "check_memory", "run_chunked",
    "thread_limit", "usable_cores", "thread_count", "split_range", "map_ordered", "map_shared",
]

T = TypeVar("T")

#: Seconds one chunk should take: well under the one second in which a job
#: must reach a progress (and cancel) point.
TARGET_SECONDS = 0.25

memory_limit: ContextVar[int | None] = ContextVar("bellwether_memory_limit", default=None)
thread_limit: ContextVar[int | None] = ContextVar("bellwether_thread_limit", default=None)

#: Most threads a computation may ask for: more parts than this only add bookkeeping.
MAX_THREADS = 256


class ChunkSizer:
    """Sizes of consecutive chunks of work so that one takes about ``target`` seconds.

    Examples
    --------
    >>> s = ChunkSizer(first=10)
    >>> s.next(1000)
    10
    >>> s.took(10, 0.0001)
    >>> s.next(1000)
    40
    >>> s.took(40, 1.0)
    >>> s.next(1000)
    10
    """

    def __init__(self, *, first: int = 16, target: float = TARGET_SECONDS, most: int = 1 << 40) -> None:
        self.size = max(1, int(first))
        self.target = target
        self.most = most

    def next(self, left: int) -> int:
        """The size of the next chunk (at most ``left``)."""
        return max(1, min(self.size, self.most, int(left)))

    def took(self, size: int, seconds: float) -> None:
        """Record that a chunk of ``size`` took ``seconds``."""
        if seconds <= 0:
            factor = 4.0
        else:
            factor = min(4.0, max(0.1, self.target / seconds))
        if size < self.size and factor > 1:  # a short last chunk says little about a full one
            return
        self.size = max(1, min(self.most, int(size * factor)))


def run_chunked(total: int, step: Callable[[int, int], None], *,
                after: Callable[[int], None] | None = None, first: int = 16,
                target: float = TARGET_SECONDS) -> None:
    """Call ``step(start, count)`` over ``0 .. total - 1`` in timed chunks, then ``after(done)``."""
    sizer = ChunkSizer(first=first, target=target)
    done = 0
    while done < total:
        count = sizer.next(total - done)
        t0 = time.perf_counter()
        step(done, count)
        sizer.took(count, time.perf_counter() - t0)
        done += count
        if after is not None:
            after(done)


def check_memory(nbytes: float, *, what: str, relax: str) -> None:
    """Raise :class:`TooExpensive` when ``nbytes`` passes the current :data:`memory_limit`."""
    limit = memory_limit.get()
    if limit is not None and nbytes > limit:
        raise TooExpensive(
            f"{what} would need about {_mib(nbytes)} of memory, more than this service allows "
            f"one job ({_mib(limit)}); {relax}",
            estimated_bytes=int(nbytes), limit_bytes=int(limit),
        )


def _mib(nbytes: float) -> str:
    if nbytes >= 1 << 30:
        return f"{nbytes / (1 << 30):.1f} GiB"
    return f"{nbytes / (1 << 20):.0f} MiB"


def usable_cores() -> int:
    """The cores this process may run on (its CPU affinity), at least 1."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):  # not Linux
        return max(1, os.cpu_count() or 1)


def thread_count(threads: int | None = None) -> int:
    """``threads`` checked, else :data:`thread_limit`, else :func:`usable_cores`."""
    if threads is None:
        threads = thread_limit.get()
    if threads is None:
        return usable_cores()
    if isinstance(threads, bool) or not isinstance(threads, int) or not 1 <= threads <= MAX_THREADS:
        raise InvalidParameter(f"threads must be a whole number from 1 to {MAX_THREADS}, "
                               f"got {threads!r}", field="threads")
    return threads


def split_range(start: int, count: int, parts: int) -> list[tuple[int, int]]:
    """``start .. start + count - 1`` as at most ``parts`` contiguous (first, count)
    pieces of near-equal size, in order (none empty)."""
    parts = max(1, min(parts, count))
    base, extra = divmod(count, parts)
    out = []
    first = start
    for i in range(parts):
        c = base + (1 if i < extra else 0)
        if c:
            out.append((first, c))
        first += c
    return out


_POOLS: dict[int, ThreadPoolExecutor] = {}
_POOL_PREFIX = "bellwether-compute"


def _pool() -> ThreadPoolExecutor:
    # One pool per process: a pool inherited through fork has no live threads.
    pid = os.getpid()
    pool = _POOLS.get(pid)
    if pool is None:
        _POOLS.clear()
        pool = _POOLS[pid] = ThreadPoolExecutor(
            max_workers=max(2, usable_cores()), thread_name_prefix=_POOL_PREFIX)
    return pool


def map_ordered(fn: Callable[..., T], calls: Sequence[tuple[object, ...]]) -> list[T]:
    """``[fn(*args) for args in calls]``, the calls run at once in the shared pool
    (the last one in the calling thread), results in the order of ``calls``.

    ``fn`` should spend its time in compiled code that releases the GIL. Called
    from a thread of the pool itself, the calls run one after the other in that
    thread (waiting on the pool from inside it could wait forever). An exception
    of any call is raised after all have finished.
    """
    if len(calls) <= 1 or threading.current_thread().name.startswith(_POOL_PREFIX):
        return [fn(*args) for args in calls]
    pool = _pool()
    futures = [pool.submit(fn, *args) for args in calls[:-1]]
    try:
        last = fn(*calls[-1])
    finally:
        done = [f.exception() for f in futures]  # wait for all before raising
    for f, exc in zip(futures, done):
        if exc is not None:
            raise exc
    return [f.result() for f in futures] + [last]


def map_shared(fn: Callable[..., T], calls: Sequence[tuple[object, ...]], workers: int) -> list[T]:
    """``[fn(w, *args) for args in calls]`` run by ``workers`` threads of the shared pool,
    each taking the next call not yet taken, results in the order of ``calls``.

    ``w`` is the number (0 .. workers-1) of the thread running the call, so ``fn`` can use
    that thread's buffers; which thread runs which call varies from run to run, so a
    call's result must depend on its arguments only. A thread that finishes early takes
    more calls instead of waiting for a slower one. After a call fails no new call
    starts, and a failure is raised once all threads have stopped.
    """
    workers = max(1, min(workers, len(calls)))
    out: list[T | None] = [None] * len(calls)
    order = iter(range(len(calls)))
    lock = threading.Lock()
    failed: list[BaseException] = []

    def worker(w: int) -> None:
        while not failed:
            with lock:
                i = next(order, -1)
            if i < 0:
                return
            try:
                out[i] = fn(w, *calls[i])
            except BaseException as exc:
                failed.append(exc)
                raise

    map_ordered(worker, [(w,) for w in range(workers)])
    return out  # type: ignore[return-value]  # every slot was filled: no call failed

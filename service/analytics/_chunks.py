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
"""

from __future__ import annotations

import time
from collections.abc import Callable
from contextvars import ContextVar

from .errors import TooExpensive

__all__ = ["ChunkSizer", "TARGET_SECONDS", "memory_limit", "check_memory", "run_chunked"]

#: Seconds one chunk should take: well under the one second in which a job
#: must reach a progress (and cancel) point.
TARGET_SECONDS = 0.25

memory_limit: ContextVar[int | None] = ContextVar("bellwether_memory_limit", default=None)


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

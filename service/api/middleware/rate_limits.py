"""Rate limits on ``/v1``: a token bucket per presented bearer key, per client address when there is none.

``per_second`` tokens are refilled up to ``burst``; an empty bucket answers
429 ``rate-limited`` with ``Retry-After``. The key is hashed before it names a
bucket. Buckets live in the process: with M API processes a key gets up to M
times the rate (README, Operations). A rate of 0 turns the limit off.
"""

from __future__ import annotations

import hashlib
import math
import threading
import time
from collections import OrderedDict
from collections.abc import Callable

from starlette.types import ASGIApp, Receive, Scope, Send

from ..errors import RateLimited
from ._asgi import header, send_problem

__all__ = ["RateLimits", "TokenBuckets"]


class TokenBuckets:
    """Token buckets by key: ``rate`` tokens a second, at most ``burst`` held.

    At most ``max_keys`` buckets are kept; the least recently used go first
    (a forgotten bucket comes back full, which only ever favours the caller).
    """

    def __init__(
        self, rate: float, burst: int, *, max_keys: int = 10_000, clock: Callable[[], float] = time.monotonic
    ) -> None:
        self.rate = float(rate)
        self.burst = float(max(burst, 1))
        self.max_keys = max_keys
        self.clock = clock
        self._buckets: OrderedDict[str, tuple[float, float]] = OrderedDict()
        self._lock = threading.Lock()

    def take(self, key: str) -> float:
        """Spend one token; return 0.0 when allowed, else the seconds until one is available."""
        now = self.clock()
        with self._lock:
            tokens, last = self._buckets.pop(key, (self.burst, now))
            tokens = min(self.burst, tokens + (now - last) * self.rate)
            if tokens >= 1.0:
                wait, tokens = 0.0, tokens - 1.0
            else:
                wait = (1.0 - tokens) / self.rate
            self._buckets[key] = (tokens, now)
            while len(self._buckets) > self.max_keys:
                self._buckets.popitem(last=False)
        return wait


def bucket_key(scope: Scope) -> str:
    """``key:<hash>`` for a bearer key, else ``ip:<client address>``."""
    scheme, _, credential = (header(scope, b"authorization") or "").partition(" ")
    if scheme.lower() == "bearer" and credential.strip():
        return "key:" + hashlib.sha256(credential.strip().encode()).hexdigest()[:32]
    return f"ip:{(scope.get('client') or (None, None))[0]}"


class RateLimits:
    """Pure ASGI middleware: see the module docstring."""

    def __init__(self, app: ASGIApp, *, per_second: float, burst: int) -> None:
        self.app = app
        self.per_second = float(per_second)
        self.burst = burst
        self.buckets = TokenBuckets(self.per_second, burst) if self.per_second > 0 else None

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if self.buckets is None or scope["type"] != "http" or not scope.get("path", "").startswith("/v1"):
            await self.app(scope, receive, send)
            return
        wait = self.buckets.take(bucket_key(scope))
        if wait > 0:
            retry_after = max(1, math.ceil(wait))
            error = RateLimited(
                f"more than {self.per_second:g} requests a second "
                f"(burst {self.burst}) for this API key; retry in {retry_after} s",
                retry_after=retry_after,
            )
            await send_problem(scope, send, error, {"Retry-After": str(retry_after)})
            return
        await self.app(scope, receive, send)

"""Job kinds for tests only, registered on import.

Worker subprocesses see them through the setting ``job_kind_modules``
(``["tests.jobs.kinds"]``), with the repository root as working directory.
"""

from __future__ import annotations

import os
import time
from collections.abc import Callable
from typing import Any, Literal

import numpy as np
from numba import njit
from pydantic import BaseModel, ConfigDict, Field

from service.analytics.errors import InvalidParameter
from service.jobs.kinds import JobKind, TaskContext, TaskOutput
from service.jobs.registry import register

__all__ = ["HOOKS", "SleepParams", "FailParams", "HookParams", "SpinParams"]

# name -> callable(ctx) run by the ``test_hook`` kind (in-process tests only).
HOOKS: dict[str, Callable[[TaskContext], Any]] = {}


def _log(marker_dir: str | None, line: str) -> None:
    if marker_dir:
        # One short O_APPEND write per line: lines from several processes do not interleave.
        fd = os.open(os.path.join(marker_dir, "runs.log"), os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o644)
        try:
            os.write(fd, (line + "\n").encode())
        finally:
            os.close(fd)


class SleepParams(BaseModel):
    model_config = ConfigDict(extra="forbid")

    seconds: float = Field(default=0.0, ge=0, le=60)
    steps: int = Field(default=1, ge=1, le=1000)
    marker_dir: str | None = None
    random_seed: int = 0


def run_sleep(ctx: TaskContext, p: SleepParams) -> TaskOutput:
    _log(p.marker_dir, f"start {ctx.job_id} {os.getpid()}")
    for i in range(p.steps):
        ctx.progress(i / p.steps, f"step {i}")
        time.sleep(p.seconds / p.steps)
    _log(p.marker_dir, f"done {ctx.job_id} {os.getpid()}")
    return TaskOutput(data={"slept": p.seconds, "steps": p.steps}, arrays={"steps": np.arange(p.steps)})


class FailParams(BaseModel):
    model_config = ConfigDict(extra="forbid")

    error: Literal["transient", "invalid"] = "transient"


def run_fail(ctx: TaskContext, p: FailParams) -> TaskOutput:
    if p.error == "invalid":
        raise InvalidParameter("alpha must be in (0, 1)", field="alpha", value=2)
    raise OSError("disk on fire")


class HookParams(BaseModel):
    model_config = ConfigDict(extra="forbid")

    hook: str


def run_hook(ctx: TaskContext, p: HookParams) -> TaskOutput:
    out = HOOKS[p.hook](ctx)
    return out if isinstance(out, TaskOutput) else TaskOutput(data={"hook": p.hook})


class GraphParams(BaseModel):
    model_config = ConfigDict(extra="forbid")

    random_seed: int = 0


def run_graph(ctx: TaskContext, p: GraphParams) -> TaskOutput:
    v = ctx.load()
    deg = np.bincount(np.concatenate([v.graph.src, v.graph.dst]), minlength=v.graph.n)
    ctx.progress(1.0, "counted")
    return TaskOutput(
        data={"n": v.graph.n, "m": v.graph.m, "max_degree": deg.max(), "mean": float(deg.mean())},
        arrays={"degree": deg.astype(np.int64)},
    )


class SpinParams(BaseModel):
    model_config = ConfigDict(extra="forbid")

    iterations: int = Field(default=10**12, ge=1)
    marker_dir: str | None = None


@njit(cache=True)
def _spin(iterations):  # type: ignore[no-untyped-def]
    """A compiled loop that holds the GIL and never reaches a progress point (xorshift steps)."""
    x = np.uint64(88172645463325252)
    for _ in range(iterations):
        x ^= x << np.uint64(13)
        x ^= x >> np.uint64(7)
        x ^= x << np.uint64(17)
    return x


def run_spin(ctx: TaskContext, p: SpinParams) -> TaskOutput:
    """Stands for a kernel that ignores SIGTERM: no Python signal handler runs until it returns."""
    _spin(10)  # compile (or load from the cache) before saying it started
    _log(p.marker_dir, f"start {ctx.job_id} {os.getpid()}")
    return TaskOutput(data={"x": int(_spin(p.iterations))})


for _kind in (
    JobKind("test_spin", SpinParams, run_spin, "spin in a kernel (tests)", "x", needs_graph=False),
    JobKind("test_sleep", SleepParams, run_sleep, "sleep (tests)", "slept", needs_graph=False),
    JobKind("test_fail", FailParams, run_fail, "fail (tests)", "never", needs_graph=False),
    JobKind("test_hook", HookParams, run_hook, "hook (tests)", "anything", needs_graph=False),
    JobKind("test_graph", GraphParams, run_graph, "degrees (tests)", "n, m, degree array"),
):
    register(_kind, replace=True)

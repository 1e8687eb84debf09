"""Benchmark: how often long loops reach a progress (cancel) point, and what the chunks cost.

Run:  python -m tests.bench.bench_cancel_points [--datasets ca-HepTh,com-DBLP]

For each dataset in ``../shared/datasets`` (skipped with a message when that
folder is absent), each long loop is run twice, side by side: in one call (the
chunk helper replaced by one that hands over all the work at once) and in the
timed chunks the service uses (``service.analytics._chunks``, target 0.25 s).
Printed per loop: seconds in one call, seconds chunked, the ratio chunked /
one call (the cost of returning to Python), the number of progress calls and
the longest gap between two of them, from the call to the first progress point
(set-up included) to the return (how long a cancel can wait). Every kernel is
compiled (or loaded from numba's cache) on ca-GrQc first. The work per loop is
sized to seconds on this machine (2 shared cores).
"""

from __future__ import annotations

import argparse
import time
from collections.abc import Callable
from typing import Any

import numpy as np

from service.analytics import _chunks
from service.analytics.seeding import _rr
from service.analytics.diffusion import forecasts
from service.analytics.structure import paths
from service.analytics.structure import profile
from service.analytics.seeding._rr import RRCollection, RRSampler
from service.analytics.seeding._rr_kernels import stream_key
from service.analytics.graph import GraphArrays, diffusion_graph
from tests.datasets import DATASETS, snap_graph

DIRECTED = {"ca-HepTh": False, "com-DBLP": False, "wiki-Vote": True, "soc-Slashdot0902": True}


class _Whole:
    def __init__(self, **_: Any) -> None:
        pass

    def next(self, left: int) -> int:
        return max(1, left)

    def took(self, size: int, seconds: float) -> None:
        pass


def _one_call(total: int, step: Callable[[int, int], None], *, after: Any = None, **_: Any) -> None:
    if total:
        step(0, total)
    if after is not None:
        after(total)


def _timed(fn: Callable[[Callable[[float, str], None]], Any]) -> tuple[float, int, float]:
    stamps: list[float] = []
    t0 = time.perf_counter()
    fn(lambda f, m: stamps.append(time.perf_counter()))
    t1 = time.perf_counter()
    marks = [t0, *stamps, t1]
    return t1 - t0, len(stamps), max(b - a for a, b in zip(marks, marks[1:]))


def _loops(g: GraphArrays) -> dict[str, tuple[Callable[..., Any], list[tuple[Any, str, Any]]]]:
    dg = diffusion_graph(g, scheme="weighted_cascade")

    def rr(progress: Callable[[float, str], None]) -> None:
        RRCollection(RRSampler(dg), stream_key(0, 1)).extend_to(400_000, progress=progress)

    return {
        "sampled betweenness (eps 0.02)": (
            lambda p: paths.betweenness(g, method="sampled", epsilon=0.02, progress=p),
            [(paths, "run_chunked", _one_call)]),
        "harmonic closeness (every node)": (
            lambda p: paths.harmonic_closeness(g, progress=p),
            [(paths, "run_chunked", _one_call)]),
        "BFS distances (500 sources)": (
            lambda p: profile.sample_distances(g, samples=500, progress=p),
            [(profile, "run_chunked", _one_call)]),
        "forecast (100,000 simulations)": (
            lambda p: forecasts.forecast(dg, {"a": np.arange(10)}, simulations=100_000,
                                         min_simulations=100_000, progress=p),
            [(forecasts, "ChunkSizer", _Whole)]),
        "RR sets (400,000, weighted cascade)": (rr, [(_rr, "ChunkSizer", _Whole)]),
    }


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--datasets", default="ca-HepTh,com-DBLP")
    args = ap.parse_args()
    if not DATASETS.exists():
        print(f"skipped: {DATASETS} not found (the open datasets live outside the project)")
        return
    print(f"chunk target {_chunks.TARGET_SECONDS} s")
    small, _ = snap_graph("ca-GrQc", directed=False)
    for fn, _patches in _loops(small).values():  # compile or load every kernel first
        fn(lambda f, m: None)
    for name in args.datasets.split(","):
        g, _ = snap_graph(name, directed=DIRECTED.get(name, False))
        print(f"\n{name}: n = {g.n:,}, m = {g.m:,}")
        print(f"{'loop':38s} {'one call s':>10s} {'chunked s':>10s} {'ratio':>6s} {'calls':>6s} {'longest gap s':>13s}")
        for label, (fn, patches) in _loops(g).items():
            if label.startswith("harmonic") and g.n > 30_000:
                print(f"{label:38s} {'(skipped: all-pairs work on this size)':>49s}")
                continue
            saved = [(mod, attr, getattr(mod, attr)) for mod, attr, _ in patches]
            for mod, attr, repl in patches:
                setattr(mod, attr, repl)
            try:
                whole, _, _ = _timed(fn)
            finally:
                for mod, attr, orig in saved:
                    setattr(mod, attr, orig)
            chunked, calls, gap = _timed(fn)
            print(f"{label:38s} {whole:10.2f} {chunked:10.2f} {chunked / whole:6.2f} {calls:6d} {gap:13.3f}")


if __name__ == "__main__":
    main()

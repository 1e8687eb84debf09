"""Benchmark: simulation on common worlds against the sequential-stream kernel.

Run:  python -m tests.bench.bench_worlds [--runs 2000] [--repeats 2]

Forecasts and the shortlist's paired comparison run on
``service.analytics.diffusion._world_kernels`` (random numbers keyed on run and node, so
every seed set sees the same live-edge worlds); ``service.analytics.diffusion._kernels``
draws them in the order the cascade meets the arcs. Both simulate the same
graph from the same 50 top out-degree seeds, all threads, per-node counts on,
in one process, alternately; printed: the best time of each, their ratio
(worlds / sequential) and both mean reaches (they must agree within Monte
Carlo error). Graphs from ../shared/datasets (skipped when absent):
soc-Slashdot0902 as listed under weighted cascade and under uniform p = 0.01
(geometric skipping), email-Enron both directions under Linear Threshold with
normalised weights.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from service.analytics.diffusion import _kernels as K
from service.analytics.diffusion import _world_kernels as W
from service.analytics.graph import diffusion_graph
from tests.datasets import DATASETS, snap_graph

CASES = [
    ("soc-Slashdot0902", True, {"scheme": "weighted_cascade"}),
    ("soc-Slashdot0902", True, {"scheme": "uniform", "p": 0.01}),
    ("email-Enron", False, {"scheme": "normalized", "model": "lt"}),
]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=2000)
    ap.add_argument("--repeats", type=int, default=2)
    args = ap.parse_args()
    for name, directed, kw in CASES:
        if not (DATASETS / f"{name}.edges.gz").exists():
            print(f"{name}: skipped, not found in {DATASETS}")
            continue
        g, _ = snap_graph(name, directed=directed)
        dg = diffusion_graph(g, **kw)  # type: ignore[arg-type]
        kg = K.kernel_graph(dg)
        seeds = np.argsort(-np.diff(dg.out_indptr), kind="stable")[:50].astype(np.int32)
        none = np.zeros(0)
        kernels = {"sequential": K.simulate, "worlds": W.simulate}
        for f in kernels.values():  # compile / warm
            f(kg, seeds, 1, 0, 20, -1, none)
        best = {lab: float("inf") for lab in kernels}
        mean = {}
        for _ in range(args.repeats):
            for lab, f in kernels.items():
                t0 = time.perf_counter()
                r = f(kg, seeds, 1, 0, args.runs, -1, none)
                best[lab] = min(best[lab], time.perf_counter() - t0)
                mean[lab] = (float(r.reach.mean()), float(r.reach.std(ddof=1) / np.sqrt(args.runs)))
        setting = ", ".join(f"{k}={v}" for k, v in kw.items())
        print(f"{name} ({setting}), {args.runs} runs: sequential {best['sequential']:.2f} s "
              f"(reach {mean['sequential'][0]:,.1f} +- {mean['sequential'][1]:.1f}), worlds "
              f"{best['worlds']:.2f} s (reach {mean['worlds'][0]:,.1f} +- {mean['worlds'][1]:.1f}); "
              f"ratio worlds/sequential {best['worlds'] / best['sequential']:.2f}")


if __name__ == "__main__":
    main()

"""Benchmark: bytes per arc a worker holds for one graph, by structure.

Run:  python -m tests.bench.bench_memory [--dataset com-DBLP]

Loads an open dataset (../shared/datasets) as a stored-version-like graph and
measures, with tracemalloc (numpy allocations are traced) and the process's
resident size, what each structure a job builds costs per arc: the edge arrays,
the diffusion CSR arrays (both orientations), igraph's graph, and the
recommendation index. README quotes these figures for sizing.
"""

from __future__ import annotations

import argparse
import gc
import sys
import tracemalloc

from service.analytics.graph import arcs, diffusion_graph, to_igraph
from service.analytics.ties import neighbour_index
from tests.datasets import DATASETS, snap_graph


def rss_mib() -> float:
    with open("/proc/self/status") as fh:
        for line in fh:
            if line.startswith("VmRSS:"):
                return int(line.split()[1]) / 1024
    return float("nan")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--dataset", default="com-DBLP")
    ap.add_argument("--directed", action="store_true")
    args = ap.parse_args()
    if not DATASETS.exists():
        sys.exit(f"open datasets not found at {DATASETS}")
    g, _ = snap_graph(args.dataset, directed=args.directed)
    n_arcs = arcs(g).src.shape[0]
    print(f"{args.dataset}: {g.n:,} nodes, {g.m:,} edges, {n_arcs:,} arcs")
    edge_bytes = g.src.nbytes + g.dst.nbytes + g.weight.nbytes
    print(f"edge arrays (stored version): {edge_bytes / n_arcs:.1f} bytes per arc ({edge_bytes / g.m:.1f} per edge)")
    for name, build in (
        ("diffusion CSR (both orientations)", lambda: diffusion_graph(g, scheme="weighted_cascade")),
        ("recommendation index", lambda: neighbour_index(g)),
    ):
        gc.collect()
        tracemalloc.start()
        obj = build()
        current, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        print(f"{name}: {current / n_arcs:.1f} bytes per arc held, {peak / n_arcs:.1f} at peak while building")
        del obj
    # Peak memory of a forecast (issue goal: <= 2x the CSR arrays plus the per-node results).
    import numpy as np

    from service.analytics.forecasts import forecast

    dg = diffusion_graph(g, scheme="weighted_cascade")
    csr_bytes = sum(a.nbytes for a in (dg.out_indptr, dg.out_indices, dg.out_prob,
                                      dg.in_indptr, dg.in_indices, dg.in_prob))
    per_node = 16 * g.n  # activation counts (int64) and probabilities (float64) per node
    seeds = np.argsort(-np.bincount(arcs(g).src, minlength=g.n))[:50].astype(np.int32)
    forecast(dg, {"warm": seeds[:2]}, simulations=20, min_simulations=20)
    gc.collect()
    tracemalloc.start()
    forecast(dg, {"top50": seeds}, simulations=1000, min_simulations=1000)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    print(f"forecast, 1,000 simulations from 50 seeds: peak {peak / 2**20:.1f} MiB beyond the graph; "
          f"CSR arrays {csr_bytes / 2**20:.1f} MiB, per-node results {per_node / 2**20:.1f} MiB")
    total = csr_bytes + peak  # the CSR arrays are held throughout; the peak is what the forecast adds
    print(f"RATIO forecast peak memory (CSR arrays + forecast's own peak) / (CSR arrays + per-node results) = "
          f"{total / (csr_bytes + per_node):.2f} (goal <= 2)")
    del dg
    gc.collect()
    before = rss_mib()
    ig = to_igraph(g)
    after = rss_mib()
    print(f"igraph graph with weights: {(after - before) * 2**20 / n_arcs:.1f} bytes per arc (resident growth)")
    del ig


if __name__ == "__main__":
    main()

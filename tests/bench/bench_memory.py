"""Benchmark: bytes per arc a worker holds for one graph, by structure; upload memory by format.

Run:  python -m tests.bench.bench_memory [--dataset com-DBLP]
      python -m tests.bench.bench_memory --uploads [--scale 0.01]

Loads an open dataset (../shared/datasets) as a stored-version-like graph and
measures, with tracemalloc (numpy allocations are traced) and the process's
resident size, what each structure a job builds costs per arc: the edge arrays,
the diffusion CSR arrays (both orientations), igraph's graph, and the
recommendation index. README quotes these figures for sizing.

``--uploads`` measures instead the API process's peak memory growth while it
takes one upload, for three bodies in one run (each in a fresh ``bellwether
serve`` on loopback, after a small warm-up upload of the same format, with
the peak reset just before the measured upload):

(a) 25.7 million CSV rows over about a thousand distinct edges (200 MB),
(b) the same rows as one JSON document (``{"edges": [...]}``),
(c) 10 million distinct edges as CSV.

Each growth is set against the final version's edge arrays (src and dst
int32, weight float64: 16 bytes an edge). Goal: growth <= 3 x edge arrays +
64 MiB, whatever the body. ``--scale`` shrinks the row counts for a quick run.
"""

from __future__ import annotations

import argparse
import gc
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np

from service.analytics.graph import arcs, diffusion_graph, to_igraph
from service.analytics.ties.strength import neighbour_index
from tests.datasets import DATASETS, snap_graph


def rss_mib() -> float:
    with open("/proc/self/status") as fh:
        for line in fh:
            if line.startswith("VmRSS:"):
                return int(line.split()[1]) / 1024
    return float("nan")


UPLOAD_CASES = (
    # name, format, rows, distinct edges wanted (None: every row its own edge)
    ("(a) CSV, 25.7M rows over ~1k distinct edges", "csv", 25_700_000, 1000),
    ("(b) JSON, the same rows", "json", 25_700_000, 1000),
    ("(c) CSV, 10M distinct edges", "csv", 10_000_000, None),
)
CTYPE = {"csv": "text/csv", "json": "application/json"}


def write_body(path: Path, fmt: str, rows: int, distinct: int | None, seed: int = 3) -> None:
    """Rows drawn from ``distinct`` random pairs over 200 people, or ``rows`` distinct edges."""
    rng = np.random.default_rng(seed)
    if distinct is not None:
        pairs_s = rng.integers(0, 200, distinct)
        pairs_d = (pairs_s + 1 + rng.integers(0, 199, distinct)) % 200
    n = max(rows // 10, 2)
    step = 1_000_000
    with open(path, "w") as fh:
        fh.write("source,target,weight\n" if fmt == "csv" else '{"edges": [\n')
        for lo in range(0, rows, step):
            hi = min(lo + step, rows)
            if distinct is not None:
                pick = rng.integers(0, distinct, hi - lo)
                s, d = pairs_s[pick], pairs_d[pick]
            else:  # edge i: (i // 10, a distinct partner): every pair differs
                i = np.arange(lo, hi)
                s = i // 10
                d = (s + 1 + i % 10 * (n // 11 + 1)) % n
            w = rng.integers(1, 20, hi - lo)
            if fmt == "csv":
                fh.write("".join(f"person-{a},person-{b},{c}\n" for a, b, c in zip(s.tolist(), d.tolist(), w.tolist())))
            else:
                sep = "" if lo == 0 else ",\n"
                fh.write(sep + ",\n".join(
                    f'{{"source": "person-{a}", "target": "person-{b}", "weight": {c}}}'
                    for a, b, c in zip(s.tolist(), d.tolist(), w.tolist())
                ))
        if fmt == "json":
            fh.write("\n]}\n")


def upload_memory(scale: float) -> None:
    """Peak API memory growth per upload body, against the final edge arrays (see the module notes)."""
    import httpx

    from tests.bench.bench_intake import reset_peak, rss_kib, server_pid
    from tests.live import live_server

    tmp = Path(tempfile.mkdtemp(prefix="bw-upmem-"))
    print(f"upload memory, scale {scale:g} (1 = the full row counts of the module notes)")
    results = []
    for name, fmt, rows, distinct in UPLOAD_CASES:
        rows = max(int(rows * scale), 1000)
        body = tmp / f"body.{fmt}"
        warm = tmp / f"warm.{fmt}"
        write_body(body, fmt, rows, distinct)
        write_body(warm, fmt, 2000, 50, seed=4)
        data = tmp / f"data-{len(results)}"
        data.mkdir()
        with live_server(data, workers=0) as base, httpx.Client(base_url=base, timeout=3600) as c:
            for path, label in ((warm, "warm-up"), (body, "bench")):
                gid = c.post("/v1/graphs", json={"name": label, "directed": True}).json()["id"]
                if label == "bench":
                    pid = server_pid(data)
                    reset = reset_peak(pid)
                    before = rss_kib(pid, "VmRSS") if reset else max(rss_kib(pid, "VmRSS"), rss_kib(pid, "VmHWM"))
                    t0 = time.perf_counter()
                with open(path, "rb") as fh:
                    r = c.post(f"/v1/graphs/{gid}/versions", content=fh, headers={"Content-Type": CTYPE[fmt]})
                assert r.status_code == 201, r.text[:500]
            seconds = time.perf_counter() - t0
            peak = rss_kib(pid, "VmHWM")
        made = r.json()
        m = int(made["edges"])
        edge_bytes = 16 * m
        growth = (peak - before) * 1024
        goal = 3 * edge_bytes + 64 * 2**20
        size_mb = body.stat().st_size / 1e6
        results.append((name, growth, edge_bytes, goal))
        print(f"{name}: {rows:,} rows, {size_mb:,.0f} MB body, {m:,} edges in the version, "
              f"{made['origin'].get('duplicates_merged', 0):,} repeats merged; upload {seconds:.1f} s")
        print(f"    peak growth {growth / 2**20:,.1f} MiB; edge arrays {edge_bytes / 2**20:,.2f} MiB; "
              f"RATIO growth / edge arrays = {growth / edge_bytes:,.2f}; "
              f"RATIO growth / (3 x edge arrays + 64 MiB) = {growth / goal:.2f} (goal <= 1)"
              + ("" if reset else "; peak not resettable, taken as is"))
        body.unlink()
    worst = max(g / goal for _, g, _, goal in results)
    print(f"RATIO worst growth / (3 x edge arrays + 64 MiB) over the three bodies = {worst:.2f} (goal <= 1)")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--dataset", default="com-DBLP")
    ap.add_argument("--directed", action="store_true")
    ap.add_argument("--uploads", action="store_true", help="measure upload memory by format instead")
    ap.add_argument("--scale", type=float, default=1.0, help="row counts times this (with --uploads)")
    args = ap.parse_args()
    if args.uploads:
        upload_memory(args.scale)
        return
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
    # Peak memory of a forecast (goal: <= 2x the CSR arrays plus the per-node results).

    from service.analytics.diffusion.forecasts import forecast

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

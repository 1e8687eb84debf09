"""Benchmark: the Independent Cascade kernel against the C reference, and forecasts through the queue.

Run:  python -m tests.bench.bench_diffusion [--graphs ca-GrQc,soc-Slashdot0902,com-DBLP]
                                            [--seconds 1] [--repeats 3] [--queue-runs 15] [--skip-queue]

1. Kernel throughput. ``../shared/bench/rr_limit.c`` (found beside the project
   root; never copied here) is compiled into a temporary folder with
   ``gcc -O3 -march=native`` and run in IC simulation mode (``-m ic``), weighted
   cascade, seeds the 50 top out-degree nodes (``-k 50``), on each graph. In the
   same run our compiled kernel (``service.analytics.diffusion._kernels.run_chunk``, one
   thread, no per-node tracking: what the C program measures) simulates the same
   graph from the same seeds (ties in out-degree broken by the smaller original
   id, as the C program does). Printed: simulations/s and edges examined/s of
   each, the ratio ours/C against the fastest C method valid for the model
   (coin, simd and their interleaved variants; skipping does not apply to
   weighted cascade's unequal out-arc probabilities), both mean spreads (they
   must agree within their standard errors), our full forecast path
   (``forecast()``: all cores, per-node counts) and a plain Python loop.
   Graphs as in ../shared/bench/README.md's table: ca-GrQc both directions,
   soc-Slashdot0902 and com-DBLP as listed.
2. Forecast through the queue: a real ``bellwether serve --workers 1`` on
   loopback, wiki-Vote (103,689 arcs) uploaded as CSV, then ``--queue-runs``
   times: POST a ``forecast`` job (50 top out-degree seeds, weighted cascade,
   exactly 1,000 simulations), then ``GET /v1/jobs/{id}?wait=10``; the time from
   POST to the finished answer, for the first job (fresh worker: version load,
   diffusion graph build; kernels are loaded when the worker starts) and the
   repeated ones, once with the current settings and once with the idle
   polling the worker had before (0.2 s doubling to 2 s, set through the
   ``BELLWETHER_JOB_POLL_*`` variables printed), to show what it costs.

Machines are noisy (2 shared cores here): the C program and ours are measured
alternately in ``--repeats`` rounds, and the ratio is the median of the
per-round ratios.
"""

from __future__ import annotations

import argparse
import gzip
import json
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from collections import deque
from datetime import datetime
from pathlib import Path
from typing import Any

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
SHARED = ROOT.parent / "shared"
C_SOURCE = SHARED / "bench" / "rr_limit.c"
DATASETS = SHARED / "datasets"
# name -> undirected (both directions) as in ../shared/bench/README.md's table
GRAPHS = {"ca-GrQc": True, "soc-Slashdot0902": False, "com-DBLP": False}
IC_METHODS = "coin,simd,coinb,simdb"
# The idle polling before this benchmark was written (0.2 s doubling to 2 s), for comparison.
OLD_POLL = {"BELLWETHER_JOB_POLL_SECONDS": "0.2", "BELLWETHER_JOB_POLL_MAX_SECONDS": "2.0"}


def need_shared() -> None:
    missing = [p for p in (C_SOURCE, DATASETS) if not p.exists()]
    if missing:
        sys.exit(f"bench_diffusion: {', '.join(map(str, missing))} not found; this benchmark needs the "
                 f"shared folder beside the project root ({SHARED}), which is not part of the project.")
    if shutil.which("gcc") is None:
        sys.exit("bench_diffusion: gcc not found; it compiles the C reference")


def build_reference(folder: Path) -> Path:
    exe = folder / "rr_limit"
    cmd = ["gcc", "-O3", "-march=native", "-o", str(exe), str(C_SOURCE), "-lm"]
    subprocess.run(cmd, check=True)
    print("built C reference:", " ".join(cmd[:-4]), "<tmp>/rr_limit", C_SOURCE.relative_to(SHARED.parent), "-lm")
    return exe


def run_reference(exe: Path, path: Path, undirected: bool, seconds: float, repeats: int) -> dict[str, Any]:
    cmd = [str(exe), "-m", "ic", "-M", IC_METHODS, "-k", "50", "-T", str(seconds), "-r", str(repeats), "-p", "wc"]
    cmd += (["-u"] if undirected else []) + [str(path)]
    out = subprocess.run(cmd, check=True, capture_output=True, text=True).stdout
    rows = [json.loads(line[5:]) for line in out.splitlines() if line.startswith("JSON ")]
    load = next(r for r in rows if r["kind"] == "load")
    ics = [r for r in rows if r["kind"] == "ic"]
    best = max(ics, key=lambda r: r["sims_per_s"])
    return {"load": load, "methods": ics, "best": best, "cmd": " ".join(["rr_limit", *cmd[1:-1], path.name])}


# ------------------------------------------------------------------ our side


def load_graph(name: str, undirected: bool) -> tuple[Any, np.ndarray]:
    """GraphArrays as the C program reads the file: ids compacted ascending, self-loops dropped, merged."""
    from service.analytics.graph import GraphArrays

    with gzip.open(DATASETS / f"{name}.edges.gz", "rt") as fh:
        e = np.loadtxt(fh, comments="#", dtype=np.int64).reshape(-1, 2)
    ids, inv = np.unique(e.ravel(), return_inverse=True)
    inv = inv.reshape(-1, 2)
    inv = inv[inv[:, 0] != inv[:, 1]]
    n = len(ids)
    src, dst = inv[:, 0], inv[:, 1]
    if undirected:
        lo, hi = np.minimum(src, dst), np.maximum(src, dst)
        key = np.unique(lo * n + hi)
    else:
        key = np.unique(src * n + dst)
    g = GraphArrays(n, not undirected, (key // n).astype(np.int32), (key % n).astype(np.int32), np.ones(len(key)))
    return g, ids


def top_out_degree(dg: Any, k: int = 50) -> np.ndarray:
    outdeg = np.diff(dg.out_indptr)
    return np.lexsort((np.arange(dg.n), -outdeg))[:k].astype(np.int32)  # ties: smaller original id


def calibrate(kg: Any, seeds: np.ndarray, seconds: float) -> int:
    """Runs that take about ``seconds`` with one thread."""
    from service.analytics.diffusion import _kernels as K

    n = 10
    while True:
        t0 = time.perf_counter()
        K.run_chunk(kg, seeds, 1, 0, n, -1, np.zeros(0), track_nodes=False)
        dt = time.perf_counter() - t0
        if dt > 0.2:
            return max(10, int(n / dt * seconds))
        n *= 4


def time_ours(kg: Any, seeds: np.ndarray, runs: int, run0: int) -> float:
    """Simulations per second of one thread (``run_chunk``, no per-node counts)."""
    from service.analytics.diffusion import _kernels as K

    t0 = time.perf_counter()
    K.run_chunk(kg, seeds, 1, run0, runs, -1, np.zeros(0), track_nodes=False)
    return runs / (time.perf_counter() - t0)


def time_forecast(dg: Any, seeds: np.ndarray, runs: int, seed: int) -> float:
    """Simulations per second of ``forecast()`` (all cores, per-node counts, summaries)."""
    from service.analytics.diffusion.forecasts import forecast

    t0 = time.perf_counter()
    forecast(dg, {"b": seeds}, simulations=runs, min_simulations=runs, random_seed=seed)
    return runs / (time.perf_counter() - t0)


def python_loop(dg: Any, seeds: np.ndarray, seconds: float) -> float:
    """Plain Python IC (lists, random.random per arc): the gap the compiled kernel closes."""
    import random

    indptr, indices, prob = dg.out_indptr.tolist(), dg.out_indices.tolist(), dg.out_prob.tolist()
    rnd = random.Random(1).random
    runs, t0 = 0, time.perf_counter()
    while time.perf_counter() - t0 < seconds or runs == 0:
        active = set(seeds.tolist())
        frontier = deque(active)
        while frontier:
            u = frontier.popleft()
            for e in range(indptr[u], indptr[u + 1]):
                v = indices[e]
                if v not in active and rnd() < prob[e]:
                    active.add(v)
                    frontier.append(v)
        runs += 1
    return runs / (time.perf_counter() - t0)


def bench_graph(exe: Path, name: str, undirected: bool, seconds: float, repeats: int) -> dict[str, Any]:
    """C and ours measured alternately, ``repeats`` rounds; medians and the median of per-round ratios."""
    from service.analytics.diffusion import _kernels as K
    from service.analytics.graph import diffusion_graph

    g, _ = load_graph(name, undirected)
    dg = diffusion_graph(g, scheme="weighted_cascade")
    kg = K.kernel_graph(dg)
    seeds = top_out_degree(dg)
    runs = calibrate(kg, seeds, seconds)
    c_rounds: list[dict[str, Any]] = []
    ours, full = [], []
    for r in range(repeats):
        c_rounds.append(run_reference(exe, DATASETS / f"{name}.edges.gz", undirected, seconds, 1))
        ours.append(time_ours(kg, seeds, runs, (r + 1) * runs))
        full.append(time_forecast(dg, seeds, runs, r))
    methods = [m["method"] for m in c_rounds[0]["methods"]]
    c_med = {m: statistics.median(next(x for x in c["methods"] if x["method"] == m)["sims_per_s"] for c in c_rounds)
             for m in methods}
    best = max(c_med, key=lambda m: c_med[m])
    per_round = [o / next(x for x in c["methods"] if x["method"] == best)["sims_per_s"]
                 for o, c in zip(ours, c_rounds)]
    probe = K.run_chunk(kg, seeds, 7, 0, max(200, runs), -1, np.zeros(0))
    nsim = probe.reach.shape[0]
    edges_per_sim = float(probe.count @ np.diff(dg.out_indptr)) / nsim
    mean, se = float(probe.reach.mean()), float(probe.reach.std(ddof=1) / np.sqrt(nsim))
    py = python_loop(dg, seeds, min(seconds, 2.0))
    o = statistics.median(ours)
    last = c_rounds[-1]
    print(f"\n== {name} ({'both directions' if undirected else 'as listed'}): n={dg.n:,} arcs={dg.out_indices.size:,}"
          f" (C read n={last['load']['n']:,} m={last['load']['m']:,}); IC, weighted cascade, 50 top out-degree seeds;"
          f" {repeats} alternating rounds")
    print(f"   C reference   {last['cmd']}")
    for m in methods:
        rows = [next(x for x in c["methods"] if x["method"] == m) for c in c_rounds]
        eps = statistics.median(x["edges_per_s"] for x in rows)
        print(f"     C {m:<6} {c_med[m]:>10.4g} sims/s  {eps:.4g} edges/s  (rounds "
              f"{', '.join(format(x['sims_per_s'], '.4g') for x in rows)})  mean spread {rows[-1]['mean_spread']:.2f}"
              f" +- {rows[-1]['spread_se']:.2f}  edges/sim {rows[-1]['edges_per_sim']:.1f}")
    print(f"   ours 1 thread (run_chunk, no per-node counts) {o:>10.4g} sims/s  {o * edges_per_sim:.4g} edges/s  "
          f"(rounds {', '.join(f'{x:.4g}' for x in ours)})  mean spread {mean:.2f} +- {se:.2f}  "
          f"edges/sim {edges_per_sim:.1f}")
    print(f"   ours forecast() (all {os.cpu_count()} cores, per-node counts, summaries) "
          f"{statistics.median(full):.4g} sims/s  (rounds {', '.join(f'{x:.4g}' for x in full)})")
    print(f"   plain Python loop (1 thread) {py:.4g} sims/s")
    ref = next(x for x in last["methods"] if x["method"] == best)
    z = (mean - ref["mean_spread"]) / max(float(np.hypot(se, ref["spread_se"])), 1e-12)
    ratio = statistics.median(per_round)
    print(f"   RATIO ours/C ({best}, fastest valid) = {ratio:.3f} (median of per-round ratios "
          f"{', '.join(f'{x:.3f}' for x in per_round)}; same ratio in edges examined/s);  "
          f"ours/Python = {o / py:.0f}x;  spread check z = {z:.2f}")
    return {"graph": name, "ours": o, "c": c_med[best], "c_method": best, "python": py, "ratio": ratio, "z": z}


# ------------------------------------------------------------------ through the queue


def queue_timing(runs: int, env: dict[str, str], label: str) -> dict[str, Any]:
    import httpx

    from tests.live import live_server

    g, ids = load_graph("wiki-Vote", undirected=False)
    from service.analytics.graph import diffusion_graph

    seeds = [str(ids[i]) for i in top_out_degree(diffusion_graph(g))]
    csv = "source,target\n" + "".join(f"{ids[a]},{ids[b]}\n" for a, b in zip(g.src.tolist(), g.dst.tolist()))
    params = {"seeds": seeds, "simulations": 1000, "min_simulations": 1000}
    with tempfile.TemporaryDirectory() as tmp:
        data = Path(tmp) / "data"
        data.mkdir()
        with live_server(data, workers=1, env=env) as base, httpx.Client(base_url=base, timeout=60) as c:
            gid = c.post("/v1/graphs", json={"name": "wiki-Vote", "directed": True}).json()["id"]
            r = c.post(f"/v1/graphs/{gid}/versions", params={"part": "edges"}, content=csv,
                       headers={"Content-Type": "text/csv"})
            assert r.status_code == 201, r.text
            time.sleep(3.0)  # the worker is idle and has backed off, as between real requests
            rows = []
            for i in range(runs):
                t0 = time.perf_counter()
                job = c.post(f"/v1/graphs/{gid}/jobs", json={"kind": "forecast", "params": {**params, "random_seed": i}})
                t1 = time.perf_counter()
                state = c.get(f"/v1/jobs/{job.json()['id']}", params={"wait": 10}).json()
                t2 = time.perf_counter()
                if state["status"] != "succeeded":
                    raise RuntimeError(f"forecast job did not succeed: {state}")
                at = {k: datetime.fromisoformat(state[k]) for k in ("created_at", "started_at", "finished_at")}
                rows.append({"total": t2 - t0, "post": t1 - t0,
                             "queued": (at["started_at"] - at["created_at"]).total_seconds(),
                             "run": (at["finished_at"] - at["started_at"]).total_seconds()})
                time.sleep(1.0 + (i % 3) * 0.5)  # idle gaps of 1 to 2 s between callers
    first, rest = rows[0], rows[1:]
    tot = sorted(r["total"] for r in rest)

    def med(key: str) -> float:
        return statistics.median(r[key] for r in rest)

    print(f"\n== forecast through the queue [{label}]: wiki-Vote ({g.n:,} nodes, {g.m:,} arcs), 50 seeds, "
          "weighted cascade, 1,000 simulations; POST then GET ?wait=10 over loopback HTTP, 1 worker process")
    print(f"   first job  {first['total']:.3f} s  (POST {first['post']:.3f}, queued {first['queued']:.3f}, "
          f"run {first['run']:.3f})")
    if rest:
        print(f"   repeated   n={len(rest)}  min {tot[0]:.3f}  median {statistics.median(tot):.3f}  "
              f"p90 {tot[int(0.9 * (len(tot) - 1))]:.3f}  max {tot[-1]:.3f} s  (medians: POST {med('post'):.3f}, "
              f"queued {med('queued'):.3f}, run {med('run'):.3f})")
        print(f"   all totals {', '.join(f'{x:.2f}' for x in [first['total']] + [r['total'] for r in rest])}")
    return {"first": first, "rest": rest}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0] if __doc__ else None)
    ap.add_argument("--graphs", default=",".join(GRAPHS), help="comma separated, of " + ", ".join(GRAPHS))
    ap.add_argument("--seconds", type=float, default=1.0, help="target seconds per timed repetition")
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--queue-runs", type=int, default=15)
    ap.add_argument("--skip-queue", action="store_true")
    ap.add_argument("--skip-kernels", action="store_true")
    args = ap.parse_args()
    need_shared()
    os.environ.setdefault("NUMBA_CACHE_DIR", str(ROOT / ".numba-cache"))
    print(f"machine: {os.cpu_count()} cores; numba cache {os.environ['NUMBA_CACHE_DIR']}")
    if not args.skip_kernels:
        from service.usecases.forecasts import warm_kernels

        warm_kernels()  # numba's cache load is not part of any figure
        with tempfile.TemporaryDirectory() as tmp:
            exe = build_reference(Path(tmp))
            for name in args.graphs.split(","):
                if name not in GRAPHS:
                    sys.exit(f"unknown graph {name!r}; choose from {', '.join(GRAPHS)}")
                bench_graph(exe, name, GRAPHS[name], args.seconds, args.repeats)
    if not args.skip_queue:
        queue_timing(args.queue_runs, {}, "current settings")
        queue_timing(args.queue_runs, OLD_POLL, "earlier idle polling: " + " ".join(f"{k}={v}" for k, v in OLD_POLL.items()))


if __name__ == "__main__":
    main()

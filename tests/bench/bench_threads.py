"""Benchmark: every core, the same answer. Thread scaling of RR sampling, forward simulation
and sampled betweenness, side by side with the single-threaded C reference in one run.

Run:  python -m tests.bench.bench_threads [--graphs ca-GrQc,soc-Slashdot0902,com-DBLP]
                                          [--seconds 1] [--repeats 3] [--skip-imm]

The C reference (``../shared/bench/rr_limit.c``, outside the project, never copied here) is
built with ``gcc -O3 -march=native`` into a temporary folder. For each graph (ca-GrQc both
directions, soc-Slashdot0902 and com-DBLP as listed; weighted cascade), measured in
``--repeats`` alternating rounds (C, then ours at 1 thread, then ours at every thread count
up to the cores this process may use), medians printed:

(a) RR sampling: edges examined per second, C's fastest method (one thread) against ours
    (``RRCollection.extend_to``, wall time including the merge of the per-thread parts);
    printed: ours / C at every thread count, per core, and the parallel efficiency
    (rate at T threads / (T x rate at 1 thread)). Goal: at least 0.9 per core.
(b) Forward Independent Cascade from the 50 top out-degree nodes: C's fastest valid method
    (one thread) against our plain kernel at one thread (``_kernels.run_chunk``, no per-node
    counts: what C measures; goal >= 0.8), the per-node-count path forecasts run
    (``_world_kernels.run_chunk`` with counts, one thread; goal within 1.2 of the plain
    kernel), and ``forecast()`` at every thread count (goal: all cores / C >= 0.8 per core,
    1.6 on 2 cores).
(c) IMM, k = 50, epsilon = 0.1, with all cores, against C's time to draw the same number of
    RR sets with its fastest method (goal: at most 1.0); soc-Slashdot0902 and com-DBLP;
    ``--repeats`` rounds, C run right after each, median of the per-round ratios.
(d) Sampled betweenness (hops, epsilon 0.02) at every thread count: samples per second and
    parallel efficiency (no C counterpart).
(e) How to run threads: the service's pool of Python threads calling kernels that release
    the GIL, against numba ``prange`` over the same index ranges (a benchmark-only kernel
    looping over the parts with ``parallel=True``, each part running the same cascade loop),
    forward simulation with per-node counts at all cores, alternately.

Every measurement also checks that the result at T threads equals the one-thread result.
The machine this was written on has 2 cores shared with other people: timings are noisy,
which is why everything is measured side by side in one run, and ratios, not absolute
rates, are what the goals are about.
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import numpy as np

from tests.bench import bench_diffusion as BD
from tests.bench import bench_seeding as BS

GRAPHS = {"ca-GrQc": False, "soc-Slashdot0902": True, "com-DBLP": True}  # name -> directed
IMM_GRAPHS = ("soc-Slashdot0902", "com-DBLP")
# (threads, work per CPU second, CPU seconds per wall second) of each timed run: on a
# machine shared with others the wall-clock rates say little about scaling, but work per
# CPU second at T threads against one thread shows what splitting and merging cost, and
# CPU per wall second how many cores the run actually obtained.
CPU: list[tuple[int, float, float]] = []


def cpu_line(what: str) -> str:
    """Work per CPU second at each thread count / at one thread, and cores obtained."""
    by: dict[int, list[tuple[float, float]]] = {}
    for t, per_cpu, cores in CPU:
        by.setdefault(t, []).append((per_cpu, cores))
    CPU.clear()
    if 1 not in by:
        return ""
    one = statistics.median(x for x, _ in by[1])
    return f"    {what}: " + "; ".join(
        f"{t} thread{'s' if t > 1 else ''}: work per CPU second {statistics.median(x for x, _ in v) / one:.2f} of "
        f"one thread's, cores obtained {statistics.median(c for _, c in v):.2f}" for t, v in sorted(by.items()))


def thread_counts() -> list[int]:
    from service.analytics._chunks import usable_cores

    cores = usable_cores()
    counts = [1]
    while counts[-1] * 2 <= cores:
        counts.append(counts[-1] * 2)
    if counts[-1] != cores:
        counts.append(cores)
    return counts


def rr_rate(dg: Any, threads: int, seconds: float, rep: int, rate_hint: float) -> tuple[float, Any]:
    """Edges examined per second of one ``extend_to`` of about ``seconds`` (wall, with the merge)."""
    from service.analytics.seeding import _rr_kernels as K
    from service.analytics.seeding._rr import RRCollection, RRSampler

    sampler = RRSampler(dg, threads=threads)
    target = max(int(rate_hint * threads * seconds), 20_000)
    coll = RRCollection(sampler, K.stream_key(rep, 0))
    c0, t0 = time.process_time(), time.perf_counter()
    coll.extend_to(target)
    wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    CPU.append((threads, coll.examined / max(cpu, 1e-9), cpu / wall))
    return coll.examined / wall, coll


def bench_rr(exe: Path, name: str, directed: bool, counts: list[int], seconds: float,
             repeats: int) -> dict[str, Any]:
    from service.analytics.seeding import _rr_kernels as K
    from service.analytics.seeding._rr import RRCollection, RRSampler

    _, dg = BS.load(name, directed)
    probe = RRCollection(RRSampler(dg, threads=1), K.stream_key(0, 0))
    t0 = time.perf_counter()
    probe.extend_to(20_000)
    hint = probe.count / (time.perf_counter() - t0)
    method, _ = BS.fastest_method(exe, name, directed, seconds)
    c_rates: list[float] = []
    ours: dict[int, list[float]] = {t: [] for t in counts}
    kept: dict[int, list[str]] = {t: [] for t in counts}  # the kernel each new sampler kept
    same = True
    batch = 0  # largest per-thread batch store (bytes)
    for rep in range(repeats):
        c = BS.run_reference(exe, name, directed, "-M", method, "-T", str(seconds))[0]
        c_rates.append(c["edges_per_s"])
        ref = None
        for t in counts:
            rate, coll = rr_rate(dg, t, seconds, rep + 1, hint)
            ours[t].append(rate)
            smp = coll.sampler
            kept[t].append(("lanes" if smp.lanes else "one set at a time")
                           + ("" if smp.trial_costs is not None else
                              " (no trial: small graph)" if not smp.lanes_ok else " (trial unfinished)"))
            if t > 1:
                batch = max([batch] + [sc.nodes.nbytes for sc in coll.sampler.scratch])
            cut = min(coll.count, 20_000)  # the first sets, compared bit for bit
            nodes = coll.nodes[: coll.offsets[cut]].copy()
            if ref is None:
                ref = nodes
            else:
                same = same and np.array_equal(ref[: nodes.shape[0]], nodes[: ref.shape[0]])
            del coll
    c_med = statistics.median(c_rates)
    med = {t: statistics.median(v) for t, v in ours.items()}
    print(f"\n(a) RR sampling, {name} ({'as listed' if directed else 'both directions'}): n={dg.n:,}, "
          f"arcs={dg.in_indices.shape[0]:,}; C {method} (one thread) {c_med:.4g} edges/s "
          f"(rounds {', '.join(f'{x:.4g}' for x in c_rates)})")
    for t in counts:
        eff = med[t] / (t * med[1])
        print(f"    ours {t} thread{'s' if t > 1 else ' '} {med[t]:.4g} edges/s (rounds "
              f"{', '.join(f'{x:.4g}' for x in ours[t])}); ours/C = {med[t] / c_med:.2f}, "
              f"per core {med[t] / c_med / t:.2f}; parallel efficiency {eff:.2f}; kernel kept: "
              f"{', '.join(kept[t])}")
    print(cpu_line("CPU accounting"))
    top = counts[-1]
    ratio = med[top] / c_med
    goal = 0.9 * top
    print(f"    RATIO RR all {top} cores / C one thread = {ratio:.2f} (goal >= {goal:.1f}: "
          f"{'met' if ratio >= goal else 'NOT met'}); sets identical across thread counts: {same}; "
          f"largest per-thread batch store {batch / 2**20:.1f} MiB (the store itself is shared)")
    return {"graph": name, "ratio": ratio, "per_core": ratio / top, "same": same,
            "efficiency": med[top] / (top * med[1]), "rate1": med[1]}


def bench_forward(exe: Path, name: str, directed: bool, counts: list[int], seconds: float,
                  repeats: int) -> dict[str, Any]:
    from service.analytics.diffusion import _kernels as K
    from service.analytics.diffusion import _world_kernels as W
    from service.analytics.diffusion.forecasts import forecast
    from service.analytics.graph import diffusion_graph

    g, _ = BD.load_graph(name, not directed)
    dg = diffusion_graph(g, scheme="weighted_cascade")
    kg = K.kernel_graph(dg)
    seeds = BD.top_out_degree(dg)
    runs = BD.calibrate(kg, seeds, seconds)
    W.run_chunk(kg, seeds, 1, 0, 4, -1, np.zeros(0))  # compile / load the kernel cache
    c_best: list[float] = []
    c_method = ""
    plain, track = [], []
    fc: dict[int, list[float]] = {t: [] for t in counts}
    same = True
    for r in range(repeats):
        c = BD.run_reference(exe, BD.DATASETS / f"{name}.edges.gz", not directed, seconds, 1)
        c_best.append(c["best"]["sims_per_s"])
        c_method = c["best"]["method"]
        plain.append(BD.time_ours(kg, seeds, runs, (r + 1) * runs))
        t0 = time.perf_counter()
        W.run_chunk(kg, seeds, 5, (r + 1) * runs, runs, -1, np.zeros(0), track_nodes=True)
        track.append(runs / (time.perf_counter() - t0))
        ref = None
        for t in counts:
            nsim = runs * t
            c0, t0 = time.process_time(), time.perf_counter()
            out = forecast(dg, {"b": seeds}, simulations=nsim, min_simulations=nsim,
                           random_seed=r, threads=t)["b"]
            wall, cpu = time.perf_counter() - t0, time.process_time() - c0
            fc[t].append(nsim / wall)
            CPU.append((t, nsim / max(cpu, 1e-9), cpu / wall))
            if ref is None:
                ref = out
            else:  # the first runs of the longer forecast equal the shorter one's
                same = same and np.array_equal(out.per_run[: ref.per_run.shape[0]], ref.per_run)
    c_med = statistics.median(c_best)
    p_med, t_med = statistics.median(plain), statistics.median(track)
    f_med = {t: statistics.median(v) for t, v in fc.items()}
    print(f"\n(b) forward IC, {name}: n={dg.n:,}, arcs={dg.out_indices.size:,}, 50 top out-degree "
          f"seeds; C {c_method} (fastest valid, one thread) {c_med:.4g} sims/s (rounds "
          f"{', '.join(f'{x:.4g}' for x in c_best)})")
    print(f"    ours plain kernel, 1 thread {p_med:.4g} sims/s (rounds {', '.join(f'{x:.4g}' for x in plain)});"
          f" RATIO one-thread kernel / C = {p_med / c_med:.2f} (goal >= 0.8: "
          f"{'met' if p_med / c_med >= 0.8 else 'NOT met'})")
    print(f"    ours per-node-count path (common worlds, counts), 1 thread {t_med:.4g} sims/s "
          f"(rounds {', '.join(f'{x:.4g}' for x in track)}); plain / per-node = {p_med / t_med:.2f} "
          f"(goal <= 1.2: {'met' if p_med / t_med <= 1.2 else 'NOT met'})")
    for t in counts:
        print(f"    forecast() {t} thread{'s' if t > 1 else ' '} {f_med[t]:.4g} sims/s (rounds "
              f"{', '.join(f'{x:.4g}' for x in fc[t])}); / C = {f_med[t] / c_med:.2f}; parallel "
              f"efficiency {f_med[t] / (t * f_med[1]):.2f}")
    print(cpu_line("CPU accounting of forecast()"))
    top = counts[-1]
    ratio = f_med[top] / c_med
    goal = 0.8 * top
    print(f"    RATIO forecast all {top} cores / C one thread = {ratio:.2f} (goal >= {goal:.1f}: "
          f"{'met' if ratio >= goal else 'NOT met'}); runs identical across thread counts: {same}")
    probe = W.run_chunk(kg, seeds, 11, 0, max(200, runs), -1, np.zeros(0))
    edges_per_sim = float(probe.count @ np.diff(dg.out_indptr)) / probe.reach.shape[0]
    return {"graph": name, "kernel": p_med / c_med, "track": p_med / t_med, "forecast": ratio,
            "same": same, "fc_rate1": f_med[1], "fc_eff": f_med[top] / (top * f_med[1]),
            "edges_per_sim": edges_per_sim, "arcs": int(dg.out_indices.size)}


def bench_imm(exe: Path, name: str, directed: bool, repeats: int) -> dict[str, Any]:
    from service.analytics._chunks import usable_cores
    from service.analytics.seeding.rules import SeedRules
    from service.analytics.seeding.shortlists import imm_seeds

    _, dg = BS.load(name, directed)
    imm_seeds(dg, SeedRules.build(dg.n, budget=2), epsilon=0.5, forecast_runs=0)  # compile / load the caches
    method, _ = BS.fastest_method(exe, name, directed, 1.0)
    rounds = []  # (ours, C) per round, C run right after ours: the machine's speed drifts
    for _ in range(repeats):
        t0 = time.perf_counter()
        sl = imm_seeds(dg, SeedRules.build(dg.n, budget=50), epsilon=0.1, l=1.0, forecast_runs=0)
        wall = time.perf_counter() - t0
        total = int(sl.samples)
        c = BS.run_reference(exe, name, directed, "-M", method, "-n", str(total), "-T", "0.2")[0]
        rounds.append((wall, c["sec_per_rep"], sl))
    ratio = statistics.median(w / c for w, c, _ in rounds)
    wall, c_sec, sl = sorted(rounds, key=lambda x: x[0] / x[1])[len(rounds) // 2]
    total, est = int(sl.samples), int(sl.details["estimation_sets"])
    print(f"\n(c) IMM k = 50, epsilon = 0.1, {name}, all {usable_cores()} cores, {repeats} rounds, each "
          f"followed by C: median round wall {wall:.2f} s (estimation {sl.timings.get('estimation', 0):.2f} s, "
          f"sampling {sl.timings.get('sampling', 0):.2f} s, selection {sl.timings.get('selection', 0):.2f} s), "
          f"{total:,} RR sets ({est:,} to estimate the optimum, {total - est:,} to choose); C {method} draws "
          f"the same number in {c_sec:.2f} s (one thread); RATIO IMM wall / C time = {ratio:.2f} (rounds "
          f"{', '.join(f'{w / c:.2f}' for w, c, _ in rounds)}; goal <= 1.0: {'met' if ratio <= 1.0 else 'NOT met'})")
    d = sl.details
    return {"graph": name, "imm": ratio, "n": dg.n, "arcs": int(dg.in_indices.shape[0]),
            "sets": total, "theta": int(sl.theta), "entries_per_set": d["rr_entries"] / max(int(sl.theta), 1),
            "examined_per_set": d["edges_examined"] / max(int(sl.theta), 1), "wall": wall}


def bench_betweenness(name: str, directed: bool, counts: list[int]) -> None:
    from service.analytics.structure.paths import betweenness

    g, _ = BD.load_graph(name, not directed)
    rates, ref, same = {}, None, True
    for t in counts:
        t0 = time.perf_counter()
        values, meta = betweenness(g, weights=False, method="sampled", epsilon=0.02, random_seed=1,
                                   threads=t)
        rates[t] = meta["samples"] / (time.perf_counter() - t0)
        if ref is None:
            ref = values
        else:
            same = same and np.array_equal(values, ref)
    print(f"\n(d) sampled betweenness (hops, epsilon 0.02, {meta['samples']:,} samples), {name}: "
          + "; ".join(f"{t} thread{'s' if t > 1 else ''} {rates[t]:.4g} samples/s, efficiency "
                      f"{rates[t] / (t * rates[1]):.2f}" for t in counts)
          + f" (wall time includes the vertex-diameter bound); scores identical: {same}")


_PRANGE: Any = None


def _prange_kernel() -> Any:
    """numba prange over parts: part p runs its range of worlds with its own buffers."""
    global _PRANGE
    if _PRANGE is None:
        from numba import njit, prange

        from service.analytics.diffusion._kernels import _run_state
        from service.analytics.diffusion._world_kernels import _ic_world

        @njit(parallel=True, cache=False)
        def runs_prange(indptr, indices, thr, skip, use_skip, seeds, key, starts, counts_per,
                        maxdeg, reach, count):  # type: ignore[no-untyped-def]
            n = indptr.size - 1
            for p in prange(starts.size):
                stamp = np.zeros(n, np.int32)
                queue = np.empty(n, np.int32)
                lvl = np.zeros(16, np.int64)
                rb = np.zeros(maxdeg // 2 + 1, np.uint64)
                rb32 = rb.view(np.uint32)
                for i in range(counts_per[p]):
                    run = starts[p] + i
                    tail, nlev, lvl = _ic_world(indptr, indices, thr, skip, use_skip, seeds,
                                                _run_state(key, run), np.int32(i + 1), stamp,
                                                queue, lvl, -1, rb, rb32)
                    reach[run - starts[0]] = tail
                    for h in range(tail):
                        count[p, queue[h]] += 1

        _PRANGE = runs_prange
    return _PRANGE


def bench_pool_vs_prange(name: str, directed: bool, threads: int, seconds: float,
                         repeats: int) -> None:
    import numba

    from service.analytics._chunks import split_range
    from service.analytics.diffusion import _kernels as K
    from service.analytics.diffusion import _world_kernels as W
    from service.analytics.graph import diffusion_graph

    g, _ = BD.load_graph(name, not directed)
    dg = diffusion_graph(g, scheme="weighted_cascade")
    kg = K.kernel_graph(dg)
    seeds = kg.rank[BD.top_out_degree(dg)]
    runs = BD.calibrate(kg, BD.top_out_degree(dg), seconds) * threads
    fn = _prange_kernel()
    numba.set_num_threads(threads)
    maxdeg = int(np.diff(kg.indptr).max())

    def prange_once(run0: int) -> tuple[float, np.ndarray, np.ndarray]:
        parts = split_range(run0, runs, threads)
        starts = np.array([a for a, _ in parts], np.int64)
        per = np.array([c for _, c in parts], np.int64)
        reach = np.zeros(runs, np.int64)
        count = np.zeros((len(parts), kg.n), np.int64)
        t0 = time.perf_counter()
        fn(kg.indptr, kg.indices, kg.thr, kg.skip, kg.use_skip, seeds, np.uint64(3), starts, per,
           maxdeg, reach, count)
        total = count.sum(axis=0)  # merged in part order, as the pool's parts are
        return runs / (time.perf_counter() - t0), reach, total

    prange_once(0)  # compile
    pool, prl, same = [], [], True
    for r in range(repeats):
        t0 = time.perf_counter()
        res = W.simulate(kg, BD.top_out_degree(dg), 3, (r + 1) * runs, runs, -1, np.zeros(0),
                         threads=threads)
        pool.append(runs / (time.perf_counter() - t0))
        rate, reach, total = prange_once((r + 1) * runs)
        prl.append(rate)
        same = same and np.array_equal(reach, res.reach) and np.array_equal(total[kg.rank], res.count)
    print(f"\n(e) {name}, {threads} threads, forward simulation with per-node counts: pool of threads "
          f"{statistics.median(pool):.4g} sims/s (rounds {', '.join(f'{x:.4g}' for x in pool)}), numba "
          f"prange {statistics.median(prl):.4g} sims/s (rounds {', '.join(f'{x:.4g}' for x in prl)}); "
          f"pool / prange = {statistics.median(pool) / statistics.median(prl):.2f}; same runs: {same}")


def sizing(rr: dict[str, Any], fw: dict[str, Any], imm: dict[str, Any]) -> None:
    """The README's sizing table, from the per-core rates and sizes measured in this run.

    Model (graphs shaped like the one measured, weighted cascade): RR sets needed by IMM
    grow like n ln n (theta = lambda* / LB with the optimum a fixed share of n), each set
    examines as many arcs as measured here; a forecast's simulation examines the same share
    of the arcs as here. Time = work / (per-core rate x cores x the parallel efficiency
    measured at the most threads here). Memory = the loaded graph (admission's 192 bytes
    per edge, counted as arcs here) + the RR store (8 bytes an entry, 9 a set) or the
    per-thread simulation buffers (16 bytes a node a thread). A machine is assumed to
    have 4 GiB of memory per core.
    """
    import math

    from service.jobs import admission as A

    eff_rr, eff_fw = min(rr["efficiency"], 1.0), min(fw["fc_eff"], 1.0)
    arcs_per_node = imm["arcs"] / imm["n"]
    sets_per_node = imm["sets"] / imm["n"]
    print(f"\nSIZING MODEL from {imm['graph']}: {sets_per_node:.1f} RR sets per person for IMM k = 50, "
          f"epsilon 0.1 ({imm['sets']:,} sets, {arcs_per_node:.1f} arcs per person), "
          f"{imm['entries_per_set']:.2f} people and {imm['examined_per_set']:.1f} arcs examined per set; "
          f"RR {rr['rate1']:.3g} arcs/s per core (efficiency {eff_rr:.2f}); forecasts "
          f"{fw['fc_rate1'] * fw['edges_per_sim']:.3g} arcs/s per core, {fw['edges_per_sim'] / fw['arcs']:.3f} "
          f"of the arcs per simulation (efficiency {eff_fw:.2f}); 4 GiB per core")
    print("arcs | cores | IMM time | IMM memory | 10,000-simulation forecast | forecast memory | one machine?")
    for arcs in (10**7, 10**8, 10**9):
        n = arcs / arcs_per_node
        sets = sets_per_node * n * math.log(n) / math.log(imm["n"])
        work = sets * imm["examined_per_set"]
        graph = A.GRAPH_BYTES_PER_EDGE * arcs
        store = sets * (imm["entries_per_set"] * A.RR_ENTRY_BYTES + A.RR_SET_BYTES)
        for cores in (8, 32, 96):
            t_imm = work / (rr["rate1"] * cores * (eff_rr if cores > 1 else 1.0))
            t_fc = 1e4 * fw["edges_per_sim"] / fw["arcs"] * arcs / (fw["fc_rate1"] * fw["edges_per_sim"]
                                                                  * cores * eff_fw)
            mem_imm = graph + store + A.thread_bytes(int(n), cores, rr=True)
            mem_fc = graph + A.thread_bytes(int(n), cores) + 16 * n
            ram = cores * 4 * 2**30
            fits = "yes" if max(mem_imm, mem_fc) <= ram and t_imm <= 3600 else "no"
            print(f"{arcs:.0e} | {cores} | {_dur(t_imm)} | {mem_imm / 2**30:.1f} GiB | {_dur(t_fc)} | "
                  f"{mem_fc / 2**30:.1f} GiB | {fits}")


def _dur(seconds: float) -> str:
    if seconds < 120:
        return f"{seconds:.0f} s"
    if seconds < 7200:
        return f"{seconds / 60:.0f} min"
    return f"{seconds / 3600:.1f} h"


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--graphs", default=",".join(GRAPHS))
    ap.add_argument("--seconds", type=float, default=1.0)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--skip-imm", action="store_true")
    args = ap.parse_args(argv)
    BD.need_shared()
    counts = thread_counts()
    print(f"thread counts measured: {counts} (cores this process may use); side by side in one run, "
          f"on a machine shared with others: expect noise; load average {os.getloadavg()[0]:.2f}")
    summary = []
    with tempfile.TemporaryDirectory() as tmp:
        exe = BS.build_reference(Path(tmp))
        for name in args.graphs.split(","):
            directed = GRAPHS[name]
            rr = bench_rr(exe, name, directed, counts, args.seconds, args.repeats)
            fw = bench_forward(exe, name, directed, counts, args.seconds, args.repeats)
            imm = (bench_imm(exe, name, directed, args.repeats) if name in IMM_GRAPHS and not args.skip_imm
                   else {"imm": float("nan")})
            bench_betweenness(name, directed, counts)
            if counts[-1] > 1:
                bench_pool_vs_prange(name, directed, counts[-1], args.seconds, args.repeats)
            summary.append((name, rr, fw, imm))
    print("\nSUMMARY (ratios against the C reference at one thread; T = "
          f"{counts[-1]} threads; load average at the end {os.getloadavg()[0]:.2f})")
    print("graph | RR T/C (per core, efficiency) | kernel 1/C | plain/per-node | forecast T/C "
          "| IMM wall/C | identical")
    for name, rr, fw, imm in summary:
        print(f"{name} | {rr['ratio']:.2f} ({rr['per_core']:.2f}, {rr['efficiency']:.2f}) | "
              f"{fw['kernel']:.2f} | {fw['track']:.2f} | {fw['forecast']:.2f} | {imm['imm']:.2f} | "
              f"{rr['same'] and fw['same']}")
    last = [row for row in summary if "sets" in row[3]]
    if last:
        sizing(last[-1][1], last[-1][2], last[-1][3])
    return 0


if __name__ == "__main__":
    sys.exit(main())

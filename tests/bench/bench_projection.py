"""Benchmark: Newman projection plus disparity filter against SciPy's B^T D B, ratios in one run.

Run:  python -m tests.bench.bench_projection [--rows 10000000] [--repeats 3]

A (person, event) table of ``--rows`` rows is generated once: event sizes
follow a truncated power law (P(size >= s) ~ s^-1.5, 2 <= s <= 10,000, so
most events are small and a few are huge), members drawn uniformly from
``--people`` people, with about 1% duplicated rows. It is saved to a
temporary folder; each measurement then runs in a fresh process that loads
it, so peak memory (the process's high-water resident size, less what it
held after loading the table) belongs to that one computation.

1. ours:  ``project_events(method="newman")`` (default cap of 100, larger
   events dropped) then ``disparity_filter(alpha=0.05)``, from the raw
   arrays to the backbone.
2. SciPy: the same projection as a plain sparse product: the incidence
   matrix B of the kept events (duplicates merged), D = diag(1 / (n_e - 1)),
   ``B.T @ (D @ B)``, upper triangle. No backbone step.

The two sides alternate ``--repeats`` times; medians are printed with the
ratio (goal: ours at most 1.5 times SciPy), and each side's peak extra
memory against the bytes of the resulting edge arrays (src, dst, weight).
The projections are checked to agree (same pairs, weights to 1e-9).
The HTTP layer does not exist yet, so this times the engine functions.
"""

from __future__ import annotations

import argparse
import json
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np


def make_table(rows: int, people: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    est_events = int(rows / 5) + 10
    u = rng.random(est_events)
    sizes = np.minimum(np.floor(2.0 * (1.0 - u) ** (-1.0 / 1.5)), 10_000).astype(np.int64)
    cut = int(np.searchsorted(np.cumsum(sizes), rows))
    sizes = sizes[: cut + 1]
    sizes[-1] -= int(sizes.sum()) - rows
    sizes = sizes[sizes > 0]
    event = np.repeat(np.arange(sizes.size, dtype=np.int64), sizes)
    person = rng.integers(0, people, rows, dtype=np.int64)
    dup = rng.random(rows) < 0.01
    idx = np.flatnonzero(dup)
    person[idx[1:]] = person[idx[:-1]]
    event[idx[1:]] = event[idx[:-1]]
    return person, event


def _rss_now() -> int:
    with open("/proc/self/statm") as fh:
        return int(fh.read().split()[1]) * resource.getpagesize()


def _peak() -> int:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024


def child(side: str, folder: Path) -> dict[str, float]:
    import scipy.sparse as sp

    from service.analytics import DEFAULT_MAX_EVENT_SIZE, disparity_filter, project_events

    # Warm up (compiled kernels load from the on-disk cache) before measuring.
    tiny = project_events([0, 1, 0, 1, 0, 1, 0, 2, 1, 3, 2, 3],
                          [0, 0, 1, 1, 2, 2, 3, 3, 4, 4, 5, 5], method="newman")
    disparity_filter(tiny, alpha=0.5)
    person = np.load(folder / "person.npy")
    event = np.load(folder / "event.npy")
    base = max(_rss_now(), 0)
    base_peak = _peak()
    out: dict[str, float] = {}
    t0 = time.perf_counter()
    if side == "ours":
        g = project_events(person, event, method="newman", singletons="skip")
        t1 = time.perf_counter()
        b = disparity_filter(g, alpha=0.05)
        t2 = time.perf_counter()
        out.update(project_s=t1 - t0, backbone_s=t2 - t1, total_s=t2 - t0, pairs=g.pairs,
                   kept=b.edges_kept, edge_share=b.edge_share, weight_share=b.weight_share,
                   without_ties=b.people_without_ties_share, events_dropped=g.events_dropped,
                   out_bytes=g.src.nbytes + g.dst.nbytes + g.weight.nbytes)
        np.save(folder / "ours_src.npy", g.src)
        np.save(folder / "ours_w.npy", g.weight)
    else:
        n_p = int(person.max()) + 1
        n_e = int(event.max()) + 1
        B = sp.csr_matrix((np.ones(person.size), (event, person)), shape=(n_e, n_p))
        B.sum_duplicates()
        B.data[:] = 1.0
        size = np.diff(B.indptr)
        keep = (size >= 2) & (size <= DEFAULT_MAX_EVENT_SIZE)
        B = B[np.flatnonzero(keep)]
        d = 1.0 / (size[keep] - 1.0)
        t1 = time.perf_counter()
        W = B.T.tocsr() @ (sp.diags(d) @ B)
        U = sp.triu(W, k=1, format="csr")
        t2 = time.perf_counter()
        out.update(build_s=t1 - t0, product_s=t2 - t1, total_s=t2 - t0, pairs=U.nnz,
                   out_bytes=U.nnz * (4 + 4 + 8))
        coo = U.tocoo()
        order = np.lexsort((coo.col, coo.row))
        np.save(folder / "scipy_src.npy", coo.row[order].astype(np.int32))
        np.save(folder / "scipy_w.npy", coo.data[order])
    # High-water mark during the computation, less what the process held with the table loaded.
    out["peak_extra_bytes"] = max(_peak(), base_peak) - base
    return out


def run_child(side: str, folder: Path) -> dict[str, float]:
    res = subprocess.run([sys.executable, "-m", "tests.bench.bench_projection", "--child", side,
                          "--dir", str(folder)], capture_output=True, text=True, check=True)
    return json.loads(res.stdout.strip().splitlines()[-1])  # type: ignore[no-any-return]


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--rows", type=int, default=10_000_000)
    ap.add_argument("--people", type=int, default=0, help="default rows / 5")
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--seed", type=int, default=17)
    ap.add_argument("--child", choices=["ours", "scipy"])
    ap.add_argument("--dir")
    args = ap.parse_args()
    if args.child:
        print(json.dumps(child(args.child, Path(args.dir))))
        return 0
    people = args.people or max(args.rows // 5, 10)
    folder = Path(tempfile.mkdtemp(prefix="bw-bench-proj-"))
    person, event = make_table(args.rows, people, args.seed)
    sizes = np.bincount(event)
    np.save(folder / "person.npy", person)
    np.save(folder / "event.npy", event)
    print(f"table: {args.rows:,} rows, {people:,} people, {sizes.size:,} events, "
          f"largest {sizes.max():,}, events above 100: {(sizes > 100).sum():,} "
          f"holding {sizes[sizes > 100].sum() / args.rows:.1%} of rows")
    del person, event
    runs: dict[str, list[dict[str, float]]] = {"ours": [], "scipy": []}
    for _ in range(args.repeats):
        for side in ("ours", "scipy"):
            runs[side].append(run_child(side, folder))
    ours_src = np.load(folder / "ours_src.npy")
    sc_src = np.load(folder / "scipy_src.npy")
    same = ours_src.shape == sc_src.shape and np.array_equal(ours_src, sc_src) and np.allclose(
        np.load(folder / "ours_w.npy"), np.load(folder / "scipy_w.npy"), rtol=1e-9, atol=0)
    print(f"projections agree: {same}")

    def med(side: str, key: str) -> float:
        return statistics.median(r[key] for r in runs[side])

    o, s = runs["ours"][0], runs["scipy"][0]
    print(f"pairs: {int(o['pairs']):,} (SciPy {int(s['pairs']):,}); events dropped by the cap: "
          f"{int(o['events_dropped']):,}")
    print(f"backbone: {int(o['kept']):,} ties kept, {o['edge_share']:.1%} of ties, "
          f"{o['weight_share']:.1%} of weight, {o['without_ties']:.1%} of people left without ties")
    print(f"ours   median of {args.repeats}: projection {med('ours', 'project_s'):.2f} s + "
          f"disparity filter {med('ours', 'backbone_s'):.2f} s = {med('ours', 'total_s'):.2f} s")
    print(f"SciPy  median of {args.repeats}: build B {med('scipy', 'build_s'):.2f} s + "
          f"B^T D B and triu {med('scipy', 'product_s'):.2f} s = {med('scipy', 'total_s'):.2f} s")
    print(f"ratio ours (projection + filter) / SciPy (build + product): "
          f"{med('ours', 'total_s') / med('scipy', 'total_s'):.2f} (goal <= 1.5)")
    print(f"ratio ours / SciPy product alone: "
          f"{med('ours', 'total_s') / med('scipy', 'product_s'):.2f}")
    for side in ("ours", "scipy"):
        peak = med(side, "peak_extra_bytes")
        ob = runs[side][0]["out_bytes"]
        print(f"{side:6s} peak extra memory {peak / 2**20:,.0f} MiB = {peak / ob:.2f} x the "
              f"edge arrays ({ob / 2**20:,.0f} MiB)")
    for f in folder.iterdir():
        f.unlink()
    folder.rmdir()
    return 0 if same else 1


if __name__ == "__main__":
    sys.exit(main())

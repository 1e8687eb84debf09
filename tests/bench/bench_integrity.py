"""Benchmark: ego-network features and densest-block peeling against simple baselines.

Run:  python -m tests.bench.bench_integrity [--repeats 3]

1. com-DBLP (undirected, as ``tests.datasets.snap_graph`` loads it): ego features
   of every node by :func:`service.analytics.ego_features`, once without the
   eigenvalue (N and E, W alongside) and once with it, against igraph computing
   the same neighbourhood sizes and ego edge counts in one run
   (``neighborhood_size`` and ``transitivity_local_undirected``, triangles
   recovered as ``c * d (d - 1) / 2``). The two answers are checked equal.
   Alongside, the circles among every person's contacts
   (:func:`service.analytics.contact_circles`, the extra pass of the ring score
   ``separate-circles``), checked against igraph's connected components of
   the neighbourhoods of the 200 busiest people.
2. soc-Slashdot0902 (read as undirected): one densest block by
   :func:`service.analytics.fraudar` (log weights) against one pass over the
   edges (the weighted degree of every node by ``numpy.bincount``, the least
   any peeling must do).

Printed: median seconds of alternating runs after an untimed warm-up (numba
compiles or loads its cache), and the ratios. The machine is shared (2 cores).
"""

from __future__ import annotations

import argparse
import statistics
import time
from collections.abc import Callable

import numpy as np

from service.analytics import contact_circles, ego_features, fraudar, to_igraph
from tests.datasets import DATASETS, snap_graph


def median_times(funcs: dict[str, Callable[[], object]], repeats: int) -> dict[str, float]:
    for f in funcs.values():
        f()
    times: dict[str, list[float]] = {k: [] for k in funcs}
    for rep in range(repeats):
        for label in (list(funcs) if rep % 2 == 0 else list(reversed(funcs))):
            t0 = time.perf_counter()
            funcs[label]()
            times[label].append(time.perf_counter() - t0)
    return {k: statistics.median(v) for k, v in times.items()}


def bench_ego(repeats: int) -> None:
    g, _ = snap_graph("com-DBLP", directed=False)
    ig = to_igraph(g, weights=False)

    def igraph_counts() -> tuple[np.ndarray, np.ndarray]:
        n_i = np.asarray(ig.neighborhood_size(order=1), np.int64) - 1
        cc = np.asarray(ig.transitivity_local_undirected(mode="zero"))
        tri = np.rint(cc * n_i * (n_i - 1) / 2).astype(np.int64)
        return n_i, n_i + tri

    ours = ego_features(g, eigenvalues=False)
    ref_n, ref_e = igraph_counts()
    assert (ours.neighbours == ref_n).all() and (ours.edges == ref_e).all(), "counts differ"
    circles = contact_circles(g)
    busiest = np.argsort(-ours.neighbours, kind="stable")[:200]
    for i in busiest.tolist():
        sub = ig.induced_subgraph(ig.neighbors(i))
        assert circles[i] == len(sub.connected_components()), f"circles of {i} differ"
    t = median_times({
        "igraph": igraph_counts,
        "ours N, E, W": lambda: ego_features(g, eigenvalues=False),
        "ours N, E, W, lambda": lambda: ego_features(g),
        "ours contact circles": lambda: contact_circles(g),
    }, repeats)
    full = ego_features(g)
    print(f"\ncom-DBLP: n={g.n:,}, edges={g.m:,}; {repeats} alternating repeats; counts equal to igraph"
          "\n  (circles of the 200 busiest people equal to igraph's components of their neighbourhoods)")
    for label, sec in t.items():
        print(f"  {label:24s} median {sec:8.3f} s   ratio to igraph {sec / t['igraph']:6.2f}")
    print(f"  eigenvalue iterations capped (not converged): {int((~full.converged).sum()):,} egos "
          f"of {g.n:,}; largest ego {int(full.neighbours.max()):,} contacts")


def bench_peel(repeats: int) -> None:
    g, _ = snap_graph("soc-Slashdot0902", directed=True)

    def one_pass() -> np.ndarray:
        return np.bincount(g.src, weights=g.weight, minlength=g.n) + np.bincount(
            g.dst, weights=g.weight, minlength=g.n)

    t = median_times({"one pass over the edges": one_pass,
                      "densest block (peeling)": lambda: fraudar(g)}, repeats)
    (grp,) = fraudar(g)
    print(f"\nsoc-Slashdot0902: n={g.n:,}, edges={g.m:,} (read as undirected); {repeats} repeats")
    for label, sec in t.items():
        print(f"  {label:26s} median {sec:8.3f} s   ratio to one pass "
              f"{sec / t['one pass over the edges']:8.1f}")
    print(f"  block found: {grp.evidence}; density {grp.density:.2f}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    if not DATASETS.exists():
        print(f"skipped: open datasets not found at {DATASETS}")
        return
    bench_ego(args.repeats)
    bench_peel(args.repeats)


if __name__ == "__main__":
    main()

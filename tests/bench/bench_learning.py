"""Benchmark: the EM that learns IC probabilities from past campaigns, against a numpy floor.

Run:  python -m tests.bench.bench_learning [--graph soc-Slashdot0902] [--campaigns 100]
                                          [--adopters 5000] [--repeats 5]

On ``../shared/datasets/<graph>`` (directed), campaigns are simulated with the
service's own Independent Cascade simulator under p(u->v) = c / indeg(v), with
c found by bisection so that a campaign from 50 random seeds reaches about
``--adopters`` people. Then, in one run:

1. building the episodes (every adopter's out-arcs, once per campaign);
2. the floor: one pass of numpy over the same trial arrays (a gather of one
   probability per trial and a weighted bincount back onto the arcs), the least
   any EM iteration has to do; median of ``--repeats``;
3. the per-edge EM of Saito et al. (2008) and the per-segment-pair EM (two
   random segments) run to convergence: total time, iterations, time per
   iteration (total over iterations, so the one-off counting of failed trials
   per arc is included) and its ratio to the floor. The EM counts failed trials
   per arc once, so an iteration walks the arcs and the credited trials only.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time

import numpy as np

from service.analytics.learning._em import em
from service.analytics.learning._episodes import build_episodes, check_campaigns
from service.analytics.diffusion.cascades import independent_cascade
from service.analytics.graph import arcs
from service.analytics.learning.probabilities import Campaign, learned_diffusion_graph
from tests.datasets import snap_graph


def _campaigns(g, p, count, seeds, rng):  # type: ignore[no-untyped-def]
    dg = learned_diffusion_graph(g, p)
    out = []
    for i in range(count):
        s = rng.choice(g.n, size=seeds, replace=False)
        r = independent_cascade(dg, s, rng_seed=int(rng.integers(1 << 31)))
        node = np.flatnonzero(r >= 0)
        out.append(Campaign(node.astype(np.int64), r[node].astype(np.int64), label=f"c{i}"))
    return out


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--graph", default="soc-Slashdot0902")
    ap.add_argument("--campaigns", type=int, default=100)
    ap.add_argument("--adopters", type=int, default=5000)
    ap.add_argument("--repeats", type=int, default=5)
    args = ap.parse_args(argv)

    g, _ = snap_graph(args.graph, directed=True)
    a = arcs(g)
    indeg = np.bincount(a.dst, minlength=a.n).astype(np.float64)
    base = 1.0 / indeg[a.dst]
    rng = np.random.default_rng(0)
    lo, hi = 0.1, 5.0
    for _ in range(12):  # bisection on c: mean reach of 4 campaigns
        c = (lo + hi) / 2
        reach = np.mean([x.node.size for x in
                         _campaigns(g, np.minimum(base * c, 1.0), 4, 50, rng)])
        lo, hi = (c, hi) if reach < args.adopters else (lo, c)
    p = np.minimum(base * (lo + hi) / 2, 1.0)
    t0 = time.perf_counter()
    runs = _campaigns(g, p, args.campaigns, 50, rng)
    t_sim = time.perf_counter() - t0
    sizes = [x.node.size for x in runs]
    print(f"graph {args.graph}: {g.n:,} nodes, {a.src.size:,} arcs; p = {(lo + hi) / 2:.3f} / "
          f"indeg(v); {len(runs)} campaigns of {int(np.mean(sizes)):,} adopters on average "
          f"(min {min(sizes):,}, max {max(sizes):,}), simulated in {t_sim:.1f} s")

    t0 = time.perf_counter()
    ep = build_episodes(a, check_campaigns(g.n, runs))
    t_build = time.perf_counter() - t0
    print(f"episodes: {ep.arc.size:,} trials, {ep.n_events:,} activations, built in "
          f"{t_build:.2f} s")

    floor = []
    q = np.full(a.src.size, 0.05)
    for _ in range(args.repeats):
        t0 = time.perf_counter()
        np.bincount(ep.arc, weights=q[ep.arc], minlength=ep.n_arcs)
        floor.append(time.perf_counter() - t0)
    t_floor = statistics.median(floor)
    print(f"floor (one numpy gather + weighted bincount over the trials): {t_floor * 1e3:.1f} ms")

    seg = (np.random.default_rng(1).random(g.n) < 0.5).astype(np.int64)
    classes = seg[a.src] * 2 + seg[a.dst]
    for name, kw in (("per-edge EM", dict(kind="per_edge", prior=(0.0, 0.0))),
                     ("segment-pair EM", dict(kind="classes", classes=classes, n_classes=4))):
        kind = str(kw.pop("kind"))
        t0 = time.perf_counter()
        fit = em(ep, kind, tol=1e-7, max_iter=1000, **kw)  # type: ignore[arg-type]
        total = time.perf_counter() - t0
        per = total / fit.iterations
        print(f"{name}: {fit.iterations} iterations, converged {fit.converged}, total "
              f"{total:.2f} s, {per * 1e3:.1f} ms per iteration = {per / t_floor:.1f}x the floor")
    return 0


if __name__ == "__main__":
    sys.exit(main())

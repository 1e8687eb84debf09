"""Benchmark: weighted shortest-path sampling for sampled betweenness, old against new.

Run:  python -m tests.bench.bench_betweenness [--datasets wiki-Vote,ca-HepTh]
                                              [--samples 3000] [--repeats 3] [--seed 0]

For each dataset in ``../shared/datasets`` (skipped with a message when that
folder is absent): the graph as ``tests.datasets.snap_graph`` loads it (wiki-Vote
directed, 103,689 arcs; ca-HepTh undirected, 25,973 edges = 51,946 arcs), given
reproducible interaction counts 1..7 drawn from ``--seed``, and turned into
out- and in-CSR of lengths ``1 / w`` exactly as ``paths._sampled_betweenness``
does. Then the same number of samples, from the same seed, by the
one-directional Dijkstra sampler (``_rk_sample_weighted_dijkstra``, the old
kernel) and by the balanced bidirectional one (``rk_sample_weighted``),
alternately, ``--repeats`` times each after one compiled warm-up call.

Printed per dataset: median seconds of each, the ratio old / new, nodes settled
per sample by each (the work), and interior nodes per sample (the two draw the
same distribution, so these agree within noise). The machine is shared (2
cores): only medians of alternating runs are compared.
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np

from service.analytics.structure import _kernels as K
from service.analytics.structure import _weighted_sampling as W
from service.analytics.graph import GraphArrays, arcs, csr
from service.analytics.structure.paths import _RTOL
from tests.datasets import DATASETS, snap_graph

DIRECTED = {"wiki-Vote": True, "ca-HepTh": False, "ca-GrQc": False, "email-Eu-core": True}


def weighted_csr(g: GraphArrays, seed: int):
    """Interaction counts 1..7 from ``seed``; CSR of lengths 1/w as paths._sampled_betweenness."""
    w = np.random.default_rng(seed).integers(1, 8, g.m).astype(np.float64)
    g = GraphArrays(g.n, g.directed, g.src, g.dst, w)
    a = arcs(g)
    keep = a.src != a.dst
    src, dst = a.src[keep], a.dst[keep]
    length = 1.0 / a.weight[keep]
    return csr(g.n, src, dst, length), csr(g.n, dst, src, length), int(src.shape[0])


def run(kernel, n, out, inn, samples: int, seed: int) -> tuple[float, int, float]:
    """(seconds, nodes settled, interior nodes) for ``samples`` draws from ``seed``."""
    counts = np.zeros(n)
    state = K.seed_state(seed)
    t0 = time.perf_counter()
    settled = kernel(n, out.indptr, out.indices, out.data, inn.indptr, inn.indices, inn.data,
                     samples, state, counts, _RTOL)
    return time.perf_counter() - t0, int(settled), float(counts.sum())


def bench(name: str, samples: int, repeats: int, seed: int) -> None:
    g, _ = snap_graph(name, directed=DIRECTED.get(name, False))
    out, inn, m = weighted_csr(g, seed)
    kernels = {"old (one-directional Dijkstra)": W._rk_sample_weighted_dijkstra,
               "new (bidirectional Dijkstra)": W.rk_sample_weighted}
    for kernel in kernels.values():  # compile / load from the cache, untimed
        run(kernel, g.n, out, inn, 1, seed)
    times: dict[str, list[float]] = {k: [] for k in kernels}
    work: dict[str, tuple[int, float]] = {}
    for rep in range(repeats):
        order = list(kernels) if rep % 2 == 0 else list(reversed(kernels))
        for label in order:
            sec, settled, interior = run(kernels[label], g.n, out, inn, samples, seed)
            times[label].append(sec)
            work[label] = (settled, interior)
    print(f"\n{name}: n={g.n:,}, arcs={m:,} ({'directed' if g.directed else 'undirected'}), "
          f"lengths 1/w with w uniform in 1..7 (seed {seed}), {samples:,} samples, "
          f"{repeats} alternating repeats")
    for label in kernels:
        settled, interior = work[label]
        print(f"  {label:32s} median {statistics.median(times[label]):8.3f} s   "
              f"settled/sample {settled / samples:10.1f}   interior/sample {interior / samples:.3f}")
    old, new = (statistics.median(times[k]) for k in kernels)
    s_old, s_new = (work[k][0] for k in kernels)
    print(f"  ratio old/new: time {old / new:.1f}x, nodes settled {s_old / s_new:.1f}x")


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--datasets", default="wiki-Vote,ca-HepTh")
    ap.add_argument("--samples", type=int, default=3000)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--seed", type=int, default=0)
    args = ap.parse_args()
    if not DATASETS.exists():
        print(f"skipped: open datasets not found at {DATASETS} (../shared is outside the project)")
        return 0
    for name in args.datasets.split(","):
        if not (DATASETS / f"{name}.edges.gz").exists():
            print(f"skipped {name}: {DATASETS / (name + '.edges.gz')} not found")
            continue
        bench(name, args.samples, args.repeats, args.seed)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

"""Benchmark: the default ``scores`` job through the queue, and top-50 ranking reads.

Run:  python -m tests.bench.bench_scores [--dataset soc-Slashdot0902] [--repeats 3] [--reads 300]

1. A real ``bellwether serve --workers 1`` on loopback (embedded SQLite). The
   dataset's edge list (self-loops dropped) is uploaded as CSV over HTTP; then
   the default ``scores`` job (``params: {}``) is timed from ``POST`` to the
   long-poll (``GET /v1/jobs/{id}?wait=``) that reports it succeeded. Against
   it, in this process: ``service.analytics.structure.centrality.scores(g, None)`` on
   the same graph held in memory (``tests.datasets.snap_graph``). The two are
   run alternately; goal: ratio of medians <= 1.3.
2. ``GET /v1/graphs/{id}/rankings?measure=pagerank&limit=50`` against
   ``GET /healthz`` of the same server (and, for scale, ``GET /v1/graphs/{id}``,
   the simplest read behind the key check and a database session),
   interleaved over one keep-alive connection after a warm-up: median and
   99th percentile of each, and their ratios.

3. Storing and serving a large result (``--synthetic-nodes``, default 1M, 12
   measures with many ties, one random-ish edge per node): building the
   ranking arrays, writing the result to a fresh SQLite file, then over the
   in-process app the first (cold) top-50 read, warm reads, a filtered read,
   and the whole ranking as CSV.

The machine is shared: figures are medians of ``--repeats`` runs, and every
pair is measured alternately so that load hits both sides alike.
"""

from __future__ import annotations

import argparse
import statistics
import tempfile
import time
from datetime import datetime
from pathlib import Path

import httpx
import numpy as np

from service.analytics.structure.centrality import default_measures, scores
from tests.datasets import snap_edges, snap_graph
from tests.live import live_server

DIRECTED = {"soc-Slashdot0902": True, "com-DBLP": False}


def write_csv(path: Path, edges: np.ndarray) -> int:
    edges = edges[edges[:, 0] != edges[:, 1]]
    with open(path, "w") as fh:
        fh.write("source,target\n")
        for start in range(0, len(edges), 200_000):
            chunk = edges[start:start + 200_000]
            fh.write("".join(f"{u},{v}\n" for u, v in chunk.tolist()))
    return len(edges)


def run_job(c: httpx.Client, gid: str) -> tuple[float, tuple[float, float], dict[str, object]]:
    """Seconds from POST to the succeeded answer; (queue wait, run) from the job's timestamps; the result."""
    t0 = time.perf_counter()
    r = c.post(f"/v1/graphs/{gid}/jobs", json={"kind": "scores", "params": {}})
    assert r.status_code == 202, r.text
    jid = r.json()["id"]
    while True:
        job = c.get(f"/v1/jobs/{jid}", params={"wait": 60}).json()
        if job["status"] in ("succeeded", "failed", "cancelled"):
            break
    elapsed = time.perf_counter() - t0
    assert job["status"] == "succeeded", job
    when = {k: datetime.fromisoformat(job[k]) for k in ("created_at", "started_at", "finished_at")}
    split = ((when["started_at"] - when["created_at"]).total_seconds(),
             (when["finished_at"] - when["started_at"]).total_seconds())
    return elapsed, split, c.get(f"/v1/jobs/{jid}/result").json()


def pct(xs: list[float], q: float) -> float:
    return float(np.percentile(np.asarray(xs), q))


def synthetic(n: int, k: int) -> None:
    """Section 3: store and serve an n-node result of k measures (in-process app, SQLite)."""
    import asyncio
    from datetime import UTC

    from service.analytics.structure.centrality import MEASURES
    from service.analytics.graph import GraphArrays, NodeAttributes
    from service.app import create_app
    from service.usecases.loading import version_arrays
    from service.usecases._ranking_tables import result_arrays
    from service.settings import Settings
    from storage.migrate import upgrade
    from storage.repo import graphs as graph_repo
    from storage.repo import jobs as job_repo
    from storage.repo import results as result_repo

    tmp = Path(tempfile.mkdtemp(prefix="bw-bench-store-"))
    url = f"sqlite:///{tmp / 'bellwether.sqlite3'}"
    upgrade(url)
    rng = np.random.default_rng(5)
    src = np.arange(n, dtype=np.int32)
    g = GraphArrays(n, False, src, ((src + 1 + rng.integers(0, n - 1, n)) % n).astype(np.int32), np.ones(n))
    ids = [f"person-{i}" for i in rng.permutation(n).tolist()]
    attrs = NodeAttributes.empty(n)
    attrs.consent[:] = rng.integers(0, 2, n)
    names = [m for m in MEASURES if m != "community"][:k]
    values = {m: (rng.integers(0, 50, n).astype(float) if i % 2 else rng.random(n)) for i, m in enumerate(names)}
    t0 = time.perf_counter()
    arrays = result_arrays(g, ids, values)
    build = time.perf_counter() - t0
    settings = Settings(data_dir=tmp, database_url=url, auth_disabled=True, rate_limit_per_second=0)
    app = create_app(settings)

    async def run() -> None:
        async with app.router.lifespan_context(app):
            maker = app.state.sessionmaker
            with maker() as db:
                graph = graph_repo.add_graph(db, tenant_id="default", name="synthetic", directed=False)
                va, extra = version_arrays(g, ids, attrs)
                extra["has_consent_data"] = True
                graph_repo.add_version(db, graph, based_on=0, arrays=va, manifest_extra=extra, summary={},
                                       origin={}, nodes=n, edges=n)
                now = datetime.now(UTC)
                job, _ = job_repo.add_job(db, tenant_id="default", graph_id=graph.id, version=1, kind="scores",
                                          params={}, now=now)
                db.commit()
                data = {"measures": {m: {"normalization": "synthetic"} for m in names}}
                t0 = time.perf_counter()
                result_repo.add_result(db, job.id, data, arrays, now)
                job.status, job.finished_at = "succeeded", now
                db.commit()
                write = time.perf_counter() - t0
            size = sum(a.nbytes for a in arrays.values()) / 1e6
            print(f"synthetic result: {n:,} nodes x {k} measures, {len(arrays)} arrays, {size:.0f} MB")
            print(f"  ranking arrays (orders, percentiles) {build:.2f} s; stored in SQLite {write:.2f} s")
            transport = httpx.ASGITransport(app=app)
            async with httpx.AsyncClient(transport=transport, base_url="http://bench", timeout=600) as c:
                url = f"/v1/graphs/{graph.id}/rankings"
                q = {"measure": names[1], "limit": 50}
                t0 = time.perf_counter()
                r = await c.get(url, params=q)
                cold = time.perf_counter() - t0
                assert r.status_code == 200 and r.json()["total"] == n, r.text
                warm = []
                for _ in range(50):
                    t0 = time.perf_counter()
                    await c.get(url, params=q)
                    warm.append(time.perf_counter() - t0)
                t0 = time.perf_counter()
                r = await c.get(url, params={**q, "contactable": "true"})
                filt = time.perf_counter() - t0
                t0 = time.perf_counter()
                await c.get(url, params={**q, "contactable": "true", "cursor": r.json()["next_cursor"]})
                filt2 = time.perf_counter() - t0
                t0 = time.perf_counter()
                r = await c.get(url, params={"measure": names[1], "format": "csv"})
                export = time.perf_counter() - t0
                rows = r.text.count("\n") - 1
            print(f"  top-50 read: first (loads ids + 3 arrays) {cold * 1000:.0f} ms; warm median "
                  f"{statistics.median(warm) * 1000:.2f} ms (in-process ASGI)")
            print(f"  contactable=true: first {filt * 1000:.0f} ms (builds the filtered order), next page "
                  f"{filt2 * 1000:.2f} ms")
            print(f"  CSV export of the whole ranking: {export:.2f} s, {rows:,} rows")

    asyncio.run(run())


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--dataset", default="soc-Slashdot0902", choices=sorted(DIRECTED))
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--reads", type=int, default=300)
    ap.add_argument("--synthetic-nodes", type=int, default=1_000_000, help="0 skips section 3")
    ap.add_argument("--synthetic-measures", type=int, default=12)
    args = ap.parse_args()
    directed = DIRECTED[args.dataset]
    tmp = Path(tempfile.mkdtemp(prefix="bw-bench-scores-"))
    csv_path = tmp / "edges.csv"
    m = write_csv(csv_path, snap_edges(args.dataset))
    g, _ = snap_graph(args.dataset, directed=directed)
    print(f"{args.dataset}: {g.n:,} nodes, {g.m:,} edges ({m:,} CSV rows, self-loops dropped), "
          f"directed={directed}")
    print(f"default measures: {', '.join(default_measures(g))}")

    data = tmp / "data"
    data.mkdir()
    e2e, direct = [], []
    # No rate limit: the read benchmark sends hundreds of requests a second on one key.
    env = {"BELLWETHER_RATE_LIMIT_PER_SECOND": "0"}
    with live_server(data, workers=1, env=env) as base, httpx.Client(base_url=base, timeout=600) as c:
        gid = c.post("/v1/graphs", json={"name": "bench", "directed": directed}).json()["id"]
        t0 = time.perf_counter()
        with open(csv_path, "rb") as fh:
            r = c.post(f"/v1/graphs/{gid}/versions", content=fh, headers={"Content-Type": "text/csv"})
        assert r.status_code == 201, r.text
        print(f"upload: {time.perf_counter() - t0:.1f} s, version nodes={r.json()['nodes']:,} "
              f"edges={r.json()['edges']:,}")
        result: dict[str, object] = {}
        splits = []
        for _ in range(args.repeats):
            t, split, result = run_job(c, gid)
            e2e.append(t)
            splits.append(split)
            t0 = time.perf_counter()
            scores(g, None)
            direct.append(time.perf_counter() - t0)
        assert sorted(result["measures"]) == sorted(default_measures(g))  # type: ignore[arg-type]
        job_t, ref_t = statistics.median(e2e), statistics.median(direct)
        print(f"scores job, POST -> succeeded  median {job_t:.2f} s  (runs: {', '.join(f'{x:.2f}' for x in e2e)})")
        print(f"scores(g) in memory            median {ref_t:.2f} s  (runs: {', '.join(f'{x:.2f}' for x in direct)})")
        print("  of which, from the job's timestamps: queue wait (claim poll) "
              + ", ".join(f"{w:.2f}" for w, _ in splits) + " s; running " + ", ".join(f"{x:.2f}" for _, x in splits)
              + " s; the rest is the long-poll noticing")
        print(f"RATIO job/direct = {job_t / ref_t:.2f}  (goal <= 1.3)")
        run_t = statistics.median([x for _, x in splits])
        print(f"RATIO job running time (started_at -> finished_at) / direct = {run_t / ref_t:.2f}")

        url = f"/v1/graphs/{gid}/rankings"
        q = {"measure": "pagerank", "limit": 50}
        first = c.get(url, params=q)
        assert first.status_code == 200 and len(first.json()["items"]) == 50, first.text
        for _ in range(20):  # warm-up: caches, connection
            c.get(url, params=q)
            c.get("/healthz")
        top, health, graph = [], [], []
        for _ in range(args.reads):
            t0 = time.perf_counter()
            r = c.get(url, params=q)
            top.append(time.perf_counter() - t0)
            assert r.status_code == 200, r.text
            t0 = time.perf_counter()
            c.get("/healthz")
            health.append(time.perf_counter() - t0)
            t0 = time.perf_counter()
            c.get(f"/v1/graphs/{gid}")
            graph.append(time.perf_counter() - t0)
        ms = 1000.0
        print(f"top-50 ranking  median {statistics.median(top) * ms:.2f} ms  p99 {pct(top, 99) * ms:.2f} ms "
              f"({args.reads} reads)")
        print(f"/healthz        median {statistics.median(health) * ms:.2f} ms  p99 {pct(health, 99) * ms:.2f} ms")
        print(f"GET /v1/graphs/{{id}} median {statistics.median(graph) * ms:.2f} ms  p99 {pct(graph, 99) * ms:.2f} ms "
              "(the simplest keyed read, for scale)")
        print(f"RATIO top-50 / healthz: median {statistics.median(top) / statistics.median(health):.2f}, "
              f"p99 {pct(top, 99) / pct(health, 99):.2f}")
        print(f"RATIO top-50 / GET graph: median {statistics.median(top) / statistics.median(graph):.2f}, "
              f"p99 {pct(top, 99) / pct(graph, 99):.2f}")
    if args.synthetic_nodes:
        synthetic(args.synthetic_nodes, args.synthetic_measures)


if __name__ == "__main__":
    main()

"""Benchmark: introductions and next contacts on com-DBLP over loopback HTTP, ratios in one run.

Run:  python -m tests.bench.bench_recommendations [--requests 300] [--adopters 10000] [--repeats 5]

com-DBLP (317,080 nodes, 1,049,866 edges; ../shared/datasets) is uploaded
into a real ``bellwether serve`` process on loopback (auth disabled, no
workers). Then:

1. A node's recommendations (Adamic-Adar, limit 10, three shared contacts)
   for ``--requests`` random people, each followed by one ``GET /healthz`` of
   the same app, so both see the same machine load: median and 99th
   percentile latency of each, and their ratio. ``GET /v1/graphs/{id}`` (the
   same authentication and database path, no computation) is timed beside
   them to show where the time goes. The very first request
   builds the version's neighbour index and is timed on its own.
2. Next contacts for ``--adopters`` random people (default limit 50), wall
   time of the HTTP request against igraph listing the same adopters'
   neighbourhoods (``g.neighborhood(adopters)``, graph already in memory) in
   the same run, medians of ``--repeats`` alternating runs. The first request
   builds the arc probabilities and is timed on its own.
3. For scale, once each: referral asks for the same adopters
   (group_by=adopter, all of them), and next contacts for 100,000 adopters
   as JSON and as a CSV body.

Skips with a message when the dataset is absent.
"""

from __future__ import annotations

import argparse
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

import httpx
import numpy as np


def load_edges() -> np.ndarray | None:
    import pytest

    from tests.datasets import snap_edges

    try:
        return snap_edges("com-DBLP")
    except pytest.skip.Exception as exc:
        print(f"SKIPPED: {exc}")
        return None


def pct(xs: list[float], q: float) -> float:
    return float(np.percentile(np.asarray(xs), q))


def ms(x: float) -> str:
    return f"{x * 1000:.2f} ms"


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--requests", type=int, default=300)
    ap.add_argument("--adopters", type=int, default=10_000)
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--seed", type=int, default=7)
    args = ap.parse_args()
    edges = load_edges()
    if edges is None:
        return 0
    import igraph

    rng = np.random.default_rng(args.seed)
    ids, inv = np.unique(edges.ravel(), return_inverse=True)
    inv = inv.reshape(-1, 2)
    print(f"com-DBLP: {len(ids):,} nodes, {len(edges):,} edges")
    tmp = Path(tempfile.mkdtemp(prefix="bw-bench-rec-"))
    csv_path = tmp / "dblp.csv"
    with open(csv_path, "w") as fh:
        fh.write("source,target\n")
        for c in range(0, len(edges), 200_000):
            part = edges[c : c + 200_000]
            fh.write("".join(f"{u},{v}\n" for u, v in part.tolist()))
    data = tmp / "data"
    data.mkdir()
    with live_server_ctx(data) as base, httpx.Client(base_url=base, timeout=600) as c:
        gid = c.post("/v1/graphs", json={"name": "dblp", "directed": False}).json()["id"]
        t0 = time.perf_counter()
        with open(csv_path, "rb") as fh:
            r = c.post(f"/v1/graphs/{gid}/versions", content=fh, headers={"Content-Type": "text/csv"})
        assert r.status_code == 201, r.text
        print(f"upload: {time.perf_counter() - t0:.1f} s")

        # 1. introductions vs /healthz
        people = [str(ids[i]) for i in rng.choice(len(ids), args.requests + 1, replace=False)]
        url = f"/v1/graphs/{gid}/nodes/{{}}/recommendations"
        t0 = time.perf_counter()
        r = c.get(url.format(people[0]))
        assert r.status_code == 200, r.text
        first = time.perf_counter() - t0
        rec_t, health_t, read_t, empty = [], [], [], 0
        for person in people[1:]:
            t0 = time.perf_counter()
            r = c.get(url.format(person))
            rec_t.append(time.perf_counter() - t0)
            assert r.status_code == 200, r.text
            empty += not r.json()["items"]
            t0 = time.perf_counter()
            assert c.get("/healthz").status_code == 200
            health_t.append(time.perf_counter() - t0)
            t0 = time.perf_counter()
            assert c.get(f"/v1/graphs/{gid}").status_code == 200
            read_t.append(time.perf_counter() - t0)
        print(f"recommendations: first request (loads the version, builds the neighbour index) {first:.2f} s")
        print(f"recommendations: {len(rec_t)} requests, median {ms(statistics.median(rec_t))}, "
              f"p99 {ms(pct(rec_t, 99))} ({empty} people had no suggestion)")
        print(f"/healthz:        {len(health_t)} requests, median {ms(statistics.median(health_t))}, "
              f"p99 {ms(pct(health_t, 99))}")
        print(f"GET /v1/graphs/{{id}} (auth, one database read): {len(read_t)} requests, "
              f"median {ms(statistics.median(read_t))}, p99 {ms(pct(read_t, 99))}")
        print(f"RATIO recommendations/healthz: median {statistics.median(rec_t) / statistics.median(health_t):.2f}, "
              f"p99 {pct(rec_t, 99) / pct(health_t, 99):.2f}")

        # 2. next contacts vs igraph neighbourhoods
        g = igraph.Graph(n=len(ids), edges=inv, directed=False)
        pick = rng.choice(len(ids), args.adopters, replace=False)
        adopters = [str(ids[i]) for i in pick]
        vertices = pick.tolist()
        endpoint = f"/v1/graphs/{gid}/next-contacts"
        t0 = time.perf_counter()
        r = c.post(endpoint, json={"adopters": adopters})
        assert r.status_code == 200, r.text
        print(f"next contacts: first request (builds the arc probabilities) {time.perf_counter() - t0:.2f} s")
        http_t, ig_t = [], []
        for _ in range(args.repeats):
            t0 = time.perf_counter()
            r = c.post(endpoint, json={"adopters": adopters})
            http_t.append(time.perf_counter() - t0)
            assert r.status_code == 200 and len(r.json()["items"]) == 50
            t0 = time.perf_counter()
            hoods = g.neighborhood(vertices)
            ig_t.append(time.perf_counter() - t0)
            assert len(hoods) == len(vertices)
        h, i = statistics.median(http_t), statistics.median(ig_t)
        print(f"next contacts, {args.adopters:,} adopters over HTTP: median {ms(h)} "
              f"(runs: {', '.join(ms(x) for x in http_t)})")
        print(f"igraph g.neighborhood({args.adopters:,} adopters): median {ms(i)} "
              f"(runs: {', '.join(ms(x) for x in ig_t)})")
        print(f"RATIO next contacts/igraph neighbourhoods = {h / i:.2f}")

        # 3. scale
        t0 = time.perf_counter()
        r = c.post(endpoint, json={"adopters": adopters, "group_by": "adopter", "limit": None})
        took = time.perf_counter() - t0
        assert r.status_code == 200, r.text
        groups = r.json()["groups"]
        print(f"referral asks, {args.adopters:,} adopters, all groups: {ms(took)} "
              f"({len(groups):,} adopters, {sum(len(x['targets']) for x in groups):,} targets, "
              f"{len(r.content) / 1e6:.1f} MB)")
        big = [str(ids[i]) for i in rng.choice(len(ids), 100_000, replace=False)]
        body_json = httpx.Request("POST", "http://x", json={"adopters": big}).content
        t0 = time.perf_counter()
        r = c.post(endpoint, content=body_json, headers={"Content-Type": "application/json"})
        took = time.perf_counter() - t0
        assert r.status_code == 200, r.text
        print(f"next contacts, 100,000 adopters as JSON ({len(body_json) / 1e6:.1f} MB): {ms(took)}")
        body_csv = ("id\n" + "\n".join(big) + "\n").encode()
        t0 = time.perf_counter()
        r = c.post(endpoint, content=body_csv, headers={"Content-Type": "text/csv"})
        took = time.perf_counter() - t0
        assert r.status_code == 200, r.text
        print(f"next contacts, 100,000 adopters as CSV ({len(body_csv) / 1e6:.1f} MB): {ms(took)}")
    shutil.rmtree(tmp, ignore_errors=True)  # kept on failure, with the server log
    return 0


def live_server_ctx(data: Path):  # type: ignore[no-untyped-def]
    from tests.live import live_server

    # The bench sends hundreds of requests a second: lift the per-client rate limit.
    env = {"BELLWETHER_RATE_LIMIT_PER_SECOND": "1000000", "BELLWETHER_RATE_LIMIT_BURST": "1000000"}
    return live_server(data, workers=0, env=env)


if __name__ == "__main__":
    sys.exit(main())

"""Benchmark: the API stays responsive while a worker is busy with a long job.

Run:  python -m tests.bench.bench_jobs [--requests 500]

Starts ``bellwether serve --workers 1`` on loopback, uploads a generated graph,
and measures ``GET /healthz`` latency over HTTP twice in the same run: while no
job runs, and while the worker runs a long CPU-bound ``scores`` job (exact
betweenness). Goal: 99th percentile while busy under 50 ms. The worker is a
separate process, so the API's event loop never runs job code.
"""

from __future__ import annotations

import argparse
import statistics
import tempfile
import time
from pathlib import Path

import httpx

from service.cli.scenario import generate, write_csv
from tests.live import live_server


def latencies(client: httpx.Client, n: int) -> list[float]:
    out = []
    for _ in range(n):
        t0 = time.perf_counter()
        assert client.get("/healthz").status_code == 200
        out.append((time.perf_counter() - t0) * 1000)
    return out


def p(values: list[float], q: float) -> float:
    return sorted(values)[min(len(values) - 1, int(q * len(values)))]


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--requests", type=int, default=500)
    ap.add_argument("--members", type=int, default=20_000)
    args = ap.parse_args()
    tmp = Path(tempfile.mkdtemp(prefix="bw-bench-jobs-"))
    edges, _ = write_csv(generate(args.members, seed=3), tmp / "upload")
    data = tmp / "data"
    data.mkdir()
    with live_server(data, workers=1, env={"BELLWETHER_RATE_LIMIT_PER_SECOND": "0"}) as base:
        with httpx.Client(base_url=base, timeout=60) as c:
            gid = c.post("/v1/graphs", json={"name": "bench", "directed": False}).json()["id"]
            with open(edges, "rb") as fh:
                assert c.post(f"/v1/graphs/{gid}/versions", content=fh,
                              headers={"Content-Type": "text/csv"}).status_code == 201
            latencies(c, 50)  # warm-up
            idle = latencies(c, args.requests)
            job = c.post(f"/v1/graphs/{gid}/jobs", json={"kind": "scores", "params": {
                "measures": ["betweenness", "harmonic"], "betweenness": "exact"}}).json()
            while c.get(f"/v1/jobs/{job['id']}").json()["status"] != "running":
                time.sleep(0.05)
            busy = latencies(c, args.requests)
            still = c.get(f"/v1/jobs/{job['id']}").json()["status"]
            c.post(f"/v1/jobs/{job['id']}/cancel")
    print(f"/healthz idle: median {statistics.median(idle):.2f} ms, p99 {p(idle, 0.99):.2f} ms ({len(idle)} requests)")
    print(f"/healthz while a worker runs a long job: median {statistics.median(busy):.2f} ms, "
          f"p99 {p(busy, 0.99):.2f} ms (job still {still} at the end)")
    print(f"RATIO busy/idle: median {statistics.median(busy) / statistics.median(idle):.2f}, "
          f"p99 {p(busy, 0.99) / p(idle, 0.99):.2f}; goal p99 busy < 50 ms: "
          f"{'met' if p(busy, 0.99) < 50 else 'NOT met'}")


if __name__ == "__main__":
    main()

"""Load benchmark: concurrent clients on rankings, node reads and job polling, loopback only.

Run:  python -m tests.bench.bench_load [--clients 50,200] [--seconds 4] [--nodes 2000] [--no-postgres]

Two deployments, each started here on 127.0.0.1 and stopped at the end:

- ``embedded``: one ``bellwether serve --workers 1`` on a fresh SQLite file.
- ``postgres``: two ``bellwether serve --workers 0`` processes (clients
  alternate between their ports) and one ``bellwether worker``, on a fresh
  database of the PostgreSQL server at 127.0.0.1:5432 (dropped afterwards).

Each gets a graph (``--nodes`` people, about 4 ties each), a finished
``scores`` job (for rankings) and a finished ``profile`` job (for polling).
Then, for each level of concurrency, ``--seconds`` of closed-loop load per
endpoint: ``GET /healthz`` (the trivial endpoint of the same app, the
baseline of the same run), ``GET .../rankings?measure=pagerank&limit=50``,
``GET .../nodes/{id}`` (random ids) and ``GET /v1/jobs/{id}``. Printed:
requests, throughput, p50 and p99 latency, errors (any answer but 200, or a
transport error), and throughput relative to ``/healthz``.

Auth is on (one key for all clients) and the per-key rate limit is off
(``BELLWETHER_RATE_LIMIT_PER_SECOND=0``): the figures are the service's, not
the limiter's. Driver and servers share this machine's cores, so absolute
figures are low bounds; the ratios are the portable part. Bounded: every
run stops after ``--seconds``; everything is on loopback.
"""

from __future__ import annotations

import argparse
import asyncio
import os
import random
import secrets
import statistics
import sys
import tempfile
import time
from collections.abc import Callable, Iterator
from contextlib import ExitStack, contextmanager
from pathlib import Path
from typing import Any

import httpx

from storage.db import make_engine, make_sessionmaker
from storage.migrate import upgrade
from storage.repo import keys as key_repo
from tests.live import free_port
from tests.ops.helpers import Proc, child_env, start_api, start_worker, wait_healthy

PG_ADMIN_URL = os.environ.get("BELLWETHER_TEST_PG", "postgresql://postgres@127.0.0.1:5432/test")


def edges_csv(n: int, seed: int = 3) -> str:
    rng = random.Random(seed)
    rows = {(min(a, b), max(a, b)) for a, b in ((rng.randrange(n), rng.randrange(n)) for _ in range(4 * n)) if a != b}
    return "source,target,weight\n" + "".join(f"p{a},p{b},{1 + (a + b) % 5}\n" for a, b in sorted(rows))


def add_key(url: str) -> str:
    engine = make_engine(url)
    with make_sessionmaker(engine)() as db:
        _, plain = key_repo.add_key(db, tenant_id="bench", scopes=["read", "write"])
        db.commit()
    engine.dispose()
    return plain


@contextmanager
def embedded(folder: Path) -> Iterator[tuple[list[str], str]]:
    data = folder / "embedded" / "data"
    data.mkdir(parents=True)
    url = f"sqlite:///{data / 'bellwether.sqlite3'}"
    upgrade(url)
    key = add_key(url)
    env = child_env(data, None, BELLWETHER_RATE_LIMIT_PER_SECOND="0", BELLWETHER_LOG_LEVEL="WARNING")
    proc, base = start_api(data, env, port=free_port(), workers=1)
    try:
        wait_healthy(proc, base)
        yield [base], key
    finally:
        proc.stop()


@contextmanager
def postgres(folder: Path) -> Iterator[tuple[list[str], str]]:
    import psycopg

    name = f"bw_bench_{secrets.token_hex(5)}"
    with psycopg.connect(PG_ADMIN_URL, autocommit=True, connect_timeout=5) as admin:
        admin.execute(f'CREATE DATABASE "{name}"')
    url = f"postgresql+psycopg://{PG_ADMIN_URL.rsplit('/', 1)[0].split('://', 1)[1]}/{name}"
    procs: list[Proc] = []
    try:
        upgrade(url)
        key = add_key(url)
        data = folder / "postgres" / "data"
        data.mkdir(parents=True)
        env = child_env(data, url, BELLWETHER_RATE_LIMIT_PER_SECOND="0", BELLWETHER_LOG_LEVEL="WARNING")
        apis = [start_api(data, env, port=free_port()) for _ in range(2)]
        procs = [p for p, _ in apis] + [start_worker(data, env, "bench")]
        for p, b in apis:
            wait_healthy(p, b)
        yield [b for _, b in apis], key
    finally:
        for p in procs:
            p.stop()
        with psycopg.connect(PG_ADMIN_URL, autocommit=True) as admin:
            admin.execute("SELECT pg_terminate_backend(pid) FROM pg_stat_activity WHERE datname = %s", (name,))
            admin.execute(f'DROP DATABASE IF EXISTS "{name}"')


def prepare(base: str, key: str, nodes: int) -> dict[str, str]:
    h = {"Authorization": f"Bearer {key}"}
    with httpx.Client(base_url=base, headers=h, timeout=120) as c:
        gid = c.post("/v1/graphs", json={"name": "bench", "directed": False}).json()["id"]
        r = c.post(f"/v1/graphs/{gid}/versions", content=edges_csv(nodes), headers={"Content-Type": "text/csv"})
        r.raise_for_status()
        jobs = {}
        for kind, params in (("scores", {"measures": ["degree", "pagerank"]}), ("profile", {})):
            r = c.post(f"/v1/graphs/{gid}/jobs", json={"kind": kind, "params": params})
            r.raise_for_status()
            jobs[kind] = r.json()["id"]
        for kind, job in jobs.items():
            deadline = time.monotonic() + 120
            while (status := c.get(f"/v1/jobs/{job}", params={"wait": 10}).json()["status"]) != "succeeded":
                if status in ("failed", "cancelled") or time.monotonic() > deadline:
                    raise SystemExit(f"{kind} job {job} ended {status}")
        r = c.get(f"/v1/graphs/{gid}/rankings", params={"measure": "pagerank", "limit": 50})
        r.raise_for_status()
    return {"graph": gid, "job": jobs["profile"]}


async def load(
    bases: list[str], key: str, clients: int, seconds: float, path_of: Callable[[random.Random], str]
) -> dict[str, Any]:
    latencies: list[float] = []
    errors: list[str] = []
    deadline = time.perf_counter() + seconds
    limits = httpx.Limits(max_connections=clients, max_keepalive_connections=clients)
    clients_http = [
        httpx.AsyncClient(base_url=b, headers={"Authorization": f"Bearer {key}"}, timeout=30, limits=limits)
        for b in bases
    ]

    async def one(i: int) -> None:
        rng = random.Random(i)
        c = clients_http[i % len(clients_http)]
        while time.perf_counter() < deadline:
            t = time.perf_counter()
            try:
                r = await c.get(path_of(rng))
                ok = r.status_code == 200
                if not ok:
                    errors.append(f"{r.status_code} {r.text[:120]}")
            except httpx.HTTPError as exc:
                errors.append(type(exc).__name__)
                ok = False
            if ok:
                latencies.append(time.perf_counter() - t)

    t0 = time.perf_counter()
    try:
        await asyncio.gather(*(one(i) for i in range(clients)))
    finally:
        for c in clients_http:
            await c.aclose()
    took = time.perf_counter() - t0
    lat = sorted(latencies)
    pct = (lambda q: lat[min(len(lat) - 1, int(q * len(lat)))] * 1000) if lat else (lambda q: float("nan"))
    return {
        "requests": len(lat) + len(errors),
        "rps": len(lat) / took,
        "p50": pct(0.50),
        "p99": pct(0.99),
        "errors": len(errors),
        "first_error": errors[0] if errors else "",
        "mean": statistics.fmean(lat) * 1000 if lat else float("nan"),
    }


def run(deployment: str, bases: list[str], key: str, ids: dict[str, str], args: argparse.Namespace) -> list[str]:
    gid, job = ids["graph"], ids["job"]
    endpoints: list[tuple[str, Callable[[random.Random], str]]] = [
        ("healthz", lambda rng: "/healthz"),
        ("rankings", lambda rng: f"/v1/graphs/{gid}/rankings?measure=pagerank&limit=50"),
        ("node", lambda rng: f"/v1/graphs/{gid}/nodes/p{rng.randrange(args.nodes)}"),
        ("job poll", lambda rng: f"/v1/jobs/{job}"),
    ]
    lines = []
    for clients in args.clients:
        asyncio.run(load(bases, key, clients, 1.0, endpoints[0][1]))  # warm-up: connections, caches
        base_rps = None
        for name, path_of in endpoints:
            res = asyncio.run(load(bases, key, clients, args.seconds, path_of))
            base_rps = base_rps or res["rps"]
            line = (
                f"{deployment:9} {name:9} {clients:4d} {res['requests']:8d} {res['rps']:9.0f} "
                f"{res['p50']:8.1f} {res['p99']:8.1f} {res['errors']:6d} {res['rps'] / base_rps:9.2f}"
            )
            if res["errors"]:
                line += f"   first error: {res['first_error']}"
            print(line, flush=True)
            lines.append(line)
    return lines


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--clients", default="50,200", help="concurrency levels, comma-separated")
    p.add_argument("--seconds", type=float, default=4.0, help="load per endpoint and level")
    p.add_argument("--nodes", type=int, default=2000)
    p.add_argument("--no-postgres", action="store_true", help="embedded default only")
    args = p.parse_args(argv)
    args.clients = [int(x) for x in args.clients.split(",")]
    os.environ.setdefault("NUMBA_CACHE_DIR", str(Path(__file__).resolve().parents[2] / ".numba-cache"))
    header = (
        f"{'deploy':9} {'endpoint':9} {'cli':>4} {'requests':>8} {'req/s':>9} {'p50 ms':>8} {'p99 ms':>8} "
        f"{'errors':>6} {'vs healthz':>9}"
    )
    print(f"bench_load: {args.nodes} nodes, {args.seconds:g} s per run, clients {args.clients}, cpus {os.cpu_count()}")
    print(header)
    failures = 0
    with tempfile.TemporaryDirectory(prefix="bw-load-") as tmp, ExitStack():
        deployments = [("embedded", embedded)] + ([] if args.no_postgres else [("postgres", postgres)])
        for name, start in deployments:
            with start(Path(tmp)) as (bases, key):
                ids = prepare(bases[0], key, args.nodes)
                lines = run(name, bases, key, ids, args)
                failures += sum(1 for line in lines if "first error" in line)
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())

"""Benchmark: graph intake and loading, measured side by side in one run.

Run:  python -m tests.bench.bench_intake [--edges 1000000] [--repeats 3]

1. Upload of an m-edge CSV over HTTP into the embedded default (a real
   ``bellwether serve`` process on loopback), against a reference path in the
   same run: the fastest CSV reader we use (``service.intake.read_edges_csv``)
   plus one ``executemany`` of the same rows into a fresh SQLite file in one
   transaction. Goal: ratio <= 2.0.
2. Peak server memory during the upload (VmHWM of the server process minus its
   resident size before), against the size of the graph's edge arrays
   (src + dst int32, weight float64: 16 bytes an edge). Goal: <= 3.0.
3. Loading a stored version into igraph (``load_version`` + ``to_igraph``),
   against igraph building the same graph from in-memory numpy arrays.
   Goal: ratio <= 1.5.

Machines are noisy: each figure is the median of ``--repeats`` runs, and the
pair of each ratio is measured alternately.
"""

from __future__ import annotations

import argparse
import os
import sqlite3
import statistics
import tempfile
import time
from pathlib import Path

import httpx
import numpy as np

from service.analytics.graph import to_igraph
from service.intake import Interner, read_edges_csv
from tests.live import live_server


def make_csv(path: Path, m: int, n: int, seed: int = 1) -> None:
    rng = np.random.default_rng(seed)
    src = rng.integers(0, n, m)
    dst = (src + 1 + rng.integers(0, n - 1, m)) % n  # no self-loops
    w = rng.integers(1, 20, m)
    with open(path, "w") as fh:
        fh.write("source,target,weight\n")
        for chunk in range(0, m, 200_000):
            s, d, ww = src[chunk : chunk + 200_000], dst[chunk : chunk + 200_000], w[chunk : chunk + 200_000]
            fh.write("".join(f"person-{a},person-{b},{c}\n" for a, b, c in zip(s.tolist(), d.tolist(), ww.tolist())))


def reference_ingest(csv_path: Path, db_path: Path) -> float:
    t0 = time.perf_counter()
    with open(csv_path, "rb") as fh:
        table = read_edges_csv(fh, Interner(), weight="weight")
    con = sqlite3.connect(db_path)
    con.execute("PRAGMA journal_mode=WAL")
    con.execute("CREATE TABLE edge (src INTEGER, dst INTEGER, weight REAL)")
    with con:
        con.executemany(
            "INSERT INTO edge VALUES (?, ?, ?)",
            zip(table.src.tolist(), table.dst.tolist(), table.weight.tolist()),
        )
    con.close()
    return time.perf_counter() - t0


def rss_kib(pid: int, field: str) -> int:
    with open(f"/proc/{pid}/status") as fh:
        for line in fh:
            if line.startswith(field + ":"):
                return int(line.split()[1])
    raise KeyError(field)


def server_pid(data_dir: Path) -> int:
    # The uvicorn process is the one holding the SQLite file open.
    target = str((data_dir / "bellwether.sqlite3").resolve())
    for pid in os.listdir("/proc"):
        if not pid.isdigit():
            continue
        try:
            for fd in os.listdir(f"/proc/{pid}/fd"):
                if os.readlink(f"/proc/{pid}/fd/{fd}") == target:
                    return int(pid)
        except OSError:
            continue
    raise RuntimeError("server process not found")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--edges", type=int, default=1_000_000)
    ap.add_argument("--nodes", type=int, default=100_000)
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    tmp = Path(tempfile.mkdtemp(prefix="bw-bench-"))
    csv_path = tmp / "edges.csv"
    make_csv(csv_path, args.edges, args.nodes)
    size_mb = csv_path.stat().st_size / 1e6
    print(f"graph: {args.edges:,} edges over {args.nodes:,} nodes; CSV {size_mb:.1f} MB")

    upload_t, ref_t, mem_ratios = [], [], []
    edge_bytes = args.edges * 16
    for i in range(args.repeats):
        data = tmp / f"data{i}"
        data.mkdir()
        with live_server(data, workers=0) as base:
            with httpx.Client(base_url=base, timeout=600) as c:
                gid = c.post("/v1/graphs", json={"name": "bench", "directed": True}).json()["id"]
                pid = server_pid(data)
                before = rss_kib(pid, "VmRSS")
                t0 = time.perf_counter()
                with open(csv_path, "rb") as fh:
                    r = c.post(f"/v1/graphs/{gid}/versions", content=fh, headers={"Content-Type": "text/csv"})
                upload_t.append(time.perf_counter() - t0)
                assert r.status_code == 201, r.text
                peak = rss_kib(pid, "VmHWM")
                mem_ratios.append((peak - before) * 1024 / edge_bytes)
        ref_t.append(reference_ingest(csv_path, tmp / f"ref{i}.sqlite3"))

    up, ref = statistics.median(upload_t), statistics.median(ref_t)
    print(f"upload over HTTP          median {up:.2f} s  (runs: {', '.join(f'{x:.2f}' for x in upload_t)})")
    print(f"reference (reader+insert) median {ref:.2f} s  (runs: {', '.join(f'{x:.2f}' for x in ref_t)})")
    print(f"RATIO upload/reference = {up / ref:.2f}  (goal <= 2.0)")
    print(
        f"RATIO peak server memory growth / edge arrays ({edge_bytes / 1e6:.0f} MB) = "
        f"{statistics.median(mem_ratios):.2f}  (goal <= 3.0; runs: {', '.join(f'{x:.2f}' for x in mem_ratios)})"
    )

    # 3. Load a stored version into igraph vs igraph from in-memory arrays.
    from service.loader import clear_cache, load_version
    from storage.db import make_engine, make_sessionmaker
    from storage.repo import graphs as graph_repo

    engine = make_engine(f"sqlite:///{tmp / 'data0' / 'bellwether.sqlite3'}")
    maker = make_sessionmaker(engine)
    load_t, build_t = [], []
    with maker() as db:
        from sqlalchemy import select

        from storage.models import Graph

        g = db.execute(select(Graph)).scalars().first()
        version = graph_repo.get_version(db, g)
        for _ in range(args.repeats):
            clear_cache()
            t0 = time.perf_counter()
            lv = load_version(db, version)
            ig = to_igraph(lv.graph)
            load_t.append(time.perf_counter() - t0)
            src, dst, w = lv.graph.src.copy(), lv.graph.dst.copy(), lv.graph.weight.copy()
            t0 = time.perf_counter()
            import igraph

            ig2 = igraph.Graph(n=lv.graph.n, edges=np.column_stack((src, dst)), directed=True)
            ig2.es["weight"] = w.tolist()
            build_t.append(time.perf_counter() - t0)
            assert ig.ecount() == ig2.ecount()
    engine.dispose()
    lo, bu = statistics.median(load_t), statistics.median(build_t)
    print(f"load stored version -> igraph median {lo:.2f} s; igraph from numpy median {bu:.2f} s")
    print(f"RATIO load/build = {lo / bu:.2f}  (goal <= 1.5)")


if __name__ == "__main__":
    main()

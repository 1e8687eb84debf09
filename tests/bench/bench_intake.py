"""Benchmark: graph intake and loading, measured side by side in one run.

Run:  python -m tests.bench.bench_intake [--edges 1000000] [--repeats 3]

1. Upload of an m-edge CSV over HTTP into the embedded default (a real
   ``bellwether serve`` process on loopback), against a reference path in the
   same run: the fastest CSV reader we use (``service.intake.read_edges_csv``)
   plus one ``executemany`` of the same rows into a fresh SQLite file in one
   transaction. Goal: ratio <= 2.0.
2. Peak server memory during the upload (VmHWM of the server process minus its
   resident size before), against the size of the graph's edge arrays
   (src + dst int32, weight float64: 16 bytes an edge). Goal: <= 3.0. A small
   upload goes first, so the modules and compiled loops a first upload loads
   are not counted as graph memory, and the peak is reset
   (``/proc/PID/clear_refs``) just before the measured upload. A breakdown by
   stage of the upload path follows, measured the same way in a fresh
   process (``--stages``).
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
import subprocess
import sys
import tempfile
import threading
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

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


def reset_peak(pid: int) -> bool:
    """Reset VmHWM to the current resident size (Linux 4.0+); False when not allowed."""
    try:
        with open(f"/proc/{pid}/clear_refs", "w") as fh:
            fh.write("5")
        return True
    except OSError:
        return False


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
    ap.add_argument("--stages", type=Path, help="only print the per-stage memory breakdown of uploading this CSV")
    args = ap.parse_args()
    if args.stages is not None:
        stage_breakdown(args.stages)
        return
    tmp = Path(tempfile.mkdtemp(prefix="bw-bench-"))
    csv_path = tmp / "edges.csv"
    make_csv(csv_path, args.edges, args.nodes)
    size_mb = csv_path.stat().st_size / 1e6
    print(f"graph: {args.edges:,} edges over {args.nodes:,} nodes; CSV {size_mb:.1f} MB")

    warm = tmp / "warm.csv"
    make_csv(warm, 2_000, 500, seed=2)
    upload_t, ref_t, mem_ratios, growth = [], [], [], []
    edge_bytes = args.edges * 16
    for i in range(args.repeats):
        data = tmp / f"data{i}"
        data.mkdir()
        with live_server(data, workers=0) as base:
            with httpx.Client(base_url=base, timeout=600) as c:
                warm_id = c.post("/v1/graphs", json={"name": "warm-up", "directed": True}).json()["id"]
                with open(warm, "rb") as fh:
                    r = c.post(f"/v1/graphs/{warm_id}/versions", content=fh, headers={"Content-Type": "text/csv"})
                assert r.status_code == 201, r.text
                gid = c.post("/v1/graphs", json={"name": "bench", "directed": True}).json()["id"]
                pid = server_pid(data)
                reset = reset_peak(pid)
                before = rss_kib(pid, "VmRSS") if reset else max(rss_kib(pid, "VmRSS"), rss_kib(pid, "VmHWM"))
                t0 = time.perf_counter()
                with open(csv_path, "rb") as fh:
                    r = c.post(f"/v1/graphs/{gid}/versions", content=fh, headers={"Content-Type": "text/csv"})
                upload_t.append(time.perf_counter() - t0)
                assert r.status_code == 201, r.text
                peak = rss_kib(pid, "VmHWM")
                growth.append((peak - before) / 1024)
                mem_ratios.append((peak - before) * 1024 / edge_bytes)
                if i == 0:
                    print(
                        f"server RSS before the upload {before / 1024:.1f} MiB (after a 2,000-edge warm-up; "
                        f"peak {'reset' if reset else 'not resettable, taken as is'}), "
                        f"peak during it {peak / 1024:.1f} MiB"
                    )
        ref_t.append(reference_ingest(csv_path, tmp / f"ref{i}.sqlite3"))

    up, ref = statistics.median(upload_t), statistics.median(ref_t)
    print(f"upload over HTTP          median {up:.2f} s  (runs: {', '.join(f'{x:.2f}' for x in upload_t)})")
    print(f"reference (reader+insert) median {ref:.2f} s  (runs: {', '.join(f'{x:.2f}' for x in ref_t)})")
    print(f"RATIO upload/reference = {up / ref:.2f}  (goal <= 2.0)")
    print(
        f"RATIO peak server memory growth / edge arrays ({edge_bytes / 1e6:.0f} MB) = "
        f"{statistics.median(mem_ratios):.2f}  (goal <= 3.0; runs: {', '.join(f'{x:.2f}' for x in mem_ratios)}; "
        f"growth {', '.join(f'{x:.1f}' for x in growth)} MiB)"
    )
    subprocess.run([sys.executable, "-m", "tests.bench.bench_intake", "--stages", str(csv_path)], check=True)

    # 3. Load a stored version into igraph vs igraph from in-memory arrays.
    from service.usecases.loading import clear_cache, load_version
    from storage.db import make_engine, make_sessionmaker
    from storage.repo import graphs as graph_repo

    engine = make_engine(f"sqlite:///{tmp / 'data0' / 'bellwether.sqlite3'}")
    maker = make_sessionmaker(engine)
    load_t, build_t = [], []
    with maker() as db:
        from sqlalchemy import select

        from storage.models import Graph

        g = db.execute(select(Graph).where(Graph.name == "bench")).scalars().one()
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


def stage_breakdown(csv_path: Path) -> None:
    """Resident memory per stage of the upload path, in this (fresh) process.

    The server's path without HTTP: ``build_version`` (reader, duplicate merge,
    summary, version arrays) and the version's write into a migrated SQLite
    file, in a worker thread as the server runs it, after a small warm-up
    upload. Each stage resets VmHWM on entry, so its peak is its own.
    """
    from service.usecases import uploads as ingest
    from storage.db import make_engine, make_sessionmaker
    from storage.migrate import upgrade
    from storage.repo import graphs as graph_repo

    def status(field: str) -> float:
        return rss_kib(os.getpid(), field) / 1024

    log: list[tuple[str, float, float, float, float]] = []
    between: list[float] = []
    active = [False]

    def wrap(mod: Any, name: str) -> None:
        f: Callable[..., Any] = getattr(mod, name)

        def staged(*a: Any, **k: Any) -> Any:
            if not active[0]:
                return f(*a, **k)
            start = status("VmRSS")
            between.append(status("VmHWM"))  # the peak since the previous stage ended
            reset_peak(os.getpid())
            t0 = time.perf_counter()
            out = f(*a, **k)
            log.append((name, start, status("VmHWM"), status("VmRSS"), time.perf_counter() - t0))
            return out

        setattr(mod, name, staged)

    wrap(ingest.intake, "read_edges_csv")
    wrap(ingest.merge, "merge_duplicates")
    wrap(ingest, "graph_summary")
    wrap(ingest, "version_arrays")
    wrap(graph_repo, "write_arrays")

    tmp = Path(tempfile.mkdtemp(prefix="bw-stages-"))
    url = f"sqlite:///{tmp / 'stages.sqlite3'}"
    upgrade(url)
    engine = make_engine(url)
    maker = make_sessionmaker(engine)
    options = ingest.UploadOptions(fmt="csv", part="edges", mode="replace")

    def upload(path: Path) -> None:
        with maker() as db:
            g = graph_repo.add_graph(db, tenant_id="bench", name=path.stem, directed=True)
            made = ingest.build_version(path, options, directed=True, allow_self_loops=False, previous=None)
            graph_repo.add_version(
                db, g, based_on=0, arrays=made.arrays, manifest_extra=made.manifest, summary=made.summary,
                origin=made.origin, nodes=made.nodes, edges=made.edges,
            )
            del made
            db.commit()

    def in_thread(path: Path) -> None:
        t = threading.Thread(target=upload, args=(path,))
        t.start()
        t.join()

    warm = tmp / "warm.csv"
    make_csv(warm, 2_000, 500, seed=2)
    in_thread(warm)
    base = status("VmRSS")
    reset_peak(os.getpid())
    active[0] = True
    in_thread(csv_path)
    overall = max([status("VmHWM"), *between, *(peak for _, _, peak, _, _ in log)])
    engine.dispose()
    print(f"stages (in a fresh process; MiB over the {base:.1f} MiB resident before the upload):")
    for name, start, peak, end, dt in log:
        print(f"  {name:17s} start {start - base:6.1f}  peak {peak - base:6.1f}  end {end - base:6.1f}  {dt:5.2f} s")
    print(f"  whole upload      peak {overall - base:6.1f}")


if __name__ == "__main__":
    main()

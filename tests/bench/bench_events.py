"""Benchmark: an event table through the API (upload, ``project_events`` job) against SciPy's B^T D B.

Run:  python -m tests.bench.bench_events [--rows 10000000] [--repeats 1]

The table is the one of ``tests/bench/bench_projection.py`` (heavy-tailed event
sizes, P(size >= s) ~ s^-1.5 up to 10,000; people drawn uniformly; about 1%
repeated rows), written once as a CSV file. Each measurement runs in a fresh
process, so its peak memory (high-water resident size less what the process
held before) is its own.

1. API: the service app on a SQLite file, driven over its HTTP interface
   in-process (httpx's ASGI transport): ``POST /v1/graphs``, then
   ``POST /v1/graphs/{id}/versions?part=events&projection=newman&backbone=disparity_filter``
   with the CSV streamed from disk. The table is above the job threshold, so
   the upload stores the events and queues ``project_events``; a worker in
   the same process runs it (read the events back, Newman projection with the
   default cap of 100, disparity filter at alpha 0.05, store the ties as the
   next version). Timed: the upload, the job, and both.
2. SciPy: from the same rows as numpy arrays: the incidence matrix of the
   kept events (duplicates merged), D = diag(1 / (n_e - 1)), ``B.T @ (D @ B)``,
   upper triangle (bench_projection's SciPy side). No file reading, no
   backbone, nothing stored.

Ratios are printed for the whole API path and for the job alone (both against
SciPy's build + product); peak memory of each side against the bytes of the
resulting edge arrays (src, dst, weight).
"""

from __future__ import annotations

import argparse
import asyncio
import json
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from tests.bench.bench_projection import _peak, _rss_now, make_table
from tests.bench.bench_projection import child as scipy_child


def _write_csv(folder: Path, person: np.ndarray, event: np.ndarray) -> Path:
    path = folder / "events.csv"
    with open(path, "w") as fh:
        fh.write("person,event\n")
        step = 1_000_000
        for i in range(0, person.size, step):
            p, e = person[i:i + step], event[i:i + step]
            fh.write("".join(f"p{a},e{b}\n" for a, b in zip(p.tolist(), e.tolist())))
    return path


def api_child(folder: Path) -> dict[str, float]:
    import httpx

    from service.app import create_app
    from service.jobs.worker import Worker, WorkerConfig
    from service.settings import Settings
    from storage.migrate import upgrade

    url = f"sqlite:///{folder / 'bench.sqlite3'}"
    upgrade(url)
    settings = Settings(data_dir=folder / "data", database_url=url, auth_disabled=True)  # type: ignore[call-arg]
    app = create_app(settings)
    # Warm up the compiled kernels (loaded from the on-disk cache) on a tiny table.
    from service.analytics import disparity_filter, project_events

    disparity_filter(project_events([0, 1, 0, 1, 0, 1, 0, 2, 1, 3, 2, 3], [0, 0, 1, 1, 2, 2, 3, 3, 4, 4, 5, 5],
                                    method="newman"), alpha=0.5)
    path = folder / "events.csv"

    async def body():  # type: ignore[no-untyped-def]
        with open(path, "rb") as fh:
            while chunk := fh.read(1 << 20):
                yield chunk

    async def drive() -> dict[str, float]:
        async with app.router.lifespan_context(app):
            transport = httpx.ASGITransport(app=app)
            async with httpx.AsyncClient(transport=transport, base_url="http://bench", timeout=3600) as c:
                gid = (await c.post("/v1/graphs", json={"name": "bench", "directed": False})).json()["id"]
                base, base_peak = _rss_now(), _peak()
                t0 = time.perf_counter()
                r = await c.post(f"/v1/graphs/{gid}/versions", content=body(), headers={"Content-Type": "text/csv"},
                                 params={"part": "events", "projection": "newman", "backbone": "disparity_filter",
                                         "single_events": "skip"})
                assert r.status_code == 201, r.text
                t1 = t2 = time.perf_counter()
                res = r.json()["summary"]
                if "job_id" in res["projection"]:  # above the job threshold (a small --rows projects at once)
                    worker = Worker(app.state.sessionmaker, WorkerConfig.from_settings(settings))
                    outcome = await asyncio.to_thread(worker.run_once)
                    t2 = time.perf_counter()
                    assert outcome is not None and outcome.status == "succeeded", outcome
                    res = (await c.get(f"/v1/jobs/{res['projection']['job_id']}/result")).json()
                peak = max(_peak(), base_peak) - base
        edges = int(res["edges"])
        pairs = int(res["backbone"]["ties_tested"])
        return {"upload_s": t1 - t0, "job_s": t2 - t1, "total_s": t2 - t0, "pairs": pairs, "kept": edges,
                "edge_share": res["backbone"]["edge_share_kept"], "weight_share": res["backbone"]["weight_share_kept"],
                "without": res["backbone"]["people_left_without_ties_share"],
                "dropped": res["projection"]["events_dropped"], "peak_extra_bytes": peak,
                "out_bytes": pairs * 16, "kept_bytes": edges * 16}

    return asyncio.run(drive())


def run_child(side: str, folder: Path) -> dict[str, float]:
    res = subprocess.run([sys.executable, "-m", "tests.bench.bench_events", "--child", side, "--dir", str(folder)],
                         capture_output=True, text=True, check=True)
    return json.loads(res.stdout.strip().splitlines()[-1])  # type: ignore[no-any-return]


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--rows", type=int, default=10_000_000)
    ap.add_argument("--repeats", type=int, default=1)
    ap.add_argument("--seed", type=int, default=17)
    ap.add_argument("--child", choices=["api", "scipy"])
    ap.add_argument("--dir")
    args = ap.parse_args()
    if args.child == "api":
        print(json.dumps(api_child(Path(args.dir))))
        return 0
    if args.child == "scipy":
        print(json.dumps(scipy_child("scipy", Path(args.dir))))
        return 0
    folder = Path(tempfile.mkdtemp(prefix="bw-bench-events-"))
    people = max(args.rows // 5, 10)
    person, event = make_table(args.rows, people, args.seed)
    np.save(folder / "person.npy", person)
    np.save(folder / "event.npy", event)
    csv = _write_csv(folder, person, event)
    sizes = np.bincount(event)
    print(f"table: {args.rows:,} rows ({csv.stat().st_size / 2**20:,.0f} MiB of CSV), {people:,} people, "
          f"{sizes.size:,} events, largest {sizes.max():,}, events above 100: {(sizes > 100).sum():,}")
    del person, event
    runs: dict[str, list[dict[str, float]]] = {"api": [], "scipy": []}
    for i in range(args.repeats):
        for side in ("api", "scipy"):
            if side == "api" and i:
                for f in folder.glob("bench.sqlite3*"):
                    f.unlink()
            runs[side].append(run_child(side, folder))

    def med(side: str, key: str) -> float:
        return statistics.median(r[key] for r in runs[side])

    a, s = runs["api"][0], runs["scipy"][0]
    print(f"pairs: {int(a['pairs']):,} (SciPy {int(s['pairs']):,}); events dropped by the cap: {int(a['dropped']):,}")
    print(f"backbone: {int(a['kept']):,} ties kept, {a['edge_share']:.1%} of ties, {a['weight_share']:.1%} of weight, "
          f"{a['without']:.1%} of people left without ties")
    print(f"API    median of {args.repeats}: upload {med('api', 'upload_s'):.2f} s + job {med('api', 'job_s'):.2f} s "
          f"= {med('api', 'total_s'):.2f} s")
    print(f"SciPy  median of {args.repeats}: build B {med('scipy', 'build_s'):.2f} s + B^T D B and triu "
          f"{med('scipy', 'product_s'):.2f} s = {med('scipy', 'total_s'):.2f} s")
    print(f"ratio API (upload + job) / SciPy: {med('api', 'total_s') / med('scipy', 'total_s'):.2f} (goal <= 1.5)")
    print(f"ratio job alone / SciPy: {med('api', 'job_s') / med('scipy', 'total_s'):.2f}")
    for side in ("api", "scipy"):
        peak, ob = med(side, "peak_extra_bytes"), runs[side][0]["out_bytes"]
        print(f"{side:6s} peak extra memory {peak / 2**20:,.0f} MiB = {peak / ob:.2f} x the projection's edge "
              f"arrays ({ob / 2**20:,.0f} MiB)")
    for f in sorted(folder.rglob("*"), reverse=True):
        f.unlink() if f.is_file() else f.rmdir()
    folder.rmdir()
    return 0


if __name__ == "__main__":
    sys.exit(main())

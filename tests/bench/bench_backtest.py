"""Benchmark: a backtest of 10 past campaigns end to end through the queue, against the engine alone.

Run:  python -m tests.bench.bench_backtest [--members 5000] [--campaigns 10] [--simulations 500]

Starts ``bellwether serve --workers 1`` on loopback with the demo's invented
cooperative, uploads ``--campaigns`` past campaigns generated from the demo's
hidden model (:mod:`service.cli.demo_campaigns`), and in one run measures:

1. uploading the campaign logs over HTTP (create + PUT log, each);
2. a ``backtest`` job holding out each campaign in turn, from POST to
   ``succeeded`` (queue, worker process, learning, forecasts, storing);
3. the same backtest by the engine alone
   (:func:`service.analytics.learning.backtest`) in this process, on the
   same version and the same campaigns read back from the database;

and prints the ratio of 2 to 3: what the queue, the worker process and the
use case add around the computation.
"""

from __future__ import annotations

import argparse
import tempfile
import time
from datetime import UTC, datetime, timedelta
from pathlib import Path

import httpx
import numpy as np

from service.analytics.learning import backtest
from service.cli.demo_campaigns import HIDDEN_INTERCEPT, HIDDEN_SLOPE, simulate_campaign
from service.cli.scenario import generate, write_csv
from tests.live import live_server


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--members", type=int, default=5000)
    ap.add_argument("--campaigns", type=int, default=10)
    ap.add_argument("--simulations", type=int, default=500)
    args = ap.parse_args()
    tmp = Path(tempfile.mkdtemp(prefix="bw-bench-backtest-"))
    sc = generate(args.members, seed=3)
    edges, _ = write_csv(sc, tmp / "upload")
    data = tmp / "data"
    data.mkdir()
    rng = np.random.default_rng(21)
    hidden = 1.0 / (1.0 + np.exp(-(HIDDEN_INTERCEPT + HIDDEN_SLOPE * np.log1p(sc.weight))))
    params = {"holdout": "each", "simulations": args.simulations, "round_hours": 24}
    with live_server(data, workers=1, env={"BELLWETHER_RATE_LIMIT_PER_SECOND": "0"}) as base:
        with httpx.Client(base_url=base, timeout=600) as c:
            gid = c.post("/v1/graphs", json={"name": "bench", "directed": False}).json()["id"]
            with open(edges, "rb") as fh:
                assert c.post(f"/v1/graphs/{gid}/versions", content=fh,
                              headers={"Content-Type": "text/csv"}).status_code == 201
            t0 = time.perf_counter()
            people = 0
            for i in range(args.campaigns):
                start = datetime(2025, 1, 6, 9, tzinfo=UTC) + timedelta(days=14 * i)
                cid = c.post(f"/v1/graphs/{gid}/campaigns",
                              json={"name": f"c{i}", "started_at": start.isoformat()}).json()["id"]
                day = simulate_campaign(sc.members, sc.src, sc.dst, hidden,
                                        rng.choice(sc.members, 20, replace=False).astype(np.int64), rng)
                people += len(day)
                log = "person,role,round\n" + "".join(
                    f"{sc.ids[v]},{'seed' if t == 0 else 'adopter'},{t}\n" for v, t in day.items())
                r = c.put(f"/v1/graphs/{gid}/campaigns/{cid}/log", content=log,
                          headers={"Content-Type": "text/csv"})
                assert r.status_code == 200, r.text
            upload = time.perf_counter() - t0
            t0 = time.perf_counter()
            job = c.post(f"/v1/graphs/{gid}/jobs", json={"kind": "backtest", "params": params}).json()
            status = c.get(f"/v1/jobs/{job['id']}", params={"wait": 600}).json()
            while status["status"] in ("queued", "running"):
                status = c.get(f"/v1/jobs/{job['id']}", params={"wait": 600}).json()
            queued = time.perf_counter() - t0
            assert status["status"] == "succeeded", status
            verdict = c.get(f"/v1/jobs/{job['id']}/result").json()["verdict"]
    # The engine alone, on the same stored version and campaigns.
    from sqlalchemy.orm import Session

    from service.usecases.campaigns import campaigns_on_version
    from service.usecases.learning import feature_matrix, segment_codes
    from service.usecases.loading import load_version
    from storage.db import make_engine
    from storage.repo import campaigns as campaign_repo
    from storage.repo import graphs as graph_repo

    engine = make_engine(f"sqlite:///{data / 'bellwether.sqlite3'}")
    with Session(engine) as db:
        tenant = campaign_repo.get_graph_tenant(db, gid)
        v = load_version(db, graph_repo.get_version(db, graph_repo.get_graph(db, tenant, gid)))
        episodes, _ = campaigns_on_version(db, tenant, gid, v, None, round_hours=24)
    seg, labels = segment_codes(v)
    x, names = feature_matrix(v)
    t0 = time.perf_counter()
    for i in range(len(episodes)):  # each in turn, as the job does
        order = [j for j in range(len(episodes)) if j != i] + [i]
        backtest(v.graph, [episodes[j] for j in order], holdout="latest", latest=1,
                 segments=seg if len(labels) > 2 else None,
                 features=x if x.shape[1] else None, feature_names=names, simulations=args.simulations)
    direct = time.perf_counter() - t0
    print(f"{args.members:,} members, {v.graph.m:,} ties; {args.campaigns} campaigns, {people:,} people in the logs")
    print(f"upload of the campaign logs over HTTP: {upload:.2f} s")
    print(f"backtest through the queue (POST to succeeded): {queued:.2f} s")
    print(f"the same backtest by the engine alone, in process: {direct:.2f} s")
    print(f"RATIO queue/engine: {queued / direct:.2f}")
    print(f"verdict: {verdict}")


if __name__ == "__main__":
    main()

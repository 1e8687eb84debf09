"""The ``scores`` job kind: params, personalisation, stored layout, progress, and a worker round trip."""

from __future__ import annotations

from typing import Any

import networkx as nx
import numpy as np
import pytest
from pydantic import ValidationError
from sqlalchemy.orm import Session, sessionmaker

from service.analytics.structure.centrality import default_measures
from service.analytics.errors import Cancelled, InvalidParameter, UnknownNode
from service.analytics.graph import GraphArrays, NodeAttributes
from service.jobs import registry
from service.jobs.clock import FakeClock
from service.jobs.kinds import TaskContext
from service.jobs.tasks import scores as task
from service.jobs.worker import Worker, WorkerConfig
from service.usecases.loading import LoadedVersion, version_arrays
from storage.repo import graphs as graph_repo
from storage.repo import jobs as jr
from storage.repo import results as rr

TOL = 1e-6


def directed_graph() -> tuple[nx.DiGraph, LoadedVersion]:
    G = nx.gnp_random_graph(40, 0.08, seed=7, directed=True)
    rng = np.random.default_rng(7)
    for _, _, d in G.edges(data=True):
        d["weight"] = float(rng.integers(1, 5))
    edges = list(G.edges(data=True))
    g = GraphArrays(40, True, np.array([u for u, _, _ in edges], np.int32), np.array([v for _, v, _ in edges], np.int32),
                    np.array([d["weight"] for _, _, d in edges]))
    attrs = NodeAttributes.empty(40)
    attrs.value[:] = np.linspace(0.0, 3.0, 40)
    attrs.value[3] = np.nan  # missing counts 0
    ids = [f"p{(i * 7) % 40:02d}" for i in range(40)]  # id order differs from index order
    return G, LoadedVersion("v_test", 1, g, ids, attrs)


def context(v: LoadedVersion, seen: list[tuple[float, str | None]] | None = None, **kw: Any) -> TaskContext:
    def progress(fraction: float, message: str | None = None) -> None:
        if seen is not None:
            seen.append((fraction, message))

    return TaskContext(job_id="j", tenant_id="t", graph_id="g", version=1, random_seed=0,
                       progress=kw.get("progress", progress), _load=lambda: v)


def run(v: LoadedVersion, seen: list[tuple[float, str | None]] | None = None, **params: Any):  # type: ignore[no-untyped-def]
    return task.run(context(v, seen), task.ScoresParams.model_validate(params))


def test_directed_measures_layout_and_progress() -> None:
    G, v = directed_graph()
    seen: list[tuple[float, str | None]] = []
    out = run(v, seen, measures=["in_degree", "out_degree", "pagerank", "hub", "authority", "constraint"])
    a = out.arrays
    def vec(d):
        return np.array([d[i] for i in range(40)], dtype=float)

    # Source: NetworkX on the same directed graph, computed here.
    assert a["score.in_degree"] == pytest.approx(vec(dict(G.in_degree())))
    assert a["score.out_degree"] == pytest.approx(vec(dict(G.out_degree())))
    assert a["score.pagerank"] == pytest.approx(vec(nx.pagerank(G, weight="weight", tol=1e-12)), abs=TOL)
    hub, auth = nx.hits(G, max_iter=100000, tol=1e-14)
    assert a["score.hub"] == pytest.approx(vec(hub), abs=TOL)
    assert a["score.authority"] == pytest.approx(vec(auth), abs=TOL)
    assert list(out.data["measures"]) == ["in_degree", "out_degree", "pagerank", "hub", "authority", "constraint"]
    assert out.data["measures"]["constraint"]["ranking"] == "lowest first"
    assert "communities" not in out.data
    for m in out.data["measures"]:
        s, o, p = a[f"score.{m}"], a[f"order.{m}"], a[f"pct.{m}"]
        assert (s.dtype, o.dtype, p.dtype) == (np.float64, np.int32, np.float64)
        assert sorted(o.tolist()) == list(range(40))  # a permutation
        sign = 1.0 if m == "constraint" else -1.0
        key = [(np.isnan(s[i]), sign * s[i], v.ids[i]) for i in o]
        assert key == sorted(key), m  # best first, ties by the caller's id, NaN last
    assert [v.ids[i] for i in a["id_order"]] == sorted(v.ids)
    fractions = [f for f, _ in seen]
    assert fractions == sorted(fractions) and fractions[-1] == 1.0
    messages = {msg for _, msg in seen}
    assert {"computed pagerank", "computed constraint", "ranking"} <= messages  # one step per measure


def test_personalised_pagerank_by_nodes_and_attribute() -> None:
    G, v = directed_graph()
    def vec(d):
        return np.array([d[i] for i in range(40)], dtype=float)

    chosen = [v.ids[5], v.ids[9]]
    out = run(v, measures=["pagerank"], personalization={"nodes": chosen}, damping=0.7)
    pers = {i: 1.0 if i in (5, 9) else 0.0 for i in range(40)}
    # Source: nx.pagerank(personalization=...), computed here.
    want = vec(nx.pagerank(G, alpha=0.7, personalization=pers, weight="weight", tol=1e-13))
    assert out.arrays["score.pagerank"] == pytest.approx(want, abs=TOL)
    assert out.data["measures"]["pagerank"]["personalization"] == {"nodes": 2}
    out = run(v, measures=["pagerank"], personalization={"attribute": "value"})
    values = np.nan_to_num(v.attrs.value, nan=0.0)
    want = vec(nx.pagerank(G, personalization=dict(enumerate(values)), weight="weight", tol=1e-13))
    assert out.arrays["score.pagerank"] == pytest.approx(want, abs=TOL)
    with pytest.raises(UnknownNode) as err:
        run(v, measures=["pagerank"], personalization={"nodes": [v.ids[1], "ghost", "ghoul"]})
    assert err.value.data["node_id"] == "ghost" and err.value.data["unknown"] == ["ghost", "ghoul"]
    with pytest.raises(InvalidParameter):  # cost is missing for everyone
        run(v, measures=["pagerank"], personalization={"attribute": "cost"})
    v.attrs.cost[:] = 1.0
    v.attrs.cost[4] = -2.0
    with pytest.raises(InvalidParameter) as bad:
        run(v, measures=["pagerank"], personalization={"attribute": "cost"})
    assert bad.value.data["node_id"] == v.ids[4]


def test_params_defaults_sampling_and_cancel() -> None:
    with pytest.raises(ValidationError, match="expected one of degree"):
        task.ScoresParams.model_validate({"measures": ["degree", "fame"]})
    with pytest.raises(ValidationError, match="exactly one"):
        task.ScoresParams.model_validate({"personalization": {}})
    assert task.ScoresParams.model_validate({"measures": ["degree", "degree"]}).measures == ["degree"]
    assert registry.get_kind("scores") is task.KIND
    _, v = directed_graph()
    out = run(v)
    assert list(out.data["measures"]) == default_measures(v.graph)
    assert out.data["communities"]["count"] == int(np.count_nonzero(out.arrays["community.size"]))
    assert out.arrays["community.membership"].dtype == np.int32 and "score.community" not in out.arrays
    # Sampled betweenness states its bound and is reproducible from the seed.
    a = run(v, measures=["betweenness"], betweenness="sampled", betweenness_epsilon=0.05, random_seed=3)
    b = run(v, measures=["betweenness"], betweenness="sampled", betweenness_epsilon=0.05, random_seed=3)
    meta = a.data["measures"]["betweenness"]
    assert meta["method"] == "sampled" and meta["epsilon"] == 0.05 and meta["delta"] == 0.1 and meta["samples"] > 0
    assert np.array_equal(a.arrays["score.betweenness"], b.arrays["score.betweenness"])

    def cancel(fraction: float, message: str | None = None) -> None:
        raise Cancelled(job="j")

    with pytest.raises(Cancelled):
        task.run(context(v, progress=cancel), task.ScoresParams())


def test_worker_stores_and_reads_back_the_arrays(maker: sessionmaker[Session]) -> None:
    _, v = directed_graph()
    clock = FakeClock()
    with maker() as db:
        graph = graph_repo.add_graph(db, tenant_id="default", name="d", directed=True)
        arrays, extra = version_arrays(v.graph, v.ids, v.attrs)
        graph_repo.add_version(db, graph, based_on=0, arrays=arrays, manifest_extra=extra, summary={},
                               origin={"test": True}, nodes=40, edges=v.graph.m)
        db.commit()
    with jr.write_session(maker) as db:
        job, _ = jr.add_job(db, tenant_id="default", graph_id=graph.id, version=1, kind="scores",
                            params={"measures": ["degree", "community"]}, now=clock.now())
        db.commit()
    cfg = WorkerConfig(heartbeat_seconds=60, progress_interval_seconds=0.0)
    outcome = Worker(maker, cfg, clock=clock).run_once()
    assert outcome is not None and outcome.status == "succeeded", outcome
    with maker() as db:
        result = rr.get_result(db, job.id)
        stored = rr.get_result_arrays(db, result)
    direct = run(v, measures=["degree", "community"])
    assert set(stored) == set(direct.arrays)
    for name in stored:
        np.testing.assert_array_equal(stored[name], direct.arrays[name])
    assert result.data["params"]["measures"] == ["degree", "community"]
    assert result.data["communities"]["modularity"] == pytest.approx(direct.data["communities"]["modularity"])

"""The ``forecast`` kind in-process: params, shared diffusion settings, version checks,
the diffusion-graph cache and the result document (no HTTP, no database)."""

from __future__ import annotations

import threading
from typing import Any

import numpy as np
import pytest
from pydantic import ValidationError

import service.usecases.caches as caches
import service.usecases.diffusion_inputs as dc
from service.analytics.errors import InfeasibleRequest, InvalidParameter, UnknownNode
from service.analytics.graph import GraphArrays, NodeAttributes
from service.jobs.kinds import TaskContext
from service.jobs.registry import REGISTRY, parse_params
from service.jobs.tasks import forecast as forecast_task
from service.usecases import forecasts as F
from service.usecases.diffusion_settings import DiffusionSettings
from service.usecases.loading import LoadedVersion


def diamond(*, consent: list[int] | None = None, value: list[float] | None = None,
            segment: list[int] | None = None, labels: tuple[str, ...] = (), vid: str = "v_diamond") -> LoadedVersion:
    """s->a, s->b, a->t, b->t with ids s, a, b, t (indices 0..3)."""
    g = GraphArrays(4, True, np.array([0, 0, 1, 2], np.int32), np.array([1, 2, 3, 3], np.int32), np.ones(4))
    attrs = NodeAttributes.empty(4)
    if consent is not None:
        attrs = NodeAttributes(4, attrs.segment, (), attrs.region, (), np.array(consent, np.int8), attrs.cost,
                               attrs.value, has_consent_data=True)
    if value is not None or segment is not None:
        attrs = NodeAttributes(
            4, np.array(segment, np.int32) if segment is not None else attrs.segment, labels, attrs.region, (),
            attrs.consent, attrs.cost, np.array(value, float) if value is not None else attrs.value,
        )
    return LoadedVersion(vid, 1, g, ["s", "a", "b", "t"], attrs)


def ctx_for(v: LoadedVersion) -> TaskContext:
    return TaskContext(job_id="j_test", tenant_id="t", graph_id="g", version=1, random_seed=0,
                       progress=lambda f, m=None: None, _load=lambda: v)


@pytest.fixture(autouse=True)
def fresh_cache() -> None:
    dc.clear_cache()


def test_registered_and_params_rules() -> None:
    kind = REGISTRY["forecast"]
    p = parse_params(kind, {"seeds": ["s"]})
    assert (p.model, p.probability.scheme, p.simulations, p.confidence, p.top_nodes) == (
        "ic", "weighted_cascade", 10_000, 0.95, 20)
    assert p.named_sets() == {"seeds": ["s"]}
    bad = [
        {"seeds": ["s"], "seed_sets": {"x": ["s"]}},
        {},
        {"seed_sets": {}},
        {"seed_sets": {"": ["s"]}},
        {"seed_sets": {"x": []}},
        {"seeds": ["s"], "probability": {"scheme": "uniform"}},
        {"seeds": ["s"], "probability": {"scheme": "weighted_cascade", "p": 0.1}},
        {"seeds": ["s"], "probability": {"scheme": "per_interaction"}},
        {"seeds": ["s"], "probability": {"scheme": "uniform", "p": -0.1}},
        {"seeds": ["s"], "precision": 0},
        {"seeds": ["s"], "relative_precision": 1.5},
        {"seeds": ["s"], "weights": "cost"},
        {"seeds": ["s"], "colour": "red"},
    ]
    for raw in bad:
        with pytest.raises(Exception) as info:
            parse_params(kind, raw)
        assert info.value.data["field"] == "params", raw  # type: ignore[attr-defined]


def test_diffusion_settings_are_one_reusable_model() -> None:
    s = DiffusionSettings.model_validate({"model": "lt", "probability": {"scheme": "normalized"}, "rounds": 3})
    assert s.describe() == {"model": "lt", "probability": {"scheme": "normalized", "p": None, "q": None},
                            "rounds": 3, "random_seed": 0}
    assert issubclass(F.ForecastParams, DiffusionSettings)
    with pytest.raises(ValidationError):
        DiffusionSettings.model_validate({"probability": {"scheme": "uniform", "p": 0.1, "q": 0.2}})
    v = diamond()
    # t has in-degree 2: uniform p = 0.6 sums to 1.2 there (index 3).
    lt = DiffusionSettings.model_validate({"model": "lt", "probability": {"scheme": "uniform", "p": 0.6}})
    with pytest.raises(InvalidParameter) as info:
        lt.check_version(v)
    assert info.value.data["node_index"] == 3
    with pytest.raises(InvalidParameter):
        lt.diffusion_graph(v)  # building checks the same
    DiffusionSettings.model_validate({"model": "lt", "probability": {"scheme": "uniform", "p": 0.5}}).check_version(v)
    with pytest.raises(InvalidParameter) as info:
        DiffusionSettings.model_validate({"probability": {"scheme": "explicit"}}).check_version(v)
    assert info.value.data["field"] == "probability.scheme"


def test_cache_builds_once_per_key_and_not_failures(monkeypatch: pytest.MonkeyPatch) -> None:
    v = diamond()
    calls: list[tuple[Any, ...]] = []
    real = dc.diffusion_graph

    def counting(*a: Any, **k: Any) -> Any:
        calls.append(tuple(sorted(k.items())))
        return real(*a, **k)

    monkeypatch.setattr(dc, "diffusion_graph", counting)
    a = dc.diffusion_graph_for("v1", v.graph, model="ic", scheme="weighted_cascade", p=None, q=None, random_seed=1)
    b = dc.diffusion_graph_for("v1", v.graph, model="ic", scheme="weighted_cascade", p=None, q=None, random_seed=2)
    assert a is b and len(calls) == 1  # the seed matters to trivalency only
    c = dc.diffusion_graph_for("v1", v.graph, model="ic", scheme="trivalency", random_seed=1)
    d = dc.diffusion_graph_for("v1", v.graph, model="ic", scheme="trivalency", random_seed=2)
    assert c is not d and len(calls) == 3
    assert dc.diffusion_graph_for("v2", v.graph, model="ic", scheme="weighted_cascade") is not a
    for _ in range(2):
        with pytest.raises(InvalidParameter):
            dc.diffusion_graph_for("v1", v.graph, model="lt", scheme="uniform", p=0.9)
    assert len(calls) == 6  # the failed build was tried again, not cached
    info = dc.cache_info()
    assert info.entries == 4 and info.nbytes > 0
    # Concurrent callers of one new key wait for a single build.
    start = threading.Barrier(4)
    got: list[Any] = []

    def ask() -> None:
        start.wait()
        got.append(dc.diffusion_graph_for("v3", v.graph, model="ic", scheme="uniform", p=0.5))

    threads = [threading.Thread(target=ask) for _ in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert len(calls) == 7 and all(x is got[0] for x in got)


def test_cache_evicts_least_recently_used() -> None:
    v = diamond()
    one = dc.diffusion_graph_for("v1", v.graph, model="ic", scheme="weighted_cascade")
    size = dc.cache_info().nbytes
    bound = caches.store.max_bytes
    try:
        caches.clear_all()
        caches.set_max_bytes(size + size // 2)  # room for one diamond's arrays, not two
        dc.diffusion_graph_for("v1", v.graph, model="ic", scheme="weighted_cascade")
        dc.diffusion_graph_for("v2", v.graph, model="ic", scheme="weighted_cascade")
        assert dc.cache_info().entries == 1
        builds = dc.cache_info().builds
        assert dc.diffusion_graph_for("v2", v.graph, model="ic", scheme="weighted_cascade") is not one
        assert dc.cache_info().builds == builds  # the newer one stayed
        dc.diffusion_graph_for("v1", v.graph, model="ic", scheme="weighted_cascade")
        assert dc.cache_info().builds == builds + 1  # the older one went
        caches.set_max_bytes(size - 1)  # every entry is over the bound: handed out, not kept
        assert dc.cache_info().entries == 0
        dc.diffusion_graph_for("v1", v.graph, model="ic", scheme="weighted_cascade")
        assert dc.cache_info().entries == 0
    finally:
        caches.set_max_bytes(bound)


def test_run_on_a_cached_graph_does_not_rebuild(monkeypatch: pytest.MonkeyPatch) -> None:
    v = diamond()
    params = F.ForecastParams.model_validate({"seeds": ["s"], "probability": {"scheme": "uniform", "p": 0.5},
                                              "simulations": 4000, "min_simulations": 4000})
    first = forecast_task.run(ctx_for(v), params).data
    builds = dc.cache_info().builds

    def fail(*a: Any, **k: Any) -> Any:
        raise AssertionError("rebuilt the diffusion graph")

    monkeypatch.setattr(dc, "diffusion_graph", fail)
    again = forecast_task.run(ctx_for(v), params).data
    assert dc.cache_info().builds == builds and again == first
    er = first["expected_reach"]
    # Source: exact enumeration of the diamond's 2^4 live-edge worlds (REFERENCES.md: 2.4375).
    assert abs(er["mean"] - 2.4375) <= 4 * er["stderr"]


def test_prepare_resolves_ids_and_contact_rules() -> None:
    v = diamond(consent=[0, 1, -1, 1])  # s: no; b: unknown, which counts as no
    p = F.ForecastParams.model_validate({"seed_sets": {"x": ["a", "s", "a", "b", "s"], "y": ["t"]}})
    prep = F.prepare(p, v)
    assert prep.sets["x"].tolist() == [1, 0, 2] and prep.unique_ids["x"] == ["a", "s", "b"]
    assert [(w["code"], w["seed_set"], w["node_ids"]) for w in prep.warnings] == [
        ("duplicate_seeds", "x", ["a", "s"]), ("seeds_without_consent", "x", ["s", "b"])]
    with pytest.raises(InfeasibleRequest) as info:
        F.prepare(p.model_copy(update={"strict": True}), v)
    assert info.value.data == {"field": "seed_sets.x", "barred": ["s", "b"], "barred_count": 2}
    with pytest.raises(UnknownNode) as unk:
        F.prepare(F.ForecastParams.model_validate({"seeds": [f"x{i}" for i in range(30)]}), v)
    assert unk.value.data["unknown_count"] == 30 and len(unk.value.data["unknown"]) == F.LISTED


def test_target_weights() -> None:
    v = diamond(value=[1.0, float("nan"), 2.0, 10.0], segment=[0, 0, 1, -1], labels=("core", "edge"))
    p = F.ForecastParams.model_validate({"seeds": ["s"], "target_segment": "core", "weights": "value"})
    prep = F.prepare(p, v)
    assert prep.weights is not None and prep.weights.tolist() == [1.0, 0.0, 0.0, 0.0]  # core and valued: s
    assert prep.target == {"segment": "core", "weights": "value", "members": 2}
    assert [w["code"] for w in prep.warnings] == ["nodes_without_value"]
    neg = diamond(value=[1.0, -1.0, 2.0, 10.0])
    with pytest.raises(InvalidParameter) as info:
        F.prepare(F.ForecastParams.model_validate({"seeds": ["s"], "weights": "value"}), neg)
    assert info.value.data["node_id"] == "a"
    with pytest.raises(InvalidParameter):
        F.prepare(F.ForecastParams.model_validate({"seeds": ["s"], "weights": "value"}), diamond())


def test_comparison_is_paired_campaign_by_campaign() -> None:
    from types import SimpleNamespace

    from scipy import stats

    rng = np.random.default_rng(4)
    b = rng.poisson(9.0, size=400).astype(float)
    a = b + rng.integers(0, 3, size=400)  # a reaches 0 to 2 more in every campaign
    rows = [{"name": "a", "expected_reach": {"mean": a.mean()}}, {"name": "b", "expected_reach": {"mean": b.mean()}}]
    results = {"a": SimpleNamespace(per_run=a), "b": SimpleNamespace(per_run=b[:300])}  # b stopped earlier
    cmp = F._comparison(rows, results, 0.95, targeted=False)  # type: ignore[arg-type]
    (pair,) = cmp["pairs"]
    # Source: SciPy, the paired t interval on the first 300 common campaigns (scipy.stats.ttest_rel).
    ci = stats.ttest_rel(a[:300], b[:300]).confidence_interval(0.95)
    assert pair["paired_campaigns"] == 300 and pair["difference"] == pytest.approx((a[:300] - b[:300]).mean())
    assert (pair["ci_low"], pair["ci_high"]) == pytest.approx((ci.low, ci.high))
    assert pair["clearly_different"] is True and cmp["ranking"] == ["a", "b"]
    assert pair["verdict"].startswith("'a' reaches 1 more people than 'b' (95% interval")
    same = {"a": SimpleNamespace(per_run=b), "b": SimpleNamespace(per_run=b)}
    (tie,) = F._comparison(rows, same, 0.95, targeted=False)["pairs"]  # type: ignore[arg-type]
    assert tie["difference"] == 0 and tie["clearly_different"] is False
    assert tie["verdict"].startswith("No clear difference between 'a' and 'b'")


def test_precheck_skips_large_versions() -> None:
    p = F.ForecastParams.model_validate({"seeds": ["nobody"]})
    loads: list[int] = []

    def load() -> LoadedVersion:
        loads.append(1)
        return diamond()

    F.precheck(p, load, edges=F.PRECHECK_MAX_EDGES + 1)
    assert loads == []
    with pytest.raises(UnknownNode):
        F.precheck(p, load, edges=4)


def test_warm_kernels_runs() -> None:
    F.warm_kernels()

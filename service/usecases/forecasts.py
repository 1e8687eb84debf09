"""``forecast``: how far a message travels from given seeds, with honest uncertainty.

One seed set (``seeds``) or several named ones (``seed_sets``, a what-if
comparison in one request) are simulated under the shared diffusion settings
(:class:`~service.usecases.diffusion_settings.DiffusionSettings`) by
``service.analytics.diffusion.forecasts.forecast``, until the confidence interval of the
mean reach is as narrow as asked (``precision`` people, or
``relative_precision`` of the mean) or ``simulations`` have run.

Checks. What needs no graph is checked when the job is created (pydantic: ranges,
exactly one of ``seeds``/``seed_sets``, ``p`` with uniform, ``q`` with
per_interaction). What needs the version is done by :func:`prepare`, in the
task and, through :func:`precheck`, at creation time in the API process when
the version has at most :data:`PRECHECK_MAX_EDGES` edges (the version is then
loaded there too, as the synchronous recommendation routes do; larger
versions are checked by the worker only, so creating their jobs stays cheap):

- unknown ids: :class:`UnknownNode` naming them (422);
- duplicated ids: dropped, with a ``duplicate_seeds`` warning;
- seeds without contact consent: a ``seeds_without_consent`` warning listing
  them, or, with ``strict: true``, :class:`InfeasibleRequest` (422);
- an unknown ``target_segment``, ``weights: "value"`` on a version without
  values, ``explicit`` without a probability column, Linear Threshold whose
  incoming weights exceed 1: :class:`InvalidParameter` (422).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Literal

import numpy as np
from numpy.typing import NDArray
from pydantic import Field, model_validator

from .outcome import Computed, Progress
from service.usecases.diffusion_settings import DiffusionSettings

if TYPE_CHECKING:
    from service.analytics.diffusion.forecasts import ForecastResult, IntervalEstimate
    from service.usecases.loading import LoadedVersion

__all__ = [
    "ForecastParams",
    "Prepared",
    "prepare",
    "precheck",
    "forecast_reach",
    "warm_kernels",
    "PRECHECK_MAX_EDGES",
    "SINGLE_SET_NAME",
]

MAX_SIMULATIONS = 1_000_000
MAX_SEEDS = 100_000
MAX_SETS = 20
PRECHECK_MAX_EDGES = 2_000_000
SINGLE_SET_NAME = "seeds"
LISTED = 20  # ids listed in a warning or error; the count says how many there were

NodeId = str
SetName = str


class ForecastParams(DiffusionSettings):
    seeds: list[NodeId] | None = Field(
        default=None, min_length=1, max_length=MAX_SEEDS, description="One seed set: node ids."
    )
    seed_sets: dict[SetName, list[NodeId]] | None = Field(
        default=None, min_length=1, max_length=MAX_SETS,
        description="Several named seed sets, forecast side by side (a what-if comparison).",
    )
    simulations: int = Field(
        default=10_000, ge=2, le=MAX_SIMULATIONS, description="Cap on simulations per seed set."
    )
    min_simulations: int = Field(
        default=200, ge=2, le=MAX_SIMULATIONS,
        description="Simulations before the stopping rule is first checked (clipped to simulations).",
    )
    precision: float | None = Field(
        default=None, gt=0, description="Stop once the interval's half-width is at most this many people."
    )
    relative_precision: float | None = Field(
        default=None, gt=0, lt=1, description="Stop once the half-width is at most this fraction of the mean."
    )
    confidence: float = Field(default=0.95, gt=0, lt=1, description="Level of the intervals.")
    top_nodes: int = Field(default=20, ge=0, le=1000, description="How many of the most likely reached to list.")
    top_nodes_include_seeds: bool = Field(default=False, description="Whether seeds may be listed in top_nodes.")
    target_segment: str | None = Field(
        default=None, min_length=1, description="Count reach within this segment only (target reach)."
    )
    weights: Literal["value"] | None = Field(
        default=None, description="'value': target reach is the summed node value of those reached."
    )
    strict: bool = Field(
        default=False, description="Seeds without contact consent are an error (true) or a warning (false)."
    )

    @model_validator(mode="after")
    def _exactly_one_seed_list(self) -> ForecastParams:
        if (self.seeds is None) == (self.seed_sets is None):
            raise ValueError("give exactly one of seeds (a list of ids) or seed_sets (named lists of ids)")
        for name, ids in (self.seed_sets or {}).items():
            if not name or len(name) > 100:
                raise ValueError("seed set names must have 1 to 100 characters")
            if not 1 <= len(ids) <= MAX_SEEDS:
                raise ValueError(f"seed set {name!r} must hold 1 to {MAX_SEEDS} ids")
        return self

    def named_sets(self) -> dict[str, list[str]]:
        """The seed sets by name (``seeds`` is the set named :data:`SINGLE_SET_NAME`)."""
        return dict(self.seed_sets) if self.seed_sets is not None else {SINGLE_SET_NAME: list(self.seeds or [])}


@dataclass(frozen=True)
class Prepared:
    """The parts of a forecast that need the version: indices, target weights, warnings."""

    sets: dict[str, NDArray[np.int64]]
    unique_ids: dict[str, list[str]]
    weights: NDArray[np.float64] | None
    target: dict[str, Any] | None
    warnings: list[dict[str, Any]]


def prepare(params: ForecastParams, version: LoadedVersion, *, check_settings: bool = False) -> Prepared:
    """Resolve ids, target and contact rules against ``version``; raise the 422 errors.

    ``check_settings`` also checks the diffusion settings against the version
    (explicit probabilities present, LT weights at most 1) without building
    the CSR arrays; the task leaves it off because building them checks the same.
    """
    from service.analytics.errors import InfeasibleRequest

    if check_settings:
        params.check_version(version)
    index = version.index
    ok = version.attrs.contactable()
    sets: dict[str, NDArray[np.int64]] = {}
    unique_ids: dict[str, list[str]] = {}
    warnings: list[dict[str, Any]] = []
    single = params.seed_sets is None
    for name, ids in params.named_sets().items():
        field = "seeds" if single else f"seed_sets.{name}"
        where = "" if single else f" in seed set {name!r}"
        unique = list(dict.fromkeys(ids))
        idx = _resolve(index, unique, field, where)
        if len(unique) < len(ids):
            dupes = _duplicates(ids)
            warnings.append(_warning("duplicate_seeds", name, dupes,
                                     f"{len(dupes)} id(s) listed more than once{where}; each counts once"))
        barred = [s for s, i in zip(unique, idx.tolist()) if not ok[i]]
        if barred:
            message = f"{len(barred)} seed(s){where} have no contact consent"
            if params.strict:
                raise InfeasibleRequest(
                    message + " (strict: true); remove them or set strict to false",
                    field=field, barred=barred[:LISTED], barred_count=len(barred),
                )
            warnings.append(_warning("seeds_without_consent", name, barred, message))
        sets[name] = idx
        unique_ids[name] = unique
    weights, target = _target(params, version, warnings)
    return Prepared(sets, unique_ids, weights, target, warnings)


def precheck(params: ForecastParams, load: Callable[[], LoadedVersion], *, edges: int) -> None:
    """The checks of :func:`prepare`, at job creation, for versions of at most PRECHECK_MAX_EDGES edges."""
    if edges <= PRECHECK_MAX_EDGES:
        prepare(params, load(), check_settings=True)


def forecast_reach(version: LoadedVersion, params: ForecastParams, *, progress: Progress) -> Computed:
    from service.analytics.diffusion.forecasts import forecast

    v = version
    prep = prepare(params, v)
    dg = params.diffusion_graph(v)
    attrs = v.attrs
    results = forecast(
        dg,
        prep.sets,
        simulations=params.simulations,
        min_simulations=min(params.min_simulations, params.simulations),
        precision=params.precision,
        relative_precision=params.relative_precision,
        confidence=params.confidence,
        rounds=params.rounds,
        random_seed=params.random_seed,
        segments=attrs.segment if attrs.segment_labels else None,
        segment_labels=attrs.segment_labels,
        weights=prep.weights,
        top_nodes=params.top_nodes,
        include_seeds=params.top_nodes_include_seeds,
        progress=progress,
    )
    doc = result_document(params, v, prep, results)
    doc["threads"] = next(iter(results.values())).threads
    return Computed(data=doc)


# ------------------------------------------------------------------ the result


def result_document(params: ForecastParams, v: LoadedVersion, prep: Prepared,
                    results: dict[str, ForecastResult]) -> dict[str, Any]:
    """The job's result (the worker adds graph_id, version, params, random_seed)."""
    warnings = list(prep.warnings)
    forecasts = []
    for name, r in results.items():
        forecasts.append(_one_set(name, r, v.ids, v.labels, prep.target is not None, len(prep.unique_ids[name])))
        asked = params.precision is not None or params.relative_precision is not None
        if asked and r.stopped_because == "simulation_cap":
            warnings.append({
                "code": "precision_not_reached", "seed_set": name,
                "message": f"the simulation cap ({params.simulations}) was reached before the asked "
                           f"precision; the interval's half-width is {r.half_width:.4g}",
            })
    doc: dict[str, Any] = {
        **params.describe(),
        "confidence": params.confidence,
        "nodes": v.graph.n,
        "edges": v.graph.m,
        "target": prep.target,
        "forecasts": forecasts,
        "warnings": warnings,
    }
    if len(forecasts) == 1:
        doc.update({k: val for k, val in forecasts[0].items() if k not in ("name",)})
    else:
        doc["comparison"] = _comparison(forecasts, results, params.confidence, prep.target is not None)
    return doc


def _interval_doc(e: IntervalEstimate, confidence: float) -> dict[str, float]:
    return {"mean": e.mean, "stderr": e.stderr, "ci_low": e.ci_low, "ci_high": e.ci_high,
            "confidence": confidence}


def _percentile_doc(p: dict[int, float]) -> dict[str, float]:
    return {f"p{k}": v for k, v in p.items()}


def _one_set(name: str, r: ForecastResult, ids: Sequence[str], labels: Sequence[str | None], targeted: bool,
             seed_count: int) -> dict[str, Any]:
    out: dict[str, Any] = {
        "name": name,
        "seed_count": seed_count,
        "expected_reach": _interval_doc(r.expected_reach, r.confidence),
        "percentiles": _percentile_doc(r.percentiles),
        "by_round": [
            {"round": b.round, "new_mean": b.new_mean, "cumulative_mean": b.cumulative_mean,
             "ci_low": b.cumulative_ci_low, "ci_high": b.cumulative_ci_high}
            for b in r.by_round
        ],
        "top_nodes": [{"node_id": ids[t.node], "label": labels[t.node] or None, "probability": t.probability,
                       "stderr": t.stderr}
                      for t in r.top_nodes],
        "segment_reach": sorted(
            ({"segment": s, "expected": e} for s, e in r.segment_reach.items()),
            key=lambda d: -d["expected"],
        ),
        "outcome_histogram": r.outcome_histogram,
        "simulations": r.simulations,
        "stopped_because": r.stopped_because,
        "half_width": r.half_width,
        "stream_key": f"{r.stream_key:016x}",
    }
    if targeted and r.weighted_reach is not None and r.weighted_percentiles is not None:
        out["target_reach"] = {**_interval_doc(r.weighted_reach, r.confidence),
                               "percentiles": _percentile_doc(r.weighted_percentiles)}
    return out


def _comparison(forecasts: list[dict[str, Any]], results: dict[str, ForecastResult], confidence: float,
                targeted: bool) -> dict[str, Any]:
    """Every pair's difference, paired campaign by campaign, with its interval and a verdict.

    Every set runs on the same simulated campaigns (campaign ``i`` is one live-edge world for
    all of them), so the difference of two sets is measured on their first common campaigns
    and its interval comes from the spread of the per-campaign differences (a paired t
    interval), much narrower than comparing two independent means.
    """
    from service.analytics.diffusion.paired import paired_interval

    measure = "target_reach" if targeted else "expected_reach"
    unit = "of the target audience" if targeted else "people"
    pairs = []
    for i, a in enumerate(forecasts):
        for b in forecasts[i + 1:]:
            ra, rb = results[a["name"]].per_run, results[b["name"]].per_run
            if ra is None or rb is None:
                continue
            n = min(ra.shape[0], rb.shape[0])
            d = paired_interval(ra[:n], rb[:n], confidence)  # a minus b
            pairs.append({"seed_set": a["name"], "versus": b["name"], "difference": d.mean, "stderr": d.stderr,
                          "ci_low": d.ci_low, "ci_high": d.ci_high,
                          "clearly_different": bool(d.ci_low > 0 or d.ci_high < 0), "paired_campaigns": n,
                          "verdict": _verdict(a["name"], b["name"], d.mean, d.ci_low, d.ci_high, unit, confidence)})
    ranking = [f["name"] for f in sorted(forecasts, key=lambda f: -f[measure]["mean"])]
    return {"measure": measure, "confidence": confidence, "ranking": ranking, "pairs": pairs}


def _verdict(a: str, b: str, mean: float, lo: float, hi: float, unit: str, confidence: float) -> str:
    """The difference of ``a`` over ``b`` in plain words, whole numbers."""
    level = f"{confidence:.0%}"

    def whole(x: float) -> str:
        n = int(round(x))
        return f"{n:,}" if n else "0"

    if lo > 0:
        return f"'{a}' reaches {whole(mean)} more {unit} than '{b}' ({level} interval {whole(lo)} to {whole(hi)})."
    if hi < 0:
        return (f"'{a}' reaches {whole(-mean)} fewer {unit} than '{b}' ({level} interval {whole(-hi)} to "
                f"{whole(-lo)} fewer).")
    return (f"No clear difference between '{a}' and '{b}' (difference {whole(mean)} {unit}, {level} interval "
            f"{whole(lo)} to {whole(hi)}).")


# ------------------------------------------------------------------ helpers


def _resolve(index: dict[str, int], ids: list[str], field: str, where: str) -> NDArray[np.int64]:
    from service.analytics.errors import UnknownNode

    got = [index.get(s, -1) for s in ids]
    unknown = [s for s, i in zip(ids, got) if i < 0]
    if unknown:
        shown = ", ".join(repr(s) for s in unknown[:5])
        raise UnknownNode(
            f"{len(unknown)} seed id(s){where} are not in this version: {shown}"
            + (" ..." if len(unknown) > 5 else ""),
            field=field, unknown=unknown[:LISTED], unknown_count=len(unknown),
        )
    return np.asarray(got, dtype=np.int64)


def _duplicates(ids: list[str]) -> list[str]:
    seen: set[str] = set()
    dupes: dict[str, None] = {}
    for s in ids:
        if s in seen:
            dupes[s] = None
        seen.add(s)
    return list(dupes)


def _warning(code: str, name: str, ids: list[str], message: str) -> dict[str, Any]:
    return {"code": code, "seed_set": name, "message": message, "node_ids": ids[:LISTED], "count": len(ids)}


def _target(params: ForecastParams, v: LoadedVersion,
            warnings: list[dict[str, Any]]) -> tuple[NDArray[np.float64] | None, dict[str, Any] | None]:
    """Per-node weights of the target reach: segment membership, node value, or their product."""
    from service.analytics.errors import InvalidParameter

    if params.target_segment is None and params.weights is None:
        return None, None
    n = v.graph.n
    w = np.ones(n, dtype=np.float64)
    target: dict[str, Any] = {"segment": params.target_segment, "weights": params.weights}
    if params.target_segment is not None:
        labels = v.attrs.segment_labels
        if params.target_segment not in labels:
            known = ", ".join(repr(s) for s in labels[:10]) or "none"
            raise InvalidParameter(
                f"segment {params.target_segment!r} is not in this version (segments: {known})",
                field="target_segment", known=list(labels[:50]),
            )
        code = labels.index(params.target_segment)
        w *= v.attrs.segment == code
        target["members"] = int(np.count_nonzero(w))
    if params.weights == "value":
        value = v.attrs.value
        given = np.isfinite(value)
        if not given.any():
            raise InvalidParameter("weights 'value' needs node values; this version has none",
                                   field="weights")
        bad = np.flatnonzero(given & (value < 0))
        if bad.size:
            raise InvalidParameter(f"node {v.ids[int(bad[0])]!r} has a negative value", field="weights",
                                   node_id=v.ids[int(bad[0])])
        missing = int(n - np.count_nonzero(given))
        if missing:
            warnings.append({"code": "nodes_without_value", "message": f"{missing} node(s) have no value "
                             "and count 0 in the target reach", "count": missing})
        w *= np.where(given, value, 0.0)
    return w, target


def warm_kernels() -> None:
    """Compile or load the simulation kernels now (a worker calls it at start, in a thread).

    A fresh process otherwise pays the numba cache load on its first forecast.
    """
    from service.analytics.diffusion.forecasts import forecast
    from service.analytics.graph import GraphArrays, diffusion_graph

    g = GraphArrays(3, True, np.array([0, 1], np.int32), np.array([1, 2], np.int32), np.ones(2))
    for model, scheme in (("ic", "weighted_cascade"), ("lt", "normalized")):
        dg = diffusion_graph(g, model=model, scheme=scheme)
        forecast(dg, {"w": [0]}, simulations=20, min_simulations=20, weights=np.ones(3))
        forecast(dg, {"w": [0]}, simulations=20, min_simulations=20)

"""Backtests of the forecasts against past campaigns (the ``backtest`` job).

:func:`run_backtest` holds campaigns out (the latest N together, or each in
turn), learns on the others, forecasts each held-out campaign from its real
seeds over its real length under every scheme (the learned model, weighted
cascade, uniform at its best p, trivalency) and compares with what it
reached: the error of the expected reach, whether the actual reach fell
inside the forecast's 5-95% band, the log-likelihood of who adopted and the
per-person AUC; then one plain verdict. The engine is
:func:`service.analytics.learning.backtest` (Goyal, Bonchi and Lakshmanan
2011 evaluate predicted against actual spread the same way).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterator
from typing import TYPE_CHECKING, Any, Literal

import numpy as np
from pydantic import BaseModel, ConfigDict, Field

from service.analytics.errors import InvalidParameter
from service.analytics.learning import BACKTEST_SCHEMES, SchemeSummary, backtest, backtest_verdict
from service.usecases.campaigns import episodes_of
from service.usecases.learning import MethodName, feature_matrix, segment_codes
from service.usecases.loading import LoadedVersion
from service.usecases.outcome import Computed, Progress

if TYPE_CHECKING:
    from numpy.typing import NDArray

__all__ = ["BacktestParams", "run_backtest", "precheck", "backtest_table", "BACKTEST_HEADER",
           "SCHEME_NAMES"]

SCHEME_NAMES = {"learned": "learned model", "weighted_cascade": "weighted cascade", "uniform": "uniform p",
                "trivalency": "trivalency"}
BACKTEST_HEADER = ["campaign", "name", "scheme", "actual", "expected", "p5", "p95", "inside_band",
                   "abs_error", "rel_error", "log_likelihood", "auc"]


class BacktestParams(BaseModel):
    """Which campaigns to hold out, and how to learn and forecast."""

    model_config = ConfigDict(extra="forbid")

    campaigns: list[str] | None = Field(
        default=None, min_length=2, max_length=10_000,
        description="Ids of the campaigns to use, oldest first by start; null: every campaign with a log.")
    holdout: Literal["latest", "each"] = Field(
        default="latest", description="latest: hold out the latest `latest` campaigns and learn on the others "
        "once; each: hold out each campaign in turn and learn on all the others.")
    latest: int = Field(default=1, ge=1, le=1000, description="How many of the latest campaigns to hold out.")
    round_hours: float = Field(default=24.0, gt=0, le=24 * 365,
                               description="Hours one person takes to pass a campaign on (one round).")
    methods: list[MethodName] | None = Field(default=None, min_length=1,
                                             description="Models the learned scheme chooses from; null: all.")
    uniform_p: float | None = Field(default=None, ge=0, le=1,
                                    description="The uniform scheme's p; null: the best p learned.")
    simulations: int = Field(default=1000, ge=50, le=100_000,
                             description="Forecast simulations per campaign and scheme.")
    folds: int = Field(default=5, ge=2, le=20, description="Groups of campaigns for choosing the learned model.")
    random_seed: int = Field(default=0, ge=0, le=2**63 - 1)


def _splits(n: int, params: BacktestParams) -> list[list[int]]:
    """The order to hand each split to the engine: training campaigns first, held-out ones last."""
    if params.holdout == "each":
        if n < 2:
            raise InvalidParameter("holding out each campaign in turn needs at least two campaigns",
                                   field="campaigns")
        return [[j for j in range(n) if j != i] + [i] for i in range(n)]
    if params.latest >= n:
        raise InvalidParameter(f"holding out the latest {params.latest} of {n} campaigns leaves none to learn "
                               "from: hold out fewer, or upload more campaigns", field="latest",
                               value=params.latest)
    return [list(range(n))]


def precheck(params: BacktestParams, load: Callable[[], LoadedVersion], *, edges: int) -> None:
    """Refuse before queueing: too few campaigns, unknown or unready ones, or nothing left to learn from."""
    episodes, _ = episodes_of(load(), params.campaigns, round_hours=params.round_hours)
    _splits(len(episodes), params)


def run_backtest(version: LoadedVersion, params: BacktestParams, *, tenant: str, progress: Progress) -> Computed:
    """Hold out, learn, forecast and score; see the module docstring."""
    episodes, used = episodes_of(version, params.campaigns, round_hours=params.round_hours, tenant=tenant)
    splits = _splits(len(episodes), params)
    seg, labels = segment_codes(version)
    x, names = feature_matrix(version)
    held = 1 if params.holdout == "each" else params.latest
    rows: list[dict[str, Any]] = []
    scores: list[Any] = []
    for i, order in enumerate(splits):
        progress(i / len(splits), f"learning and forecasting held-out campaign group {i + 1} of {len(splits)}")
        res = backtest(version.graph, [episodes[j] for j in order], holdout="latest", latest=held,
                       segments=seg if len(labels) > 2 else None, features=x if x.shape[1] else None,
                       feature_names=names, methods=params.methods, uniform_p=params.uniform_p,
                       simulations=params.simulations, random_seed=params.random_seed, folds=params.folds,
                       progress=_scaled(progress, i, len(splits)))
        scores.extend(res.scores)
        method = res.models[0].method if res.models else ""
        for j in order[-held:]:
            c = used[j]
            mine = [s for s in res.scores if s.campaign == c["id"]]
            rows.append({"id": c["id"], "name": c["name"], "actual": mine[0].actual if mine else 0,
                         "learned_method": method,
                         "forecasts": [_forecast(s) for s in mine]})
    progress(1.0, "summing up")
    summary = {s: _summary(s, [r for r in scores if r.scheme == s]) for s in BACKTEST_SCHEMES}
    doc = {
        "verdict": backtest_verdict(summary),
        "summary": [{"scheme": k, "name": SCHEME_NAMES[k], "campaigns": v.campaigns,
                     "mean_abs_error": v.mean_abs_error, "mean_rel_error": v.mean_rel_error, "inside": v.inside,
                     "log_likelihood": v.log_likelihood, "mean_auc": _num(v.mean_auc)} for k, v in summary.items()],
        "campaigns": rows,
        "holdout": params.holdout,
        "round_hours": params.round_hours,
    }
    return Computed(doc)


def _scaled(progress: Progress, i: int, n: int) -> Callable[[float, str], None]:
    """Progress of split ``i`` of ``n`` as a share of the whole backtest."""
    def step(f: float, msg: str) -> None:
        progress((i + f) / n, msg)
    return step


def _forecast(s: Any) -> dict[str, Any]:
    return {"scheme": s.scheme, "expected": s.expected, "p5": s.p5, "p95": s.p95, "inside_band": s.inside,
            "abs_error": s.abs_error, "rel_error": s.rel_error, "log_likelihood": s.log_likelihood,
            "auc": _num(s.auc)}


def _num(v: float) -> float | None:
    return None if math.isnan(v) else float(v)


def _summary(scheme: str, rows: list[Any]) -> SchemeSummary:
    aucs = [r.auc for r in rows if not math.isnan(r.auc)]
    return SchemeSummary(scheme, len(rows), float(np.mean([r.abs_error for r in rows])),
                         float(np.mean([r.rel_error for r in rows])), sum(bool(r.inside) for r in rows),
                         float(sum(r.log_likelihood for r in rows)), float(np.mean(aucs)) if aucs else math.nan)


def backtest_table(version: LoadedVersion, data: dict[str, Any], arrays: dict[str, NDArray[Any]]
                   ) -> tuple[list[str], Iterator[list[Any]]]:
    """One row per held-out campaign and scheme: actual reach, forecast, band, errors, likelihood, AUC."""

    def rows() -> Iterator[list[Any]]:
        for c in data.get("campaigns") or []:
            for f in c["forecasts"]:
                yield [c["id"], c["name"], SCHEME_NAMES.get(f["scheme"], f["scheme"]), c["actual"], f["expected"],
                       f["p5"], f["p95"], "yes" if f["inside_band"] else "no", f["abs_error"], f["rel_error"],
                       f["log_likelihood"], f["auc"]]

    return BACKTEST_HEADER, rows()

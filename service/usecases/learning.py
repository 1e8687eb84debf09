"""Learning edge probabilities from a graph's past campaigns (the ``learn_probabilities`` job).

:func:`learn_model` reads the chosen campaigns' logs, turns them into rounds
over the version's people, fits every candidate model (one probability per
connection, per pair of segments, from each connection's features, one for
all) by the EM of Saito, Nakano and Kimura (2008), compares them and the
fixed schemes by held-out likelihood, and stores the winner: its parameters,
fit statistics and one probability per connection (``arc_prob``) plus
Linear Threshold weights by the counting of Goyal, Bonchi and Lakshmanan
(2010) (``lt_weight``). The job's id is the model's id: diffusion settings
``{"scheme": "learned", "model": "<job id>"}`` use it (see
:mod:`service.usecases.learned_models`).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any, Literal

import numpy as np
from numpy.typing import NDArray
from pydantic import BaseModel, ConfigDict, Field

from service.analytics.learning import campaign_episodes, edge_features, goyal_lt_weights, learn_probabilities
from service.usecases.campaigns import episodes_of
from service.usecases.loading import LoadedVersion
from service.usecases.outcome import Computed, Progress

__all__ = ["LearnParams", "learn_model", "precheck", "segment_codes", "feature_matrix", "MethodName"]

MethodName = Literal["per_edge", "segment_pair", "logistic", "uniform", "weighted_cascade", "trivalency"]
NO_SEGMENT = "(no segment)"


class LearnParams(BaseModel):
    """Which campaigns to learn from and how to read their times."""

    model_config = ConfigDict(extra="forbid")

    campaigns: list[str] | None = Field(
        default=None, min_length=1, max_length=10_000,
        description="Ids of the campaigns to learn from; null: every campaign of the graph with a log.")
    round_hours: float = Field(
        default=24.0, gt=0, le=24 * 365,
        description="How long one person takes to pass a campaign on, in hours: timestamps are grouped "
        "into rounds of this length (logs given in rounds are read as they are).")
    methods: list[MethodName] | None = Field(
        default=None, min_length=1,
        description="Models to compare; null: all the data allows (per pair of segments needs segments).")
    folds: int = Field(default=5, ge=2, le=20, description="Groups of campaigns for the held-out comparison.")
    random_seed: int = Field(default=0, ge=0, le=2**63 - 1, description="Seeds the trivalency draw.")


def segment_codes(version: LoadedVersion) -> tuple[NDArray[np.int64], tuple[str, ...]]:
    """Segment code per person (people without a segment get a class of their own) and the labels."""
    labels = (*version.attrs.segment_labels, NO_SEGMENT)
    seg = np.asarray(version.attrs.segment, dtype=np.int64)
    return np.where(seg < 0, len(labels) - 1, seg), labels


def feature_matrix(version: LoadedVersion, names: tuple[str, ...] | None = None
                   ) -> tuple[NDArray[np.float64], tuple[str, ...]]:
    """Connection features of the version; with ``names``, those columns in that order (0 where absent)."""
    x, have = edge_features(version.graph)
    if names is None:
        return x, have
    cols = [x[:, have.index(n)] if n in have else np.zeros(x.shape[0]) for n in names]
    out = np.column_stack(cols) if cols else np.zeros((x.shape[0], 0))
    return out, names


def learn_model(version: LoadedVersion, params: LearnParams, *, tenant: str, progress: Progress) -> Computed:
    """Learn from the chosen campaigns on ``version``; see the module docstring."""
    episodes, used = episodes_of(version, params.campaigns, round_hours=params.round_hours, tenant=tenant)
    progress(0.1, f"learning from {len(episodes)} campaigns")
    seg, labels = segment_codes(version)
    segments = seg if len(labels) > 2 else None  # one segment (or none): nothing to tell apart
    x, names = feature_matrix(version)
    features = x if x.shape[1] else None
    methods = params.methods
    if methods is not None:
        methods = [m for m in methods if not (m == "segment_pair" and segments is None)] or ["uniform"]
    m = learn_probabilities(version.graph, episodes, methods=methods, segments=segments, features=features,
                            feature_names=names, folds=params.folds, random_seed=params.random_seed,
                            progress=lambda f, msg: progress(0.1 + 0.75 * f, msg))
    progress(0.85, "counting Linear Threshold weights")
    lt = goyal_lt_weights(version.graph, episodes)
    progress(0.95, "storing the model")
    p = m.arc_prob
    model = {
        "method": m.method,
        "reason": m.reason,
        "parameters": [{"name": _param_name(q.name, m.method, labels), "value": q.value, "low": q.low,
                        "high": q.high} for q in m.parameters],
        "held_out": {k: round(v, 2) for k, v in m.held_out.items()},
        "log_likelihood": m.log_likelihood,
        "iterations": m.iterations,
        "converged": m.converged,
        "new_connection_method": m.new_arc_method,
        "typical_probability": {"median": float(np.median(p)) if p.size else 0.0,
                                "p90": float(np.quantile(p, 0.9)) if p.size else 0.0},
        # What carries the model to later versions of the graph.
        "coefficients": {k: v.tolist() for k, v in m.coefficients.items()},
        "segment_labels": list(labels),
        "feature_names": list(names),
    }
    data = {"campaigns": m.campaigns, "trials": m.trials, "activations": m.activations,
            "unexplained": m.unexplained, "round_hours": params.round_hours}
    doc = {"model": model, "campaigns": used, "data": data, "readings": _readings(m.method, m.reason, p, m)}
    return Computed(doc, {"arc_prob": p.astype(np.float64), "lt_weight": lt.astype(np.float64)})


def _param_name(name: str, method: str, labels: tuple[str, ...]) -> str:
    """``segment 0 -> 1`` style names in the segments' own words."""
    if method != "segment_pair":
        return name
    parts = [s for s in name.replace("->", " ").split() if s.isdigit()]
    if len(parts) == 2 and max(int(parts[0]), int(parts[1])) < len(labels):
        return f"{labels[int(parts[0])]} -> {labels[int(parts[1])]}"
    return name


def _readings(method: str, reason: str, p: NDArray[np.float64], m: Any) -> list[str]:
    out = [reason]
    if p.size:
        out.append(f"A typical connection passes a campaign on with probability {float(np.median(p)):.3g} "
                   f"(one in ten connections {float(np.quantile(p, 0.9)):.3g} or more).")
    out.append(f"Learned from {m.campaigns} campaigns: {m.activations:,} adoptions that followed a "
               f"connection who had adopted, out of {m.trials:,} chances.")
    if m.unexplained:
        out.append(f"{m.unexplained:,} adoptions had no connection who adopted in the round before; they "
                   "are left out (a longer round_hours may explain them).")
    return out


def precheck(params: Any, load: Callable[[], LoadedVersion], *, edges: int) -> None:
    """Refuse before queueing: unknown or unready campaigns, none at all, or unusable on this version."""
    version = load()
    episodes, _ = episodes_of(version, params.campaigns, round_hours=params.round_hours)
    campaign_episodes(version.graph, episodes)  # the engine's own checks, named per campaign

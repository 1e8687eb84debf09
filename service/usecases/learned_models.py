"""Learned probability models as diffusion settings: ``{"scheme": "learned", "model": "<job id>"}``.

A model is the stored result of a ``learn_probabilities`` job on the same
graph (so of the same tenant); anything else is refused as a 422 naming
``probability.model``. On the version it was learned on, each connection
keeps its learned probability (Linear Threshold: its counted weight). On a
later version the model is carried over: connections that existed keep
their probability, new ones get the model's few-parameter estimate (per
pair of segments, from the connection's features, or one for all), and
Linear Threshold weights of new connections are 0. The arrays are built
once per process and version (the diffusion cache).
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import NDArray
from sqlalchemy.orm import Session

from service.analytics.errors import InvalidParameter
from service.analytics.graph import DiffusionGraph, arcs, check_lt_weights, csr
from service.analytics.learning import LearnedModel, match_arcs, transfer_probabilities
from service.usecases.caches import diffusion_cache
from service.usecases.diffusion_inputs import CacheKey
from service.usecases.learning import NO_SEGMENT, feature_matrix
from service.usecases.loading import LoadedVersion, load_version, version_origin
from storage.errors import NotFound
from storage.repo import graphs as graph_repo
from storage.repo import jobs as job_repo
from storage.repo import results as result_repo

__all__ = ["learned_probabilities", "learned_diffusion_graph_for", "LEARN_KIND"]

LEARN_KIND = "learn_probabilities"


def learned_diffusion_graph_for(model_id: str, version: LoadedVersion, *, model: str) -> DiffusionGraph:
    """The version's diffusion graph under a learned model, built once per process."""
    key = CacheKey(version.version_id, model, f"learned:{model_id}", None, None, 0)

    def build() -> DiffusionGraph:
        a = arcs(version.graph)
        p = learned_probabilities(model_id, version, model=model)
        if model == "lt":
            check_lt_weights(a, p)
        out = csr(a.n, a.src, a.dst, p)
        inn = csr(a.n, a.dst, a.src, p)
        return DiffusionGraph(a.n, model, out.indptr, out.indices, out.data, inn.indptr, inn.indices, inn.data)

    return diffusion_cache.get(key, build)


def learned_probabilities(model_id: str, version: LoadedVersion, *, model: str = "ic") -> NDArray[np.float64]:
    """One probability (``ic``) or weight (``lt``) per arc of ``version`` under the stored model.

    Raises
    ------
    InvalidParameter
        ``model_id`` is not a finished ``learn_probabilities`` job of this graph,
        or was learned on a later version than ``version``.
    """
    graph_id, bind = version_origin(version.version_id)
    with Session(bind) as db:
        try:
            job = job_repo.get_job_any_tenant(db, model_id)
        except NotFound:
            job = None
        if job is None or job.graph_id != graph_id or job.kind != LEARN_KIND:
            raise InvalidParameter(
                f"model {model_id!r} is not a learned model of this graph; give the id of a "
                "learn_probabilities job run on this graph", field="probability.model", value=model_id)
        if job.status != "succeeded":
            raise InvalidParameter(
                f"model {model_id!r} is not ready (its job is {job.status}); wait for it to succeed",
                field="probability.model", value=model_id)
        result = result_repo.get_result(db, job.id)
        doc: dict[str, Any] = dict(result.data)
        name = "lt_weight" if model == "lt" else "arc_prob"
        stored = result_repo.get_result_arrays(db, result, [name])[name]
        learned_on = int(job.version or 0)
        if learned_on == version.number:
            return np.asarray(stored, dtype=np.float64)
        if learned_on > version.number:
            raise InvalidParameter(
                f"model {model_id!r} was learned on version {learned_on}; use it on that version or a "
                "later one", field="probability.model", value=model_id)
        graph = graph_repo.get_graph(db, job.tenant_id, graph_id)
        before = load_version(db, graph_repo.get_version(db, graph, learned_on))
    return _carried(doc["model"], np.asarray(stored, dtype=np.float64), before, version, model)


def _carried(doc: dict[str, Any], stored: NDArray[np.float64], before: LoadedVersion, version: LoadedVersion,
             model: str) -> NDArray[np.float64]:
    """The stored per-arc values carried from ``before`` to the later ``version``."""
    old_index = before.index
    node_map = np.array([old_index.get(s, -1) for s in version.ids], dtype=np.int64)
    previous = match_arcs(before.graph, version.graph, node_map)
    if model == "lt":
        out: NDArray[np.float64] = np.where(previous >= 0, stored[np.maximum(previous, 0)], 0.0)
        return out
    coefficients = {k: np.asarray(v, dtype=np.float64) for k, v in doc.get("coefficients", {}).items()}
    learned = LearnedModel(
        method=doc["method"], reason="", arc_prob=stored, parameters=(), held_out={}, log_likelihood=0.0,
        trace=(), iterations=0, converged=True, campaigns=0, trials=0, activations=0, unexplained=0,
        fallback=0.0, coefficients=coefficients, new_arc_method=doc.get("new_connection_method", "uniform"))
    labels: list[str] = list(doc.get("segment_labels", []))
    seg = np.asarray(version.attrs.segment, dtype=np.int64)
    now_labels = (*version.attrs.segment_labels, NO_SEGMENT)
    remap = np.array([labels.index(s) if s in labels else len(labels) + 1 for s in now_labels], dtype=np.int64)
    segments = remap[np.where(seg < 0, len(now_labels) - 1, seg)]
    features, _ = feature_matrix(version, tuple(doc.get("feature_names", [])))
    return transfer_probabilities(learned, version.graph, previous_arc=previous, segments=segments,
                                  features=features)

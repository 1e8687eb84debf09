"""Numbers rounded to what they mean, at the one edge where results leave the service.

Stored results keep full precision (plots, CSV exports and later comparisons
read them); every JSON answer that carries computed figures and every CSV
export passes through :func:`round_document` or :func:`round_cell` on its way
out. The kind of a number is told by its field name (or CSV column):

- people: counts of people and expected reach, to one decimal
  (``expected_reach.mean``, ``reach_curve``, ``p95``, ``marginal_gain`` ...);
- money: costs, to two decimals;
- everything else (shares, probabilities, exposures, scores, ratios,
  exponents, seconds, and standard errors, which must not round to 0 when a
  small graph's estimate is tight): four significant digits (whole numbers of five digits
  or more keep their whole part).

Integers pass unchanged; so does ``params``, the caller's own input echoed back.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

from fastapi import Response, status
from fastapi.responses import JSONResponse

from .etags import etag_matches

if TYPE_CHECKING:
    from storage.models import Job, JobResult

__all__ = [
    "PEOPLE_FIELDS", "MONEY_FIELDS", "kind_of", "round_cell", "round_document", "round_value", "result_body",
    "result_response",
]

#: Fields (and CSV columns) that count people or expected reach: one decimal.
PEOPLE_FIELDS = frozenset({
    "mean", "ci_low", "ci_high", "expected", "expected_reach", "target_reach", "marginal_gain",
    "cumulative_reach", "reach_curve", "selection_reach_curve", "p5", "p25", "p50", "p75", "p95",
    "new_mean", "cumulative_mean", "difference", "half_width", "shortlist_mean", "baseline_mean",
    "certified_lower_bound", "optimum_upper_bound", "expected_referrals", "reach", "reach_low",
    "reach_high", "degree_median", "degree_mean", "mean_degree", "average_degree",
    "spread", "expected_mean", "count_mean", "outcomes_low", "outcomes_high",
    "reach_mean", "reach_ci_low", "reach_ci_high", "reach_p5", "reach_p95", "people", "gain",
})
#: Costs: two decimals.
MONEY_FIELDS = frozenset({"cost", "total_cost", "cost_budget"})
#: Fields whose figures are the caller's input, left as given.
VERBATIM_FIELDS = frozenset({"params"})


def kind_of(name: str | None, parent: str | None = None) -> str:
    """``"people"``, ``"money"`` or ``"share"`` (four significant digits) for a field name."""
    if name is None:
        return "share"
    if name in MONEY_FIELDS:
        return "money"
    if name in PEOPLE_FIELDS:
        return "people"
    return "share"


def round_value(value: float, kind: str) -> float:
    """One float rounded for its kind; NaN and infinities are returned unchanged."""
    if not math.isfinite(value):
        return value
    if kind == "people":
        out = round(value, 1)
    elif kind == "money":
        out = round(value, 2)
    elif value == 0:
        out = 0.0
    else:
        # Four significant digits, but never fewer than the whole part (a score of 12,345).
        out = round(value, max(0, 3 - math.floor(math.log10(abs(value)))))
    return out + 0.0  # no "-0.0"


def round_document(doc: Any, name: str | None = None, parent: str | None = None) -> Any:
    """A copy of a JSON-like document with every float rounded by its field's kind.

    A list takes the kind of the field that holds it (``reach_curve``: people);
    a dict's values take their own keys. Integers, strings, booleans and None
    are returned as they are.
    """
    if isinstance(doc, bool) or doc is None or isinstance(doc, (int, str)):
        return doc
    if isinstance(doc, float):
        return round_value(doc, kind_of(name, parent))
    if isinstance(doc, dict):
        return {
            k: (v if k in VERBATIM_FIELDS else round_document(v, k, name))
            for k, v in doc.items()
        }
    if isinstance(doc, (list, tuple)):
        return [round_document(v, name, parent) for v in doc]
    return doc


def round_cell(value: object, column: str) -> object:
    """A CSV cell's value rounded for its column (non-floats unchanged)."""
    if isinstance(value, float) and not isinstance(value, bool):
        return round_value(value, kind_of(column))
    return value


# -- a job's result as an answer ------------------------------------------------------


def result_body(job: Job, result: JobResult) -> dict[str, Any]:
    """The result document as callers see it: stored figures rounded to what they mean."""
    return {
        "job_id": job.id,
        "created_at": result.created_at.isoformat(),
        "arrays": result.manifest,
        **round_document(result.data),
    }


def result_response(job: Job, result: JobResult, if_none_match: str | None, *, weak: bool) -> Response:
    etag = f'{"W/" if weak else ""}"{result.etag}"'
    headers = {"ETag": etag, "Cache-Control": "no-cache"}
    if etag_matches(if_none_match, etag):
        return Response(status_code=status.HTTP_304_NOT_MODIFIED, headers=headers)
    return JSONResponse(result_body(job, result), headers=headers)

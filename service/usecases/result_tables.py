"""CSV tables of shortlist and forecast results, for ``GET /v1/jobs/{job_id}/result.csv``.

Each function takes the loaded version, the stored result document and its
arrays, and returns a header and an iterator of rows; the route escapes text
that a spreadsheet would run as a formula and rounds each column by its kind
(:mod:`service.api.rendering`).
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from numpy.typing import NDArray

    from service.usecases.loading import LoadedVersion

__all__ = ["SHORTLIST_HEADER", "FORECAST_HEADER", "shortlist_table", "forecast_table"]

SHORTLIST_HEADER = ["rank", "node_id", "label", "segment", "region", "gain", "cumulative_reach", "reason"]
FORECAST_HEADER = ["seed_set", "figure", "segment", "people"]


def _category(codes: Any, names: tuple[str, ...], node: int) -> str | None:
    code = int(codes[node])
    return names[code] if code >= 0 else None


def shortlist_table(
    version: LoadedVersion, data: dict[str, Any], arrays: dict[str, NDArray[Any]]
) -> tuple[list[str], Iterator[list[Any]]]:
    """One row per seed, in the order to contact them: who, where, what each adds and why."""
    attrs, labels, index = version.attrs, version.labels, version.index

    def rows() -> Iterator[list[Any]]:
        for s in data.get("seeds") or []:
            node = index.get(s["node_id"])
            label = labels[node] if node is not None else s.get("label")
            segment = _category(attrs.segment, attrs.segment_labels, node) if node is not None else s.get("segment")
            region = _category(attrs.region, attrs.region_labels, node) if node is not None else s.get("region")
            yield [s["rank"], s["node_id"], label or None, segment, region, s.get("marginal_gain"),
                   s.get("cumulative_reach"), s.get("reason")]

    return SHORTLIST_HEADER, rows()


def forecast_table(
    version: LoadedVersion, data: dict[str, Any], arrays: dict[str, NDArray[Any]]
) -> tuple[list[str], Iterator[list[Any]]]:
    """Per seed set, the headline figures (people reached) and the expected reach in each segment."""
    conf = float(data.get("confidence") or 0.95)

    def rows() -> Iterator[list[Any]]:
        for f in data.get("forecasts") or []:
            name, e, p = f["name"], f["expected_reach"], f.get("percentiles") or {}
            yield [name, "seeds", "", f.get("seed_count")]
            yield [name, "expected reach (mean)", "", e["mean"]]
            yield [name, f"expected reach, {conf:.0%} interval of the mean: low", "", e["ci_low"]]
            yield [name, f"expected reach, {conf:.0%} interval of the mean: high", "", e["ci_high"]]
            if "p5" in p:
                yield [name, "90% of campaigns reach at least", "", p["p5"]]
            if "p50" in p:
                yield [name, "half of campaigns reach at least", "", p["p50"]]
            if "p95" in p:
                yield [name, "90% of campaigns reach at most", "", p["p95"]]
            for s in f.get("segment_reach") or []:
                yield [name, "expected reach in segment", s["segment"], s["expected"]]

    return FORECAST_HEADER, rows()

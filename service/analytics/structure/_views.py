"""The igraph graph of a version and the views derived from it, built once per scoring run
and shared by the measures (private to the structure family)."""

from __future__ import annotations

import warnings
from collections.abc import Callable
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..errors import Cancelled, ComputationFailed
from ..graph import GraphArrays, to_igraph

__all__ = ["_Views"]


class _Views:
    """The igraph graph and derived views, built once and shared by the measures."""

    def __init__(self, g: GraphArrays) -> None:
        self.g = g
        self._ig: Any = None
        self._simple_undirected: Any = None
        self.warnings: list[str] = []
        self.cache: dict[str, Any] = {}

    def call(self, fn: Callable[..., Any], *args: Any, **kwargs: Any) -> NDArray[np.float64]:
        """Run an igraph method: warnings are kept, errors become ComputationFailed."""
        name = getattr(fn, "__name__", str(fn))
        try:
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                out = np.asarray(fn(*args, **kwargs), dtype=np.float64)
        except Cancelled:
            raise
        except Exception as exc:  # igraph raises InternalError and plain ValueErrors
            raise ComputationFailed(f"igraph failed in {name}: {exc}", measure=name) from exc
        self.warnings.extend(str(w.message).split(" Location:")[0] for w in caught)
        return out

    @property
    def ig(self) -> Any:
        if self._ig is None:
            self._ig = to_igraph(self.g, weights=True)
        return self._ig

    def weights(self, use: bool) -> list[float] | None:
        return self.g.weight.tolist() if (use and self.g.weighted) else None

    def loopless(self) -> Any:
        if not np.any(self.g.src == self.g.dst):
            return self.ig
        h = self.ig.copy()
        h.simplify(multiple=False, loops=True, combine_edges="first")
        return h

    @property
    def simple_undirected(self) -> Any:
        """Undirected, no loops; reciprocal arcs merged, summing ``weight`` and
        counting merged arcs in ``arcs``."""
        if self._simple_undirected is None:
            ig = self.ig
            ig.es["arcs"] = [1.0] * ig.ecount()
            combine = {"weight": "sum", "arcs": "sum"}
            h = ig.as_undirected(mode="collapse", combine_edges=combine)
            h.simplify(multiple=True, loops=True, combine_edges=combine)
            self._simple_undirected = h
        return self._simple_undirected

"""Names every doctest may use without importing them: ``np`` and ``from_edges``.

``from_edges([(0, 1), (1, 2)], n=4)`` builds the small graphs of the analytics
doctests (service/analytics/graph.py), so that examples read as the graph they draw.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest

from service.analytics.graph import from_edges


@pytest.fixture(autouse=True)
def _doctest_names(doctest_namespace: dict[str, Any]) -> None:
    doctest_namespace.update(np=np, from_edges=from_edges)

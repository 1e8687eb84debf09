"""The layout use case: the same positions in a child process as in the worker, and a cancellation ends it."""

from __future__ import annotations

from types import SimpleNamespace
from typing import Any

import networkx as nx
import numpy as np
import pytest

from service.analytics.errors import Cancelled
from service.analytics.graph import GraphArrays
from service.usecases import layouts
from service.usecases.layouts import LayoutParams, compute_layout


def _version() -> Any:
    # Zachary's karate club (NetworkX): 34 people, 78 ties.
    edges = np.array(list(nx.karate_club_graph().edges()), dtype=np.int32)
    g = GraphArrays(34, False, edges[:, 0].copy(), edges[:, 1].copy(), np.ones(len(edges)))
    return SimpleNamespace(graph=g)


def test_a_child_process_gives_the_same_picture_as_the_worker(monkeypatch: pytest.MonkeyPatch) -> None:
    seen: list[float] = []
    here = compute_layout(_version(), LayoutParams(random_seed=3), progress=lambda f, m: seen.append(f))
    monkeypatch.setattr(layouts, "IN_PROCESS_MAX_NODES", 10)
    there = compute_layout(_version(), LayoutParams(random_seed=3), progress=lambda f, m: seen.append(f))
    for name in ("x", "y", "community"):
        assert np.array_equal(here.arrays[name], there.arrays[name]), name
    assert here.data == there.data and here.data["method"] == "fruchterman_reingold"
    # Leiden's communities on karate: a partition whose modularity NetworkX agrees is well above 0.3
    # (Zachary's club has modularity about 0.42 at best; from memory).
    parts = [set(np.flatnonzero(there.arrays["community"] == c)) for c in range(there.data["communities"])]
    assert nx.community.modularity(nx.karate_club_graph(), parts) > 0.3
    assert seen[-1] == 1.0


def test_a_cancelled_layout_ends_its_child(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(layouts, "IN_PROCESS_MAX_NODES", 10)

    def progress(fraction: float, message: str | None) -> None:
        if message == "placing people" and fraction > 0.05:
            raise Cancelled()

    monkeypatch.setattr(layouts, "_positions", _slow_positions)
    with pytest.raises(Cancelled):
        compute_layout(_version(), LayoutParams(), progress=progress)


def _slow_positions(*args: Any) -> Any:  # pragma: no cover - runs in the child, ended by the cancellation
    import time

    time.sleep(30)
    raise AssertionError("the child should have been ended")

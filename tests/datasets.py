"""Access to the open datasets in ../shared/datasets (not part of the project).

Tests that use them call :func:`dataset_path`; when the folder is absent the
test is skipped with a reason, unless ``BELLWETHER_REQUIRE_SHARED=1`` (set by
``.ci/run``), in which case it fails.
"""

from __future__ import annotations

import gzip
import os
from functools import lru_cache
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parent.parent
SHARED = ROOT.parent / "shared"
DATASETS = SHARED / "datasets"


def dataset_path(name: str) -> Path:
    """Path of ``../shared/datasets/<name>``, or skip/fail when it is missing."""
    path = DATASETS / name
    if not path.exists():
        reason = f"open dataset {name} not found at {path} (../shared is outside the project)"
        if os.environ.get("BELLWETHER_REQUIRE_SHARED") == "1":
            pytest.fail(reason + "; BELLWETHER_REQUIRE_SHARED=1 makes this a failure")
        pytest.skip(reason)
    return path


@lru_cache(maxsize=8)
def snap_edges(name: str) -> np.ndarray:
    """The ``u v`` integer pairs of ``<name>.edges.gz`` as an (m, 2) int64 array."""
    path = dataset_path(f"{name}.edges.gz")
    with gzip.open(path, "rt") as fh:
        data = np.loadtxt(fh, comments="#", dtype=np.int64)
    return data.reshape(-1, 2)


def snap_graph(name: str, *, directed: bool, drop_self_loops: bool = True):
    """A SNAP dataset as ``(GraphArrays, original_ids)`` with ids relabelled 0..n-1."""
    from service.analytics.graph import GraphArrays

    e = snap_edges(name)
    # Ids first, so that a node whose only edge is a self-loop is kept.
    ids, inv = np.unique(e.ravel(), return_inverse=True)
    inv = inv.reshape(-1, 2).astype(np.int32)
    if drop_self_loops:
        inv = inv[inv[:, 0] != inv[:, 1]]
    src, dst = inv[:, 0], inv[:, 1]
    if not directed:
        lo, hi = np.minimum(src, dst), np.maximum(src, dst)
        key = np.unique(lo.astype(np.int64) * len(ids) + hi)
        src = (key // len(ids)).astype(np.int32)
        dst = (key % len(ids)).astype(np.int32)
    g = GraphArrays(len(ids), directed, src, dst, np.ones(len(src)))
    return g, ids

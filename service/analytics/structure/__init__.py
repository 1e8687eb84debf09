"""The shape of a network: node scores (centrality, paths), communities, the
ingest summary and the graph profile.

Public names of this family; private modules (leading underscore) hold
the steps and the compiled kernels.
"""

from __future__ import annotations

from .centrality import (
    constraint,
    coreness,
    DEFAULT_MEASURES,
    default_measures,
    degree,
    eigenvector_centrality,
    hits,
    local_clustering,
    MEASURES,
    pagerank,
    ScoreResult,
    scores,
    strength,
)

from .communities import (
    community_summary,
    leiden,
    modularity,
)

from .layout import (
    force_layout,
    FR_MAX_NODES,
)

from .paths import (
    betweenness,
    EXACT_WORK_LIMIT,
    harmonic_closeness,
    rk_sample_size,
)

from .profile import (
    graph_profile,
    log_binned_histogram,
    powerlaw_alpha,
    powerlaw_fit,
    sample_distances,
)

from .summary import (
    graph_summary,
)

__all__ = [
    "MEASURES",
    "DEFAULT_MEASURES",
    "ScoreResult",
    "default_measures",
    "degree",
    "strength",
    "pagerank",
    "eigenvector_centrality",
    "hits",
    "coreness",
    "local_clustering",
    "constraint",
    "scores",
    "leiden",
    "modularity",
    "community_summary",
    "force_layout",
    "FR_MAX_NODES",
    "EXACT_WORK_LIMIT",
    "betweenness",
    "harmonic_closeness",
    "rk_sample_size",
    "graph_profile",
    "powerlaw_fit",
    "powerlaw_alpha",
    "log_binned_histogram",
    "sample_distances",
    "graph_summary",
]

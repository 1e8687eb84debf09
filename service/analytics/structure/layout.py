"""Drawing positions for a network: force-directed layouts by igraph."""

from __future__ import annotations

import random
from typing import Any, Literal

import numpy as np
from numpy.typing import NDArray

from ..errors import ComputationFailed, InvalidParameter
from ..graph import GraphArrays, to_igraph
from .communities import _RNG_LOCK

__all__ = ["force_layout", "FR_MAX_NODES"]

#: Fruchterman-Reingold up to this many people, DrL above (FR's cost grows with n^2 per sweep).
FR_MAX_NODES = 5000


def force_layout(
    g: GraphArrays,
    *,
    method: Literal["auto", "fruchterman_reingold", "drl"] = "auto",
    random_seed: int = 0,
) -> tuple[NDArray[np.float64], NDArray[np.float64], str]:
    """Positions in the unit square for every node, by a force-directed layout.

    Parameters
    ----------
    g : GraphArrays
        Directed graphs are laid out on their undirected view.
    method : {"auto", "fruchterman_reingold", "drl"}
        ``auto``: Fruchterman-Reingold for at most :data:`FR_MAX_NODES` nodes, DrL above.
    random_seed : int
        Equal seeds give equal layouts.

    Returns
    -------
    (x, y, method)
        float64 coordinates scaled into [0, 1] (aspect kept; isolated nodes
        included) and the method used.

    Notes
    -----
    Both layouts start from positions drawn with ``numpy`` from the seed; the
    seed also drives a private ``random.Random`` handed to igraph for the call
    only (as :func:`~service.analytics.structure.communities.leiden` does).

    References
    ----------
    .. [1] T. M. J. Fruchterman, E. M. Reingold (1991). Graph drawing by
       force-directed placement. Software: Practice and Experience 21(11), 1129-1164.
    .. [2] S. Martin, W. M. Brown, R. Klavans, K. W. Boyack (2011). OpenOrd: an
       open-source toolbox for large graph layout. Proc. SPIE 7868 (DrL is its
       predecessor, the distributed recursive layout).

    Examples
    --------
    >>> import numpy as np
    >>> g = GraphArrays(3, False, np.array([0, 1], np.int32), np.array([1, 2], np.int32), np.ones(2))
    >>> x, y, used = force_layout(g)
    >>> used, bool((x >= 0).all() and (x <= 1).all())
    ('fruchterman_reingold', True)
    """
    if method not in ("auto", "fruchterman_reingold", "drl"):
        raise InvalidParameter("method must be auto, fruchterman_reingold or drl", field="method")
    used = method if method != "auto" else ("fruchterman_reingold" if g.n <= FR_MAX_NODES else "drl")
    if g.n == 0:
        empty = np.zeros(0, dtype=np.float64)
        return empty, empty.copy(), used
    ig: Any = to_igraph(g, weights=False)
    if g.directed:
        ig = ig.as_undirected(mode="collapse")
    start = np.random.default_rng(random_seed).random((g.n, 2)).tolist()
    import igraph

    with _RNG_LOCK:
        igraph.set_random_number_generator(random.Random(random_seed))
        try:
            if used == "drl":
                coords = ig.layout_drl(seed=start)
            else:
                coords = ig.layout_fruchterman_reingold(seed=start, niter=500, grid="auto")
        except Exception as exc:
            raise ComputationFailed(f"igraph layout failed: {exc}", measure="layout") from exc
        finally:
            igraph.set_random_number_generator(random)
    xy = np.asarray(coords.coords, dtype=np.float64).reshape(g.n, 2)
    lo = xy.min(axis=0)
    span = float((xy.max(axis=0) - lo).max()) or 1.0
    xy = (xy - lo) / span
    return xy[:, 0].copy(), xy[:, 1].copy(), used

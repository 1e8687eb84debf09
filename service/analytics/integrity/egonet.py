"""Odd neighbourhoods: ego-network features, their power laws and OddBall scores.

Every person's ego network (the person, their contacts and every tie among
them) is summarised by four numbers; on real graphs these follow power laws,
and people far from the fitted laws are worth a look: a near-clique (a ring
of accounts that all know each other) lies above ``E ~ N^alpha``, a near-star
(one referrer with many invitees who do not know each other) below it.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import NamedTuple

import numpy as np
from numpy.typing import NDArray

from . import _kernels as K
from ..errors import EmptyGraph, InvalidParameter
from ..graph import GraphArrays

__all__ = [
    "FIT_METHODS",
    "EgoFeatures",
    "LawFit",
    "OddballResult",
    "OddPerson",
    "RING_SCORES",
    "contact_circles",
    "ego_features",
    "lof_scores",
    "oddball",
    "powerlaw_line",
]

FIT_METHODS = ("huber", "least-squares")
RING_SCORES = ("own", "shared-contacts", "separate-circles")
Progress = Callable[[float, str], None] | None
_LAWS = (("E~N", "neighbours", "edges"), ("W~E", "edges", "weight"), ("lambda~W", "weight", "eigenvalue"))


class EgoFeatures(NamedTuple):
    """Per-node ego-network features (index = node id)."""

    neighbours: NDArray[np.int64]  # N: distinct contacts
    edges: NDArray[np.int64]  # E: ties in the ego network (N + ties among the contacts)
    weight: NDArray[np.float64]  # W: total weight of those ties
    eigenvalue: NDArray[np.float64]  # principal eigenvalue of the weighted ego adjacency
    converged: NDArray[np.bool_]  # False where the eigenvalue iteration hit its cap


class LawFit(NamedTuple):
    """``y = constant * x ** exponent`` fitted on log scales over ``points`` egos."""

    law: str
    exponent: float
    constant: float
    points: int
    method: str


class OddPerson(NamedTuple):
    """A person whose neighbourhood departs from the fitted ``E ~ N`` law."""

    node: int
    score: float
    neighbours: int
    edges: int
    expected_edges: float
    weight: float
    eigenvalue: float
    evidence: str


class OddballResult(NamedTuple):
    """Features, fitted laws, per-node scores and the two ranked lists."""

    features: EgoFeatures
    fits: tuple[LawFit, ...]
    law_scores: dict[str, NDArray[np.float64]]  # out-line score per law, 0 for trivial egos
    lof: NDArray[np.float64] | None
    score: NDArray[np.float64]  # E~N out-line score normalised (+ LOF if asked); see ring_score
    side: NDArray[np.int8]  # +1 above the E~N line (near-clique), -1 below (near-star), 0 neither
    near_cliques: tuple[OddPerson, ...]
    near_stars: tuple[OddPerson, ...]


def _simple_csr(
    g: GraphArrays,
) -> tuple[NDArray[np.int64], NDArray[np.int64], NDArray[np.float64]]:
    """Symmetric CSR of the simple undirected graph under ``g``, columns sorted.

    Self-loops are dropped; parallel edges and the two directions of a
    directed pair become one tie whose weight is their sum.
    """
    n = g.n
    keep = g.src != g.dst
    a = g.src[keep].astype(np.int64)
    b = g.dst[keep].astype(np.int64)
    lo, hi = np.minimum(a, b), np.maximum(a, b)
    key = lo * n + hi
    w = g.weight[keep].astype(np.float64)
    if key.size > 1 and not bool(np.all(key[1:] > key[:-1])):
        # Uploads usually arrive sorted and merged; otherwise sort and sum repeats.
        key, inv = np.unique(key, return_inverse=True)
        w = np.bincount(inv.ravel(), weights=w, minlength=key.shape[0])
    indptr, indices, data = K.symmetric_csr(n, key // max(n, 1), key % max(n, 1), w)
    return indptr, indices, data


def _forward(
    n: int, indptr: NDArray[np.int64], indices: NDArray[np.int64], data: NDArray[np.float64],
) -> tuple[NDArray[np.int64], NDArray[np.int64], NDArray[np.float64]]:
    """Each tie once, from the lower to the higher person of a degree order (columns sorted)."""
    deg = np.diff(indptr)
    rows = np.repeat(np.arange(n), deg)
    rank = np.empty(n, np.int64)
    rank[np.lexsort((np.arange(n), deg))] = np.arange(n)
    fwd = rank[rows] < rank[indices]
    out_ptr = np.zeros(n + 1, np.int64)
    np.cumsum(np.bincount(rows[fwd], minlength=n), out=out_ptr[1:])
    return out_ptr, indices[fwd], data[fwd]


def ego_features(
    g: GraphArrays, *, eigenvalues: bool = True, dense_limit: int = 100, max_iter: int = 1000,
    rtol: float = 1e-14,
) -> EgoFeatures:
    """Ego-network features of every node: ``N``, ``E``, ``W`` and ``lambda_w`` [1]_.

    Parameters
    ----------
    g : GraphArrays
        Any graph; it is read as simple and undirected (see Notes).
    eigenvalues : bool, keyword-only
        Compute ``lambda_w`` (the costliest feature); zeros otherwise.
    dense_limit : int, keyword-only
        Egos of at most this many people fall back to an exact dense
        eigensolver when 200 power-iteration steps have not settled.
    max_iter, rtol : keyword-only
        Cap and relative tolerance of the power iteration on larger egos.

    Returns
    -------
    EgoFeatures
        ``N_i`` contacts, ``E_i = N_i + triangles at i`` ties, ``W_i`` their
        total weight, ``lambda_w,i`` and whether its iteration converged.

    Raises
    ------
    InvalidParameter
        When ``max_iter < 1`` or ``rtol`` is not in (0, 1).

    Notes
    -----
    A directed graph is read as undirected: ``u -> v`` and ``v -> u`` are one
    tie whose weight is the sum of both; self-loops are dropped and parallel
    edges merged the same way. Triangles come from the forward algorithm
    over a degree order in O(m^1.5) [2]_. ``lambda_w`` is the spectral radius
    of the weighted ego adjacency (which equals its principal eigenvalue, the
    matrix being non-negative): in closed form ``sqrt(sum w^2)`` for a star
    ego, otherwise by power iteration on the ego's ties (``||A x|| / ||x||``,
    which also settles on bipartite egos), so a hub's ego costs O(E_i) per
    step and no hub is left out. Egos of at most ``dense_limit`` people that
    have not settled after 200 steps are solved exactly by LAPACK; a larger
    ego whose iteration hits ``max_iter`` keeps its last estimate (a lower
    bound) and is flagged in ``converged``.

    References
    ----------
    .. [1] L. Akoglu, M. McGlohon, C. Faloutsos (2010). OddBall: spotting
       anomalies in weighted graphs. PAKDD 2010, LNCS 6119, 410-421.
    .. [2] T. Schank, D. Wagner (2005). Finding, counting and listing all
       triangles in large graphs, an experimental study. WEA 2005.

    Examples
    --------
    >>> g = from_edges([(0, 1), (0, 2), (0, 3), (1, 2)])
    >>> f = ego_features(g)
    >>> f.neighbours.tolist(), f.edges.tolist()
    ([3, 2, 2, 1], [4, 3, 3, 1])
    >>> round(float(f.eigenvalue[3]), 6)
    1.0
    """
    if max_iter < 1:
        raise InvalidParameter(field="max_iter", value=max_iter, minimum=1)
    if not 0.0 < rtol < 1.0:
        raise InvalidParameter(field="rtol", value=rtol, allowed="between 0 and 1")
    n = g.n
    indptr, indices, data = _simple_csr(g)
    deg = np.diff(indptr)
    rows = np.repeat(np.arange(n), deg)
    strength = np.bincount(rows, weights=data, minlength=n)
    tri, opposite = K.ego_triangles(n, *_forward(n, indptr, indices, data))
    edges = deg + tri
    weight = strength + opposite
    if eigenvalues and n:
        lam, ok = K.ego_eigenvalues(n, indptr, indices, data, max(int(edges.max()), 1),
                                     dense_limit, max_iter, rtol)
    else:
        lam, ok = np.zeros(n), np.ones(n, np.bool_)
    return EgoFeatures(deg.astype(np.int64), edges.astype(np.int64), weight, lam, ok)


def powerlaw_line(
    x: NDArray[np.float64], y: NDArray[np.float64], *, method: str = "huber", law: str = "y~x"
) -> LawFit:
    """Fit ``y = C x^theta`` by a line on ``(log x, log y)`` over positive pairs.

    ``"least-squares"`` is the paper's fit [1]_; ``"huber"`` (the default)
    downweights residuals beyond 1.345 robust standard deviations by
    iteratively reweighted least squares [2]_, so a few planted anomalies do
    not tilt the line they are measured against.

    Raises
    ------
    InvalidParameter
        For an unknown method, or fewer than 3 positive pairs.

    References
    ----------
    .. [1] L. Akoglu, M. McGlohon, C. Faloutsos (2010). OddBall. PAKDD 2010.
    .. [2] P. J. Huber (1964). Robust estimation of a location parameter.
       Annals of Mathematical Statistics 35(1), 73-101.

    Examples
    --------
    >>> x = np.array([1.0, 2.0, 4.0, 8.0])
    >>> fit = powerlaw_line(x, 3 * x**1.5)
    >>> round(fit.exponent, 6), round(fit.constant, 6)
    (1.5, 3.0)
    """
    if method not in FIT_METHODS:
        raise InvalidParameter(field="method", value=method, allowed=list(FIT_METHODS))
    ok = (x > 0) & (y > 0)
    if int(ok.sum()) < 3:
        raise InvalidParameter("too few points to fit a law", field=law, points=int(ok.sum()), minimum=3)
    lx, ly = np.log(x[ok]), np.log(y[ok])
    design = np.column_stack((np.ones_like(lx), lx))
    w = np.ones_like(lx)
    coef = np.zeros(2)
    for _ in range(50 if method == "huber" else 1):
        sw = np.sqrt(w)
        new = np.linalg.lstsq(design * sw[:, None], ly * sw, rcond=None)[0]
        if method == "least-squares" or np.allclose(new, coef, rtol=0, atol=1e-10):
            coef = new
            break
        coef = new
        r = ly - design @ coef
        scale = 1.4826 * float(np.median(np.abs(r - np.median(r))))
        if scale <= 0:
            break
        a = np.abs(r) / (1.345 * scale)
        w = np.where(a <= 1.0, 1.0, 1.0 / np.maximum(a, 1e-300))
    return LawFit(law, float(coef[1]), float(np.exp(coef[0])), int(ok.sum()), method)


def _outline(x: NDArray[np.float64], y: NDArray[np.float64], fit: LawFit) -> NDArray[np.float64]:
    """OddBall's out-line score: (max/min of y and C x^theta) * log(|y - C x^theta| + 1)."""
    expected = fit.constant * np.power(x, fit.exponent)
    hi, lo = np.maximum(y, expected), np.minimum(y, expected)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(lo > 0, hi / lo, 0.0)
    return np.asarray(ratio * np.log(np.abs(y - expected) + 1.0), np.float64)


def lof_scores(points: NDArray[np.float64], *, k: int = 20) -> NDArray[np.float64]:
    """Local outlier factor of each row of ``points`` with ``k`` neighbours [1]_.

    About 1 inside a cluster, larger for isolated points. Neighbours come from
    a k-d tree (scipy); a tie at distance zero counts as 1e-10 so repeated
    points (common: many egos share the same small ``N`` and ``E``) stay finite.

    Raises
    ------
    InvalidParameter
        When ``k < 1`` or there are not more than ``k`` points.

    References
    ----------
    .. [1] M. M. Breunig, H.-P. Kriegel, R. T. Ng, J. Sander (2000). LOF:
       identifying density-based local outliers. SIGMOD 2000, 93-104.

    Examples
    --------
    >>> pts = np.array([[0.0, 0.0], [0.0, 1.0], [1.0, 0.0], [1.0, 1.0], [9.0, 9.0]])
    >>> s = lof_scores(pts, k=2)
    >>> int(np.argmax(s)), bool(s[0] < 1.5)
    (4, True)
    """
    from scipy.spatial import cKDTree

    n = points.shape[0]
    if k < 1 or n <= k:
        raise InvalidParameter(field="k", value=k, points=n, allowed="1 <= k < number of points")
    dist, idx = cKDTree(points).query(points, k=k + 1)
    dist, idx = dist[:, 1:], idx[:, 1:]
    kdist = dist[:, -1]
    reach = np.maximum(dist, kdist[idx])
    lrd = 1.0 / (reach.mean(axis=1) + 1e-10)
    return np.asarray(lrd[idx].mean(axis=1) / lrd, np.float64)


def _shared_contact_mean(g: GraphArrays, values: NDArray[np.float64]) -> NDArray[np.float64]:
    """Mean of ``values`` over each person's contacts, each weighted by the contacts both share.

    The weight of the tie ``i - j`` is its number of triangles, so the mean
    leans on the people inside the same tight group as ``i``; a person with
    no triangle gets 0. ``values`` of shape ``(n,)`` or ``(n, c)``: each
    column is averaged in the same pass, and the answer has the same shape.
    """
    indptr, indices, data = _simple_csr(g)
    out_ptr, out_idx, _ = _forward(g.n, indptr, indices, data)
    cols = np.asarray(values, np.float64).reshape(g.n, -1)
    mass, total = K.tie_triangle_mean(g.n, out_ptr, out_idx, np.ascontiguousarray(cols))
    with np.errstate(divide="ignore", invalid="ignore"):
        mean = np.where(total[:, None] > 0, mass / total[:, None], 0.0)
    return np.asarray(mean.reshape(np.shape(values)), np.float64)


def contact_circles(g: GraphArrays) -> NDArray[np.int64]:
    """Number of separate circles among each person's contacts [1]_.

    A circle is a connected component of the person's contact graph: their
    contacts and the ties among them, the person left out. Two contacts are
    in one circle when a chain of ties among the person's contacts joins
    them. A person with no contacts has 0 circles. The graph is read as
    simple and undirected (see :func:`ego_features`).

    Notes
    -----
    This is the structural diversity of Ugander, Backstrom, Marlow and
    Kleinberg [1]_ (there, the number of components among the contacts who
    have joined). Computed by union-find over each person's contacts, one
    merge per triangle through them, in O(m^1.5) like the triangle count.

    References
    ----------
    .. [1] J. Ugander, L. Backstrom, C. Marlow, J. Kleinberg (2012). Structural
       diversity in social contagion. PNAS 109(16), 5962-5966.

    Examples
    --------
    >>> g = from_edges([(0, 1), (0, 2), (1, 2), (0, 3), (3, 4)])
    >>> contact_circles(g).tolist()
    [2, 1, 1, 2, 1]
    """
    indptr, indices, data = _simple_csr(g)
    out_ptr, out_idx, _ = _forward(g.n, indptr, indices, data)
    return np.asarray(K.contact_components(g.n, indptr, indices, out_ptr, out_idx), np.int64)


def _evidence(n: int, e: int, expected: float) -> str:
    possible = n * (n - 1) // 2
    among = e - n
    expect_among = max(expected - n, 0.0)
    pct = 100 * among / possible if possible else 0.0
    pct_text = "under 1%" if 0 < pct < 1 else f"{pct:.0f}%"
    share = f" ({pct_text} of the {possible:,} possible)" if possible else ""
    return (f"{n:,} contacts with {among:,} {'tie' if among == 1 else 'ties'} among them{share}; about "
            f"{expect_among:,.0f} expected for that many contacts")


def oddball(
    g: GraphArrays,
    *,
    method: str = "huber",
    min_neighbours: int = 2,
    min_egos: int = 10,
    lof: bool = False,
    lof_k: int = 20,
    top: int = 50,
    ring_score: str = "own",
    features: EgoFeatures | None = None,
    progress: Progress = None,
) -> OddballResult:
    """Score every person by their distance from the graph's ego-network laws [1]_.

    Parameters
    ----------
    g : GraphArrays
        The person graph (read as simple and undirected, see :func:`ego_features`).
    method : {"huber", "least-squares"}, keyword-only
        How the lines are fitted on log scales (see :func:`powerlaw_line`).
    min_neighbours : int, keyword-only
        Egos with fewer contacts are trivial (one contact always means
        ``E = 1``): left out of the fits and scored 0.
    min_egos : int, keyword-only
        Fewest non-trivial egos needed to fit a law.
    lof : bool, keyword-only
        Add the normalised local outlier factor of ``(log N, log E)`` to the
        normalised out-line score, as the paper combines them. LOF is taken
        over the distinct points (equal features share one score).
    top : int, keyword-only
        Length of each ranked list.
    ring_score : {"own", "shared-contacts", "separate-circles"}, keyword-only
        How people above the line are scored: ``"own"`` (the default) by
        their own score as above; ``"shared-contacts"`` by how many times
        denser than the law their contacts' ego networks are, each contact
        weighted by the number of contacts the two share (see Notes), so a
        whole ring rises together; ``"separate-circles"`` by that, times the
        share of those close contacts who also have a circle of contacts
        apart from the group (see Notes), so a group stitched together from
        people who otherwise have nothing in common outranks a group that
        lives inside its surroundings. People below the line keep their own
        score in every case (with ``lof=True`` LOF then counts only for them).
    features : EgoFeatures, optional
        Precomputed features of ``g`` (skips :func:`ego_features`).
    progress : callable(fraction, message), optional
        Called between stages; it may raise ``Cancelled`` to stop.

    Returns
    -------
    OddballResult
        Fits of ``E ~ N^alpha``, ``W ~ E^beta`` and ``lambda_w ~ W^gamma``;
        the out-line score of each law; the combined ``E ~ N`` score; and the
        top near-cliques (above the line) and near-stars (below) with evidence.

    Raises
    ------
    EmptyGraph
        When ``g`` has no ties.
    InvalidParameter
        When fewer than ``min_egos`` egos have ``min_neighbours`` contacts,
        or an option is out of range.

    Notes
    -----
    Out-line score of a point ``(x, y)`` against the fit ``C x^theta``:
    ``max(y, Cx^theta) / min(y, Cx^theta) * log(|y - Cx^theta| + 1)`` [1]_.
    With ``lof=True`` the normalised local outlier factor [2]_ of
    ``(log N, log E)`` is added, as the paper suggests; on planted rings it
    ranks worse (see DEVELOPERS.md), so it is off by default.

    ``ring_score="shared-contacts"`` scores a person ``i`` above the line by
    ``r_i = sum_j t_ij d_j / sum_j t_ij`` over their contacts ``j``, where
    ``d_j = log(E_j / C N_j^alpha)`` is the contact's distance above the
    fitted line on the log scales of [1]_ (0 below it) and ``t_ij`` the
    number of triangles on the tie ``i - j`` (the tie's embeddedness [3]_);
    ``r`` is divided by its maximum. A planted ring is an ordinary account
    plus a dense block of ring mates: the triangles sit on the ring ties, so
    ``r_i`` averages over ring mates who all lie far above the line, while a
    small tight circle around a busy account averages in that account's
    ordinary neighbourhood. The log distance, unlike the out-line score,
    does not grow with the size of the ego network, so large but merely
    busy neighbourhoods no longer outrank a ring. This is a
    triangle-weighted neighbourhood average of the paper's residual, not a
    score of [1]_; the plain out-line score stays in ``law_scores["E~N"]``.
    A real closed group (the authors of one paper) rises the same way: it
    is a near-clique too, and on a co-authorship graph it can outrank a
    planted ring (see DEVELOPERS.md).

    ``ring_score="separate-circles"`` multiplies that ``r_i`` by
    ``s_i = sum_j t_ij a_j / sum_j t_ij``, where ``a_j`` is 1 when ``j``'s
    contacts fall into two or more circles (:func:`contact_circles`, the
    structural diversity of [4]_) and 0 otherwise. A person drawn into a
    ring keeps their own contacts, who know none of the ring: the ring and
    their old contacts are two circles, so in a ring nearly every member has
    ``a_j = 1``. In a group embedded in its surroundings the members' other
    contacts know other members (one circle), or the members have no other
    contacts, so ``s_i`` is small. ``s_i r_i`` is divided by its maximum. A
    closed group of new accounts who know nobody else is therefore not
    raised by this score (``"shared-contacts"`` still raises it).

    A score measures distance from the typical neighbourhood, not fraud: a
    person must review the evidence before acting on anyone.

    References
    ----------
    .. [1] L. Akoglu, M. McGlohon, C. Faloutsos (2010). OddBall: spotting
       anomalies in weighted graphs. PAKDD 2010, LNCS 6119, 410-421.
    .. [2] M. M. Breunig, H.-P. Kriegel, R. T. Ng, J. Sander (2000). LOF:
       identifying density-based local outliers. SIGMOD 2000, 93-104.
    .. [3] D. Easley, J. Kleinberg (2010). Networks, Crowds, and Markets,
       chapter 3 (embeddedness of an edge; chapter from memory). Cambridge
       University Press.
    .. [4] J. Ugander, L. Backstrom, C. Marlow, J. Kleinberg (2012). Structural
       diversity in social contagion. PNAS 109(16), 5962-5966.

    Examples
    --------
    >>> src = np.array([0, 0, 0, 1], np.int32); dst = np.array([1, 2, 3, 2], np.int32)
    >>> g = GraphArrays(4, False, src, dst, np.ones(4))
    >>> r = oddball(g, min_egos=3, min_neighbours=1)
    >>> [f.law for f in r.fits]
    ['E~N', 'W~E', 'lambda~W']
    """
    if min_neighbours < 1:
        raise InvalidParameter(field="min_neighbours", value=min_neighbours, minimum=1)
    if min_egos < 3:
        raise InvalidParameter(field="min_egos", value=min_egos, minimum=3)
    if top < 0:
        raise InvalidParameter(field="top", value=top, minimum=0)
    if ring_score not in RING_SCORES:
        raise InvalidParameter(field="ring_score", value=ring_score, allowed=list(RING_SCORES))
    if g.n == 0 or g.m == 0:
        raise EmptyGraph(nodes=g.n, edges=g.m)
    if progress is not None:
        progress(0.0, "ego networks")
    f = features if features is not None else ego_features(g)
    if progress is not None:
        progress(0.8, "fitting the laws")
    used = f.neighbours >= min_neighbours
    if int(used.sum()) < min_egos:
        raise InvalidParameter(
            "too few non-trivial ego networks to fit a law",
            field="min_egos", egos=int(used.sum()), required=min_egos, min_neighbours=min_neighbours,
        )
    cols = {"neighbours": f.neighbours.astype(np.float64), "edges": f.edges.astype(np.float64),
            "weight": f.weight, "eigenvalue": f.eigenvalue}
    fits: list[LawFit] = []
    law_scores: dict[str, NDArray[np.float64]] = {}
    for law, xname, yname in _LAWS:
        x, y = cols[xname][used], cols[yname][used]
        fit = powerlaw_line(x, y, method=method, law=law)
        fits.append(fit)
        s = np.zeros(g.n)
        s[used] = _outline(x, y, fit)
        law_scores[law] = s
    en = fits[0]
    expected = en.constant * np.power(cols["neighbours"], en.exponent)
    side = np.zeros(g.n, np.int8)
    side[used & (cols["edges"] > expected)] = 1
    side[used & (cols["edges"] < expected)] = -1
    out = law_scores["E~N"]
    peak = float(out.max())
    score = out / peak if peak > 0 else out.copy()
    lof_all: NDArray[np.float64] | None = None
    if lof:
        pts = np.column_stack((np.log(cols["neighbours"][used]), np.log(cols["edges"][used])))
        # Integer features repeat (thousands of egos with N = 2, E = 2); LOF is undefined
        # on repeated points, so each distinct point is scored once and shared.
        uniq, back = np.unique(pts, axis=0, return_inverse=True)
        if uniq.shape[0] < 3:
            raise InvalidParameter("too few distinct ego networks for the local outlier factor",
                                   field="lof", distinct=int(uniq.shape[0]), required=3)
        lof_all = np.zeros(g.n)
        lof_all[used] = lof_scores(uniq, k=min(lof_k, uniq.shape[0] - 1))[back.ravel()]
        score = score + lof_all / float(lof_all.max())
    if ring_score in ("shared-contacts", "separate-circles"):
        with np.errstate(divide="ignore", invalid="ignore"):
            above = np.where(side == 1, np.log(cols["edges"] / expected), 0.0)
        if ring_score == "shared-contacts":
            ring = _shared_contact_mean(g, above)
        else:
            apart = (contact_circles(g) >= 2).astype(np.float64)
            both = _shared_contact_mean(g, np.column_stack((above, apart)))
            ring = both[:, 0] * both[:, 1]
        peak = float(ring[side == 1].max()) if bool((side == 1).any()) else 0.0
        score = np.where(side == 1, ring / peak if peak > 0 else ring, score)

    def ranked(sign: int) -> tuple[OddPerson, ...]:
        nodes = np.flatnonzero(side == sign)
        nodes = nodes[np.argsort(-score[nodes], kind="stable")][:top]
        return tuple(OddPerson(
            int(i), float(score[i]), int(f.neighbours[i]), int(f.edges[i]), float(expected[i]),
            float(f.weight[i]), float(f.eigenvalue[i]),
            _evidence(int(f.neighbours[i]), int(f.edges[i]), float(expected[i])),
        ) for i in nodes)

    if progress is not None:
        progress(1.0, "scored")
    return OddballResult(f, tuple(fits), law_scores, lof_all, score, side, ranked(1), ranked(-1))

"""Past campaigns as diffusion episodes: who could have passed the campaign to whom, and did.

Private to :mod:`service.analytics.learning.probabilities` and :mod:`service.analytics.learning.backtest`.
A campaign is two integer arrays over the version's node indices, ``node`` and
``round`` (round 0 = the seeds contacted first). :func:`gather_pairs` walks
the out-arcs of every adopter once per campaign and keeps only those arcs
(so memory follows the campaigns, not the graph times the campaigns);
:func:`build_episodes` turns them into the Independent Cascade trials the
EM of Saito et al. (2008) needs.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..errors import InvalidParameter, UnknownNode
from ..graph import Arcs, csr

__all__ = ["Campaign", "bucket_rounds"]


class Campaign(NamedTuple):
    """One past campaign: who adopted and in which round.

    Attributes
    ----------
    node : int array, node indices of the adopters (each once).
    round : int array, the round each adopter adopted in; 0 = a seed.
    horizon : the last round that was observed (None: the last adoption's round, so a
        campaign that did not spread past its seeds then shows nothing: give it).
    label : a name for messages (e.g. the campaign's id).
    """

    node: NDArray[np.int64]
    round: NDArray[np.int64]
    horizon: int | None = None
    label: str = ""


def bucket_rounds(times: ArrayLike, seeds: ArrayLike, *, window: float) -> NDArray[np.int64]:
    """Bucket adoption timestamps into diffusion rounds of length ``window``.

    Parameters
    ----------
    times : adoption time of each adopter (any unit, e.g. hours since an epoch).
    seeds : bool per adopter, True for the people the campaign contacted itself.
    window : length of one round, in the unit of ``times`` (> 0).

    Returns
    -------
    numpy.ndarray of int64
        Round per adopter: 0 for seeds, ``ceil((t - t0) / window)`` (at least 1)
        for the others, where ``t0`` is the first seed's time.

    Raises
    ------
    InvalidParameter
        No seed, a missing or non-finite time, ``window <= 0``, or an adopter
        whose time is before the first seed's (timestamps out of order); the
        error names the first offending position.

    Notes
    -----
    A round is the time one person takes to pass the campaign on; the window is
    the caller's statement of that time (Saito et al. 2008 observe rounds
    directly; Goyal et al. 2010 use a time window for the same purpose).

    References
    ----------
    .. [1] K. Saito, R. Nakano, M. Kimura (2008). Prediction of information
       diffusion probabilities for independent cascade model. KES 2008, LNAI 5179.

    Examples
    --------
    >>> bucket_rounds([10.0, 12.5, 13.0, 10.5], [True, False, False, False], window=2.0).tolist()
    [0, 2, 2, 1]
    """
    t = np.asarray(times, dtype=np.float64)
    s = np.asarray(seeds, dtype=bool)
    if not (isinstance(window, (int, float)) and np.isfinite(window) and window > 0):
        raise InvalidParameter(f"window must be a number of time units > 0, got {window!r}",
                               field="window")
    if t.ndim != 1 or s.shape != t.shape:
        raise InvalidParameter("times and seeds need one value per adopter", field="seeds")
    bad = np.flatnonzero(~np.isfinite(t))
    if bad.size:
        raise InvalidParameter(f"adopter at position {int(bad[0])} has no usable timestamp",
                               field="times", position=int(bad[0]))
    if not s.any():
        raise InvalidParameter("the log mentions no seeds: mark who the campaign contacted itself",
                               field="seeds")
    t0 = float(t[s].min())
    early = np.flatnonzero(~s & (t < t0))
    if early.size:
        raise InvalidParameter(
            f"timestamps out of order: adopter at position {int(early[0])} adopted before the "
            "first seed was contacted", field="times", position=int(early[0]))
    rounds = np.maximum(np.ceil((t - t0) / window), 1.0).astype(np.int64)
    rounds[s] = 0
    return rounds


def check_campaigns(n: int, campaigns: object) -> list[Campaign]:
    """Validate ``campaigns``; each problem names the campaign and what is wrong."""
    if isinstance(campaigns, (str, bytes)) or not hasattr(campaigns, "__iter__"):
        raise InvalidParameter("campaigns must be a list of campaigns", field="campaigns")
    out: list[Campaign] = []
    for i, c in enumerate(campaigns):
        if not isinstance(c, Campaign):
            raise InvalidParameter(f"campaign {i} is not a Campaign", field="campaigns", campaign=i)
        name = c.label or f"campaign {i}"
        node = np.asarray(c.node)
        rnd = np.asarray(c.round)
        if node.ndim != 1 or rnd.shape != node.shape or node.dtype.kind not in "iu" \
                or rnd.dtype.kind not in "iu":
            raise InvalidParameter(f"{name}: node and round need one integer each per adopter",
                                   field="campaigns", campaign=i)
        if node.size and (node.min() < 0 or node.max() >= n):
            j = int(np.flatnonzero((node < 0) | (node >= n))[0])
            raise UnknownNode(f"{name}: adopter index {int(node[j])} is not in the graph",
                              field="campaigns", campaign=i, node_index=int(node[j]))
        if node.size and rnd.min() < 0:
            raise InvalidParameter(f"{name}: rounds must be >= 0 (0 = seeds)",
                                   field="campaigns", campaign=i)
        if not (rnd == 0).any():
            raise InvalidParameter(f"{name}: the log mentions no seeds (no adopter in round 0)",
                                   field="campaigns", campaign=i)
        if node.size < 2:
            raise InvalidParameter(
                f"{name} has one adopter: it shows nothing about who passes a campaign on; "
                "leave it out", field="campaigns", campaign=i)
        if np.unique(node).size != node.size:
            raise InvalidParameter(f"{name}: a person adopts at most once; merge the duplicates",
                                   field="campaigns", campaign=i)
        last = int(rnd.max())
        horizon = last if c.horizon is None else int(c.horizon)
        if horizon < last:
            raise InvalidParameter(f"{name}: horizon {horizon} is before its last adoption "
                                   f"(round {last})", field="campaigns", campaign=i)
        out.append(Campaign(node.astype(np.int64), rnd.astype(np.int64), horizon, name))
    if not out:
        raise InvalidParameter("learning needs at least one past campaign; none was given",
                               field="campaigns")
    return out


class Pairs(NamedTuple):
    """Every out-arc of every adopter, once per campaign (u adopted; v maybe)."""

    arc: NDArray[np.int64]
    campaign: NDArray[np.int32]
    ru: NDArray[np.int64]  # round u adopted in
    rv: NDArray[np.int64]  # round v adopted in, -1 when v did not adopt


def gather_pairs(a: Arcs, campaigns: list[Campaign]) -> Pairs:
    """The out-arcs of every campaign's adopters with both ends' rounds."""
    out = csr(a.n, a.src, a.dst, np.zeros(a.src.shape[0]))
    when = np.full(a.n, -1, dtype=np.int64)
    parts: list[tuple[NDArray[np.int64], NDArray[np.int64], NDArray[np.int64], int]] = []
    for i, c in enumerate(campaigns):
        when[c.node] = c.round
        start, stop = out.indptr[c.node], out.indptr[c.node + 1]
        deg = stop - start
        total = int(deg.sum())
        offs = np.repeat(start - np.cumsum(deg) + deg, deg) + np.arange(total)
        pos = out.order[offs]
        ru = np.repeat(c.round, deg)
        rv = when[a.dst[pos]]
        parts.append((pos, ru, rv, i))
        when[c.node] = -1
    if not parts:
        z = np.zeros(0, dtype=np.int64)
        return Pairs(z, np.zeros(0, dtype=np.int32), z, z)
    return Pairs(
        np.concatenate([p[0] for p in parts]).astype(np.int64),
        np.concatenate([np.full(p[0].shape[0], p[3], dtype=np.int32) for p in parts]),
        np.concatenate([p[1] for p in parts]),
        np.concatenate([p[2] for p in parts]),
    )


@dataclass(frozen=True, eq=False)
class Episodes:
    """Independent Cascade trials of a set of campaigns (Saito et al. 2008).

    A trial is an arc (u, v) of a campaign where u adopted in round t, v had
    not adopted by round t, and round t + 1 was observed. It is credited to an
    activation event when v adopted in round t + 1; the event's trials are
    all of v's parents active in round t. Other trials failed.
    """

    n_arcs: int
    n_campaigns: int
    arc: NDArray[np.int64]
    campaign: NDArray[np.int32]
    event: NDArray[np.int64]  # activation event per trial, -1 for a failed trial
    n_events: int
    unexplained: NDArray[np.int64]  # per campaign: adopters after round 0 with no parent

    @property
    def success(self) -> NDArray[np.bool_]:
        return self.event >= 0

    def subset(self, keep_campaigns: NDArray[np.bool_]) -> Episodes:
        """The trials of the campaigns where ``keep_campaigns`` is True."""
        keep = keep_campaigns[self.campaign]
        ev = self.event[keep]
        hit = ev >= 0
        uniq, inv = np.unique(ev[hit], return_inverse=True)
        new_ev = np.full(ev.shape[0], -1, dtype=np.int64)
        new_ev[hit] = inv
        return Episodes(self.n_arcs, self.n_campaigns, self.arc[keep], self.campaign[keep],
                        new_ev, int(uniq.shape[0]),
                        np.where(keep_campaigns, self.unexplained, 0))


def build_episodes(a: Arcs, campaigns: list[Campaign], pairs: Pairs | None = None) -> Episodes:
    """Trials and activation events of ``campaigns`` over the arcs ``a``."""
    p = gather_pairs(a, campaigns) if pairs is None else pairs
    horizon = np.array([c.horizon for c in campaigns], dtype=np.int64)
    trial = ((p.rv < 0) | (p.rv > p.ru)) & (p.ru + 1 <= horizon[p.campaign])
    arc, camp, ru, rv = p.arc[trial], p.campaign[trial], p.ru[trial], p.rv[trial]
    hit = rv == ru + 1
    key = camp[hit].astype(np.int64) * a.n + a.dst[arc[hit]]
    uniq, inv = np.unique(key, return_inverse=True)
    event = np.full(arc.shape[0], -1, dtype=np.int64)
    event[hit] = inv
    unexplained = np.zeros(len(campaigns), dtype=np.int64)
    explained = np.bincount((uniq // a.n).astype(np.int64), minlength=len(campaigns))
    for i, c in enumerate(campaigns):
        unexplained[i] = int((c.round > 0).sum()) - int(explained[i])
    return Episodes(int(a.src.shape[0]), len(campaigns), arc, camp, event,
                    int(uniq.shape[0]), unexplained)


def require_trials(ep: Episodes) -> Episodes:
    """Raise unless some adopter had a connection who could still adopt in an observed round."""
    if ep.arc.size == 0:
        raise InvalidParameter(
            "the campaigns show no chance to pass anything on: no adopter has a connection who "
            "had not adopted yet within the observed rounds; give each campaign's horizon "
            "(the last round that was watched)", field="campaigns")
    return ep


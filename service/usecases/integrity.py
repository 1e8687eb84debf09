"""Referral integrity: odd neighbourhoods and dense groups, flagged with evidence for review.

Two capabilities, each a job kind:

- :func:`find_odd_neighbourhoods` (``odd_neighbourhoods``): every person's
  neighbourhood against the laws the whole graph follows (OddBall, Akoglu et al.
  2010); near-cliques (rings whose members all know each other) and near-stars
  (one referrer with many invitees who do not know each other) listed apart.
- :func:`find_dense_groups` (``dense_groups``): the densest groups by greedy
  peeling (Charikar 2000, weighted against camouflage as in Hooi et al. 2016) in
  the person graph, in person-attribute tables taken from the version's extra node
  columns (device, address...) and, with a sign-up time column, among people who
  joined through the same contacts at the same time (lockstep).

Flags are leads for a person to review, never verdicts; every result says so.
"""

from __future__ import annotations

import re
from collections.abc import Callable
from datetime import datetime, timezone
from typing import TYPE_CHECKING, Any, Literal

import numpy as np
from numpy.typing import NDArray
from pydantic import BaseModel, ConfigDict, Field

from service.analytics.errors import EmptyGraph, InvalidParameter
from service.analytics.graph import GraphArrays

from .outcome import Computed, Progress

if TYPE_CHECKING:
    from .loading import LoadedVersion

__all__ = [
    "CAUTION",
    "OddNeighbourhoodsParams",
    "DenseGroupsParams",
    "MEMBERS_LISTED",
    "find_odd_neighbourhoods",
    "find_dense_groups",
    "precheck_odd_neighbourhoods",
    "precheck_dense_groups",
]

CAUTION = (
    "These flags are leads for a person to review, not verdicts: a family, a team or a club can "
    "look like a ring, and a busy organiser like a star. Review each case, keep the reasons for "
    "what you decide, and take no action against anyone on a flag alone."
)
MEMBERS_LISTED = 100  # members per group in the document; all of them are in the CSV
SHARED_LISTED = 20  # shared values per group in the document
PLOT_POINTS = 3000  # distinct (contacts, ties) points kept for the plot


class OddNeighbourhoodsParams(BaseModel):
    model_config = ConfigDict(extra="forbid")

    top: int = Field(default=25, ge=1, le=1000, description="People listed as near-cliques and as near-stars.")
    min_contacts: int = Field(
        default=2, ge=1, le=1000,
        description="People with fewer contacts are left out of the fit and never flagged.")
    min_people: int = Field(
        default=10, ge=3, le=1_000_000,
        description="Fewest people with at least `min_contacts` contacts needed to fit the laws.")
    fit: Literal["robust", "least_squares"] = Field(
        default="robust", description="Line fit on log scales: robust (Huber) or plain least squares.")
    ring_score: Literal["shared_contacts", "separate_circles", "own"] = Field(
        default="shared_contacts",
        description="Near-cliques ranked by how far above the law their close contacts lie (`shared_contacts`, "
                    "so a whole ring rises together); by that, counting only close contacts who also have "
                    "other contacts who know nobody in the group (`separate_circles`: a ring of people with "
                    "nothing else in common, for graphs full of real tight groups; it does not raise a closed "
                    "group of accounts who know nobody else); or by their own distance (`own`).")
    local_outlier: bool = Field(
        default=False, description="Add the local outlier factor (Breunig et al. 2000) to the distance.")


class DenseGroupsParams(BaseModel):
    model_config = ConfigDict(extra="forbid")

    ties: bool = Field(default=True, description="Look for dense groups in the person graph.")
    attributes: list[str] = Field(
        default_factory=list, max_length=20,
        description="Node attribute columns (uploaded with part=nodes, such as device or address) "
                    "in which to look for groups sharing values.")
    value_separator: str | None = Field(
        default=None, min_length=1, max_length=5,
        description="Splits a cell holding several values (`;` for `d1;d2`).")
    time_column: str | None = Field(
        default=None, min_length=1, max_length=200,
        description="Node attribute column with each person's sign-up time (ISO 8601 or seconds "
                    "since 1970): adds a search for people who joined through the same contacts "
                    "within `window_hours`, and the time span to every group's evidence.")
    window_hours: float = Field(default=24.0, gt=0, le=24 * 366, description="Width of the sign-up window.")
    groups: int = Field(default=3, ge=1, le=50, description="Groups to find in each table.")
    min_size: int = Field(default=3, ge=2, le=100_000, description="Smaller groups are not reported.")
    weighting: Literal["log", "uniform"] = Field(
        default="log",
        description="`log`: ties to popular people and widely shared values count less (resists "
                    "camouflage); `uniform`: every tie counts once.")


# -- odd neighbourhoods -----------------------------------------------------------------

_LAW_WORDS = {
    "E~N": "ties in a neighbourhood against its number of contacts",
    "W~E": "total tie weight against ties in a neighbourhood",
    "lambda~W": "weight concentrated on one tie (principal eigenvalue) against total weight",
}


def _simple_degrees(g: GraphArrays) -> NDArray[np.int64]:
    keep = g.src != g.dst
    a, b = g.src[keep].astype(np.int64), g.dst[keep].astype(np.int64)
    pairs = np.unique(np.minimum(a, b) * max(g.n, 1) + np.maximum(a, b))
    n1 = max(g.n, 1)
    return np.bincount(np.concatenate((pairs // n1, pairs % n1)), minlength=g.n).astype(np.int64)


def _check_enough(g: GraphArrays, params: OddNeighbourhoodsParams) -> None:
    if g.n == 0 or g.m == 0:
        raise EmptyGraph("the graph has no ties, so there are no neighbourhoods to compare",
                         nodes=g.n, edges=g.m)
    k = int((_simple_degrees(g) >= params.min_contacts).sum())
    if k < params.min_people:
        raise InvalidParameter(
            f"only {k:,} people have at least {params.min_contacts} contacts; fitting the neighbourhood "
            f"laws needs at least {params.min_people}. Upload a larger graph, or lower min_people "
            "(at least 3) or min_contacts",
            field="min_people", people=k, required=params.min_people, min_contacts=params.min_contacts)


def precheck_odd_neighbourhoods(
    params: OddNeighbourhoodsParams, load: Callable[[], LoadedVersion], *, edges: int
) -> None:
    """Refuse at job creation a graph too small to fit the laws."""
    if edges <= 5_000_000:
        _check_enough(load().graph, params)


def _law_reading(law: str, exponent: float) -> str:
    if law == "E~N":
        where = ("between a star (1) and a fully connected group (2), as in most real networks"
                 if 1.0 <= exponent <= 2.0 else "outside the usual range of 1 (stars) to 2 (fully connected)")
        return f"Ties grow as contacts to the power {exponent:.2f}: {where}."
    if law == "W~E":
        return f"Total weight grows as ties to the power {exponent:.2f} (1: every tie weighs the same on average)."
    return f"The heaviest part grows as total weight to the power {exponent:.2f} (1: weight held on one tie)."


def _law_points(contacts: NDArray[np.int64], ties: NDArray[np.int64], used: NDArray[np.bool_]) -> dict[str, Any]:
    pts, counts = np.unique(np.column_stack((contacts[used], ties[used])), axis=0, return_counts=True)
    sampled = pts.shape[0] > PLOT_POINTS
    if sampled:
        keep = np.sort(np.random.default_rng(0).choice(pts.shape[0], PLOT_POINTS, replace=False))
        pts, counts = pts[keep], counts[keep]
    return {"contacts": pts[:, 0].tolist(), "ties": pts[:, 1].tolist(), "people": counts.tolist(),
            "sampled": bool(sampled)}


def find_odd_neighbourhoods(
    version: LoadedVersion, params: OddNeighbourhoodsParams, *, progress: Progress
) -> Computed:
    """Near-cliques and near-stars against the graph's own neighbourhood laws."""
    from service.analytics.integrity import oddball

    g = version.graph
    _check_enough(g, params)
    try:
        res = oddball(g, method="huber" if params.fit == "robust" else "least-squares",
                      min_neighbours=params.min_contacts, min_egos=params.min_people,
                      lof=params.local_outlier, top=params.top,
                      ring_score=params.ring_score.replace("_", "-"),
                      progress=progress)
    except InvalidParameter as exc:
        law = exc.data.get("field")
        if law == "lof":
            raise InvalidParameter("too few different neighbourhoods for the local outlier factor; set "
                                   "local_outlier to false", field="local_outlier",
                                   distinct=exc.data.get("distinct")) from None
        if law in _LAW_WORDS:  # a law with too few positive figures (ties of weight 0, say)
            raise InvalidParameter(f"too few people with positive figures to fit {_LAW_WORDS[law]}; give "
                                   "ties positive weights", field="min_people", law=law) from None
        raise
    f = res.features
    labels = version.labels

    def listed(people: tuple[Any, ...]) -> list[dict[str, Any]]:
        out = []
        for rank, p in enumerate(people, 1):
            n = p.neighbours
            out.append({
                "rank": rank, "node_id": version.ids[p.node], "label": labels[p.node], "score": round(p.score, 3),
                "contacts": n, "ties": p.edges, "expected_ties": round(p.expected_edges, 1),
                "ties_among_contacts": p.edges - n, "possible_ties_among_contacts": n * (n - 1) // 2,
                "weight": float(f"{p.weight:.4g}"), "eigenvalue": round(p.eigenvalue, 2), "evidence": p.evidence})
        return out

    used = f.neighbours >= params.min_contacts
    laws = [{"law": fit.law, "meaning": _LAW_WORDS[fit.law], "exponent": round(fit.exponent, 3),
             "constant": float(f"{fit.constant:.4g}"), "people": fit.points,
             "reading": _law_reading(fit.law, fit.exponent)} for fit in res.fits]
    cliques, stars = listed(res.near_cliques), listed(res.near_stars)
    readings = [laws[0]["reading"],
                f"{len(cliques):,} people whose contacts know each other far more than the law expects "
                "(near-cliques, possible rings), and "
                f"{len(stars):,} whose contacts know each other far less (near-stars, possible "
                "invitation farms), listed apart.",
                f"{int(used.sum()):,} of {g.n:,} people have at least {params.min_contacts} contacts and "
                "were compared; the others are never flagged."]
    doc = {"people": g.n, "people_fitted": int(used.sum()), "laws": laws, "near_cliques": cliques,
           "near_stars": stars, "law_points": _law_points(f.neighbours, f.edges, used), "readings": readings,
           "caution": CAUTION}
    arrays: dict[str, NDArray[Any]] = {"score": res.score.astype(np.float64), "side": res.side.astype(np.int8),
              "contacts": f.neighbours.astype(np.int64), "ties": f.edges.astype(np.int64)}
    return Computed(data=doc, arrays=arrays)


# -- dense groups -----------------------------------------------------------------------


def _plural(column: str) -> str:
    words = column.replace("_", " ").strip()
    if words.endswith(("s", "x", "sh", "ch")):
        return words + "es"
    if words.endswith("y") and words[-2:-1] not in tuple("aeiou"):
        return words[:-1] + "ies"
    return words + "s"


def _singular_counts(text: str, columns: list[str]) -> str:
    """"sharing 1 addresses" -> "sharing 1 address": the engine words every count in the plural."""
    for name in columns:
        text = re.sub(rf"\b1 {re.escape(_plural(name))}\b", f"1 {name.replace('_', ' ').strip()}", text)
    return text


def _column(version: LoadedVersion, name: str, field: str) -> list[str | None]:
    extra = version.attrs.extra
    if name not in extra:
        known = ", ".join(sorted(extra)) or "none"
        raise InvalidParameter(
            f"this version has no node column {name!r} (extra node columns: {known}); upload it with "
            "part=nodes, or name one of those", field=field, value=name, known=sorted(extra))
    return extra[name]


def _attribute_table(
    version: LoadedVersion, name: str, separator: str | None
) -> tuple[NDArray[np.int64], NDArray[np.int64], list[str]]:
    """``(person, value code, values)`` of one column, one row per person and value."""
    people: list[int] = []
    texts: list[str] = []
    for i, cell in enumerate(_column(version, name, "attributes")):
        for v in (cell.split(separator) if separator and cell else [cell]):
            if v is not None and v.strip():
                people.append(i)
                texts.append(v.strip())
    values, codes = np.unique(np.array(texts, dtype=object), return_inverse=True) if texts else (
        np.array([], dtype=object), np.zeros(0, np.int64))
    p, c = np.array(people, np.int64), np.asarray(codes, np.int64).ravel()
    if p.size == 0:
        raise InvalidParameter(f"column {name!r} holds no values; fill it in, or leave it out of attributes",
                               field="attributes", value=name)
    pairs = np.unique(p * max(values.size, 1) + c)
    if not (np.bincount(pairs % max(values.size, 1), minlength=values.size) >= 2).any():
        raise InvalidParameter(
            f"no value of column {name!r} is shared by two or more people, so it ties nobody together; "
            "leave it out of attributes (or set value_separator if cells hold several values)",
            field="attributes", value=name, people=int(np.unique(p).size), values=int(values.size))
    return p, c, [str(v) for v in values]


def _parse_time(text: str) -> float:
    try:
        return float(text)
    except ValueError:
        pass
    t = datetime.fromisoformat(text.strip().replace("Z", "+00:00"))
    return (t if t.tzinfo else t.replace(tzinfo=timezone.utc)).timestamp()


def _times(version: LoadedVersion, name: str) -> NDArray[np.float64]:
    out = np.full(version.graph.n, np.nan)
    for i, cell in enumerate(_column(version, name, "time_column")):
        if cell is None or not cell.strip():
            continue
        try:
            out[i] = _parse_time(cell)
        except ValueError:
            raise InvalidParameter(
                f"column {name!r} holds {cell!r} for {version.ids[i]!r}, which is not a time; use ISO 8601 "
                "(2024-03-01T09:30:00Z) or seconds since 1970", field="time_column", value=name,
                node_id=version.ids[i]) from None
    if int(np.isfinite(out).sum()) < 2:
        raise InvalidParameter(f"column {name!r} has fewer than two sign-up times; fill it in or leave "
                               "time_column out", field="time_column", value=name)
    return out


def _plan(version: LoadedVersion, params: DenseGroupsParams) -> tuple[
        list[tuple[str, NDArray[np.int64], NDArray[np.int64], list[str]]], NDArray[np.float64] | None]:
    """Every input checked: the attribute tables and the sign-up times."""
    if not params.ties and not params.attributes and params.time_column is None:
        raise InvalidParameter("nothing to search: set ties to true, name attribute columns, or a time_column",
                               field="ties", value=False)
    g = version.graph
    if (params.ties or params.time_column) and (g.n == 0 or g.m == 0):
        raise EmptyGraph("the graph has no ties; search attribute columns only (ties: false)",
                         nodes=g.n, edges=g.m)
    if len(set(params.attributes)) < len(params.attributes):
        raise InvalidParameter("a column is named twice in attributes", field="attributes")
    tables = [(name, *_attribute_table(version, name, params.value_separator)) for name in params.attributes]
    times = _times(version, params.time_column) if params.time_column is not None else None
    return tables, times


def precheck_dense_groups(params: DenseGroupsParams, load: Callable[[], LoadedVersion], *, edges: int) -> None:
    """Refuse at job creation columns that are missing, empty, share nothing or hold no times."""
    if edges <= 5_000_000:
        _plan(load(), params)


def _lockstep(version: LoadedVersion, times: NDArray[np.float64], params: DenseGroupsParams) -> tuple[Any, ...]:
    """People who joined through the same contacts within the window: each contact is a target."""
    from service.analytics.integrity import lockstep_groups

    g = version.graph
    keep = g.src != g.dst
    a, b = g.src[keep].astype(np.int64), g.dst[keep].astype(np.int64)
    person, target = np.concatenate((a, b)), np.concatenate((b, a))
    timed = np.isfinite(times[person])
    person, target = person[timed], target[timed]
    groups = lockstep_groups(person, target, times[person], n_people=g.n, window=params.window_hours * 3600.0,
                             blocks=params.groups, min_size=params.min_size, created=times)
    return tuple(grp._replace(evidence=grp.evidence.replace(" acted on the same ", " joined through the same ")
                              .replace(" target", " contact")) for grp in groups)


def _tie_share(g: GraphArrays) -> float:
    """Share of all possible ties between two people that the graph has (the share at random)."""
    keep = g.src != g.dst
    lo, hi = np.minimum(g.src[keep], g.dst[keep]).astype(np.int64), np.maximum(g.src[keep], g.dst[keep])
    pairs = np.unique(lo * max(g.n, 1) + hi).size
    return float(pairs / (g.n * (g.n - 1) / 2)) if g.n > 1 else 0.0


def _link_share(person: NDArray[np.int64], value: NDArray[np.int64], values: int) -> float:
    """Share of the possible (person, value) links a table has, among the people it names."""
    people = np.unique(person).size
    links = np.unique(person * max(values, 1) + value).size
    return float(links / (people * values)) if people and values else 0.0


def find_dense_groups(version: LoadedVersion, params: DenseGroupsParams, *, progress: Progress) -> Computed:
    """The densest groups in the person graph, in attribute tables and among people who joined together."""
    from service.analytics.integrity import fraudar, fraudar_bipartite

    tables, times = _plan(version, params)
    evidence_tables = [(_plural(name), p, c) for name, p, c, _ in tables]
    steps = int(params.ties) + len(tables) + int(times is not None)
    found: list[tuple[str, Any, list[str]]] = []
    searched: list[dict[str, Any]] = []
    done = 0

    def step(message: str) -> None:
        progress(done / max(steps, 1), message)

    if params.ties:
        step("dense groups among ties")
        groups = fraudar(version.graph, weighting=params.weighting, blocks=params.groups,
                         min_size=params.min_size, created=times, attributes=evidence_tables or None)
        found += [("ties", grp, []) for grp in groups]
        searched.append({"found_in": "ties", "groups": len(groups), "note": None,
                         "share_at_random": _tie_share(version.graph)})
        done += 1
    for name, p, c, values in tables:
        step(f"people sharing {_plural(name)}")
        groups = fraudar_bipartite(p, c, n_rows=version.graph.n, n_cols=len(values), weighting=params.weighting,
                                   blocks=params.groups, min_size=params.min_size, column_label=_plural(name),
                                   created=times)
        found += [(name, grp, values) for grp in groups]
        searched.append({"found_in": name, "groups": len(groups), "note": None,
                         "share_at_random": _link_share(p, c, len(values))})
        done += 1
    if times is not None:
        step("people who joined together")
        try:
            groups = _lockstep(version, times, params)
            note = None
        except InvalidParameter:
            groups, note = (), "no two people joined through the same contact within the window"
        found += [("sign-up times", grp, []) for grp in groups]
        searched.append({"found_in": "sign-up times", "groups": len(groups), "note": note,
                         "share_at_random": _tie_share(version.graph)})
    for entry in searched:
        if entry["groups"] == 0 and entry["note"] is None:
            entry["note"] = f"no group of at least {params.min_size} people"
    rows: list[dict[str, Any]] = []
    member_index: list[NDArray[np.int64]] = []
    member_group: list[NDArray[np.int32]] = []
    for rank, (where, grp, values) in enumerate(found, 1):
        members = np.asarray(grp.members, np.int64)
        rows.append({
            "rank": rank, "found_in": where, "people": int(members.size), "density": round(float(grp.density), 2),
            "ties": int(grp.ties), "possible": int(grp.possible),
            "members": [version.ids[i] for i in members[:MEMBERS_LISTED]],
            "shared_values": [values[int(t)] for t in np.asarray(grp.targets)[:SHARED_LISTED]] if values else [],
            "evidence": _singular_counts(grp.evidence, params.attributes)})
        member_index.append(members)
        member_group.append(np.full(members.size, rank, np.int32))
    progress(1.0, "done")
    doc = {"groups": rows, "searched": searched,
           "guarantee": ("Each group is at least half as dense as the densest group of its table "
                         "(greedy peeling); ties to very popular people and widely shared values count "
                         "less, so ties that members add to ordinary accounts hardly hide a group."),
           "caution": CAUTION}
    arrays: dict[str, NDArray[Any]] = {"member_index": np.concatenate(member_index) if member_index else np.zeros(0, np.int64),
              "member_group": np.concatenate(member_group) if member_group else np.zeros(0, np.int32)}
    return Computed(data=doc, arrays=arrays)

"""Referral integrity use cases on a version stored in and loaded from a real SQLite database.

The planted structures are the outside truth: a ring of 12 people who all know each other
(signing up within the same hour, sharing an address and two devices) and a star of 30
invitees who do not know each other, added to a preferential-attachment graph (NetworkX).
Neighbourhood figures are checked against NetworkX's ``ego_graph``, the plain fit against
``numpy.polyfit`` on the log scales.
"""

from __future__ import annotations

import json
import re
from html import unescape
from pathlib import Path
from typing import Any

import networkx as nx
import numpy as np
import pytest

from service.analytics.errors import EmptyGraph, InvalidParameter
from service.analytics.graph import GraphArrays, NodeAttributes
from service.usecases import integrity_reports as reports
from service.usecases.integrity import (
    CAUTION,
    DenseGroupsParams,
    find_dense_groups,
    find_odd_neighbourhoods,
    OddNeighbourhoodsParams,
    precheck_dense_groups,
    precheck_odd_neighbourhoods,
)
from service.usecases.integrity_results import DenseGroupsResult, OddNeighbourhoodsResult
from service.usecases.loading import clear_cache, load_version, LoadedVersion, version_arrays
from storage.db import make_engine, make_sessionmaker
from storage.repo import graphs as graph_repo

RING = list(range(100, 112))  # 12 people, 66 ties among them
STAR_CENTRE, STAR = 7, list(range(300, 330))


def _noop(fraction: float, message: str | None = None) -> None:
    return None


def planted() -> nx.Graph:
    G = nx.barabasi_albert_graph(300, 3, seed=4)
    G.add_edges_from((a, b) for i, a in enumerate(RING) for b in RING[i + 1:])
    G.add_edges_from((STAR_CENTRE, s) for s in STAR)
    return G


def attributes(n: int) -> NodeAttributes:
    attrs = NodeAttributes.empty(n)
    attrs.extra["address"] = ["1 Mill Lane" if i in RING else f"{i} High Street" for i in range(n)]
    attrs.extra["device"] = ["d-1;d-2" if i in RING[:6] else (f"d-{i + 10}" if i % 3 else None) for i in range(n)]
    attrs.extra["signed_up"] = [f"2024-05-01T10:{i - 100:02d}:00Z" if i in RING
                                else str(1.6e9 + 86400.0 * 5 * i) for i in range(n)]
    attrs.extra["office"] = [f"o{i}" for i in range(n)]  # nobody shares one
    attrs.extra["joined"] = ["yesterday" if i == 3 else "2024-01-01" for i in range(n)]
    return attrs


@pytest.fixture
def stored(sqlite_url: str) -> Any:
    """The planted graph written as a version to SQLite and loaded back through the loader."""
    G = planted()
    n = G.number_of_nodes()
    e = list(G.edges())
    g = GraphArrays(n, False, np.array([a for a, _ in e], np.int32), np.array([b for _, b in e], np.int32),
                    np.ones(len(e)))
    arrays, extra = version_arrays(g, [f"m{i}" for i in range(n)], attributes(n))
    maker = make_sessionmaker(make_engine(sqlite_url))
    with maker() as db:
        graph = graph_repo.add_graph(db, tenant_id="default", name="planted", directed=False)
        graph_repo.add_version(db, graph, based_on=0, arrays=arrays, manifest_extra=extra, summary={},
                               origin={"test": True}, nodes=n, edges=len(e))
        db.commit()
        clear_cache()
        version = load_version(db, graph_repo.get_version(db, graph))
    yield G, version
    clear_cache()


def ids(nodes: list[int]) -> set[str]:
    return {f"m{i}" for i in nodes}


def full_document(data: dict[str, Any], kind: str, params: Any) -> dict[str, Any]:
    return {**data, "kind": kind, "params": params.model_dump(), "job_id": "j", "graph_id": "g", "version": 1,
            "random_seed": 0, "created_at": "2026-01-01T00:00:00Z", "arrays": {}}


def test_odd_neighbourhoods_find_the_ring_and_the_star(stored: Any) -> None:
    G, v = stored
    params = OddNeighbourhoodsParams(top=12)
    out = find_odd_neighbourhoods(v, params, progress=_noop)
    d = out.data
    OddNeighbourhoodsResult.model_validate(full_document(d, "odd_neighbourhoods", params))
    top = {p["node_id"] for p in d["near_cliques"]}
    # Precision at the number planted (12): the ring members are the near-cliques.
    assert len(top & ids(RING)) >= 11, sorted(top)
    assert d["near_stars"][0]["node_id"] == "m7"
    assert [x["law"] for x in d["laws"]] == ["E~N", "W~E", "lambda~W"]
    assert d["caution"] == CAUTION and "not verdicts" in CAUTION
    # Each listed person's figures: NetworkX ego_graph (radius 1) sizes and edge counts.
    for p in d["near_cliques"][:5] + d["near_stars"][:5]:
        node = int(p["node_id"][1:])
        ego = nx.ego_graph(G, node)
        assert p["contacts"] == ego.number_of_nodes() - 1
        assert p["ties"] == ego.number_of_edges()
        assert p["ties_among_contacts"] == ego.number_of_edges() - p["contacts"]
        assert str(p["ties_among_contacts"]) in p["evidence"]
    # The per-person arrays agree with NetworkX too.
    deg = np.array([G.degree(i) for i in range(G.number_of_nodes())])
    np.testing.assert_array_equal(out.arrays["contacts"], deg)
    pts = d["law_points"]
    assert sum(pts["people"]) == d["people_fitted"] == int((deg >= 2).sum())


def test_separate_circles_find_the_ring_of_people_with_contacts_of_their_own(stored: Any) -> None:
    # Source: planted structure. The ring's 12 members were ordinary members of the
    # preferential-attachment graph, so each keeps contacts who know nobody in the ring
    # (NetworkX: two or more components among the member's neighbours; 10 of the 12 here,
    # the other two have contacts who also know ring members).
    G, v = stored
    assert sum(nx.number_connected_components(G.subgraph(G[i])) >= 2 for i in RING) == 10
    params = OddNeighbourhoodsParams(top=12, ring_score="separate_circles")
    out = find_odd_neighbourhoods(v, params, progress=_noop)
    assert len({p["node_id"] for p in out.data["near_cliques"]} & ids(RING)) >= 11
    shared = find_odd_neighbourhoods(v, OddNeighbourhoodsParams(top=12), progress=_noop).data
    assert out.data["near_stars"] == shared["near_stars"]


def test_plain_fit_is_numpy_polyfit_on_the_log_scales(stored: Any) -> None:
    G, v = stored
    d = find_odd_neighbourhoods(v, OddNeighbourhoodsParams(fit="least_squares", ring_score="own"),
                                progress=_noop).data
    nodes = [i for i in G if G.degree(i) >= 2]
    n = np.array([G.degree(i) for i in nodes], float)
    e = np.array([nx.ego_graph(G, i).number_of_edges() for i in nodes], float)
    slope, intercept = np.polyfit(np.log(n), np.log(e), 1)  # numpy's least-squares line
    law = d["laws"][0]
    assert law["exponent"] == pytest.approx(slope, abs=1e-3)
    assert law["constant"] == pytest.approx(np.exp(intercept), rel=1e-3)
    assert f"{slope:.2f}" in law["reading"]


def test_plot_marks_the_flagged_people(stored: Any) -> None:
    _, v = stored
    d = find_odd_neighbourhoods(v, OddNeighbourhoodsParams(top=5), progress=_noop).data
    svg = reports.neighbourhood_law(d)
    drawn = json.loads(unescape(re.search(r'<desc id="chart-data">(.*?)</desc>', svg, re.S).group(1)))  # type: ignore[union-attr]
    series = {x["name"]: x for x in drawn["series"]}
    assert series["near-cliques"]["node_ids"] == [p["node_id"] for p in d["near_cliques"]]
    assert series["near-cliques"]["x"] == [p["contacts"] for p in d["near_cliques"]]
    assert series["near-stars"]["node_ids"][0] == "m7"
    assert series["fitted law"]["exponent"] == d["laws"][0]["exponent"]
    assert sum(series["people compared"]["people"]) == d["people_fitted"]
    assert "not verdicts" in svg
    header, rows = reports.odd_neighbourhoods_table(v, d, {})
    table = list(rows)
    assert len(table) == 10 and table[0][0] == "near-clique" and table[-1][0] == "near-star"
    assert len(table[0]) == len(header)


def test_dense_groups_in_ties_attributes_and_sign_up_times(stored: Any) -> None:
    G, v = stored
    params = DenseGroupsParams(attributes=["address", "device"], value_separator=";", time_column="signed_up",
                               window_hours=2, groups=1)
    out = find_dense_groups(v, params, progress=_noop)
    d = out.data
    DenseGroupsResult.model_validate(full_document(d, "dense_groups", params))
    by = {g["found_in"]: g for g in d["groups"]}
    ring = by["ties"]
    assert set(ring["members"]) == ids(RING)
    assert ring["ties"] == G.subgraph(RING).number_of_edges() == 66  # NetworkX's count
    assert ring["evidence"].startswith("12 accounts, 66 of the 66 possible ties among them, all created within 1 day")
    assert "sharing 1 address and 1 device" not in ring["evidence"]  # two devices are shared
    assert "sharing 1 address and 2 devices" in ring["evidence"]
    assert set(by["address"]["members"]) == ids(RING) and by["address"]["shared_values"] == ["1 Mill Lane"]
    assert set(by["device"]["members"]) == ids(RING[:6]) and by["device"]["shared_values"] == ["d-1", "d-2"]
    assert ids(RING) <= set(by["sign-up times"]["members"])
    assert "joined through the same" in by["sign-up times"]["evidence"]
    assert d["caution"] == CAUTION and "half as dense" in d["guarantee"]
    header, rows = reports.dense_groups_table(v, d, out.arrays)
    table = list(rows)
    assert len(table) == sum(g["people"] for g in d["groups"]) and len(table[0]) == len(header)


def test_group_plot_draws_each_group_against_its_whole_table(stored: Any) -> None:
    G, v = stored
    params = DenseGroupsParams(attributes=["address", "device"], value_separator=";", time_column="signed_up",
                               window_hours=2, groups=2)
    d = find_dense_groups(v, params, progress=_noop).data
    share = {t["found_in"]: t["share_at_random"] for t in d["searched"]}
    assert share["ties"] == pytest.approx(nx.density(G))  # NetworkX's density of the same graph
    assert share["sign-up times"] == share["ties"]
    # Devices by hand from attributes(): the first 6 of the ring hold d-1 and d-2; 2 in 3 of the others
    # one device of their own; links over (people with a device) x (devices).
    others = [i for i in range(G.number_of_nodes()) if i not in RING[:6] and i % 3]
    people, values = 6 + len(others), 2 + len(others)
    assert share["device"] == pytest.approx((12 + len(others)) / (people * values))
    svg = reports.group_density(d)
    drawn = json.loads(unescape(re.search(r'<desc id="chart-data">(.*?)</desc>', svg, re.S).group(1)))  # type: ignore[union-attr]
    assert [x["group"] for x in drawn["series"]] == [g["rank"] for g in d["groups"]]
    ring = drawn["series"][0]
    assert ring["found_in"] == "ties" and ring["share_present"] == 1.0 and ring["evidence_kind"] == "tied to each other"
    assert {x["evidence_kind"] for x in drawn["series"]} == {"tied to each other", "sharing address", "sharing device",
                                                             "joined together"}
    assert all(x["share_at_random"] == share[x["found_in"]] for x in drawn["series"])
    assert "group 1: 12 people" in svg and "66 of 66 possible ties" in svg and "not verdicts" in svg
    many = {**d, "groups": [{**d["groups"][0], "rank": r} for r in range(1, 21)]}
    assert "the first 15; 5 more in the CSV" in reports.group_density(many)
    with pytest.raises(InvalidParameter, match="no groups to plot"):
        reports.group_density({**d, "groups": []})


def test_bad_input_names_what_is_wrong(stored: Any) -> None:
    _, v = stored
    cases: list[tuple[DenseGroupsParams, str, str]] = [
        (DenseGroupsParams(attributes=["phone"]), "attributes", "no node column 'phone'"),
        (DenseGroupsParams(attributes=["office"]), "attributes", "shared by two or more people"),
        (DenseGroupsParams(time_column="joined"), "time_column", "'yesterday' for 'm3'"),
        (DenseGroupsParams(ties=False), "ties", "nothing to search"),
    ]
    for params, field, words in cases:
        with pytest.raises(InvalidParameter) as err:
            precheck_dense_groups(params, lambda: v, edges=v.graph.m)
        assert err.value.data["field"] == field and words in err.value.reason, err.value.reason
    with pytest.raises(InvalidParameter) as err:
        precheck_dense_groups(DenseGroupsParams(attributes=["phone"]), lambda: v, edges=v.graph.m)
    assert err.value.data["known"] == ["address", "device", "joined", "office", "signed_up"]


def tiny(edges: list[tuple[int, int]], n: int) -> LoadedVersion:
    g = GraphArrays(n, False, np.array([a for a, _ in edges], np.int32), np.array([b for _, b in edges], np.int32),
                    np.ones(len(edges)))
    return LoadedVersion("t", 1, g, [str(i) for i in range(n)], NodeAttributes.empty(n))


def test_graphs_too_small_to_fit_a_law_are_refused() -> None:
    star = tiny([(0, i) for i in range(1, 9)] + [(1, 2)], 9)  # 3 people with 2 or more contacts: 0, 1 and 2
    with pytest.raises(InvalidParameter) as err:
        precheck_odd_neighbourhoods(OddNeighbourhoodsParams(), lambda: star, edges=9)
    assert err.value.data["field"] == "min_people" and err.value.data["people"] == 3
    assert "lower min_people" in err.value.reason
    with pytest.raises(EmptyGraph):
        find_odd_neighbourhoods(tiny([], 3), OddNeighbourhoodsParams(), progress=_noop)
    ring = tiny([(i, (i + 1) % 12) for i in range(12)], 12)  # a cycle: every neighbourhood alike
    with pytest.raises(InvalidParameter) as err:
        find_odd_neighbourhoods(ring, OddNeighbourhoodsParams(local_outlier=True), progress=_noop)
    assert err.value.data["field"] == "local_outlier" and "set local_outlier to false" in err.value.reason
    with pytest.raises(EmptyGraph):
        find_dense_groups(tiny([], 3), DenseGroupsParams(), progress=_noop)


def test_uploaded_csv_columns_reach_the_attribute_search(tmp_path: Path) -> None:
    """A device column as the node upload stores it (strings), missing cells included."""
    v = tiny([(i, i + 1) for i in range(9)], 10)
    v.attrs.extra["device"] = ["a", "a", None, "a", "", "b", "c", "d", "e", "a"]
    d = find_dense_groups(v, DenseGroupsParams(ties=False, attributes=["device"], min_size=2, groups=2),
                          progress=_noop).data
    first = d["groups"][0]
    assert set(first["members"]) == {"0", "1", "3", "9"} and first["shared_values"] == ["a"]
    assert first["evidence"].startswith("4 accounts sharing 1 device ")


def test_a_flagged_person_cannot_be_a_must_include_seed(stored: Any) -> None:
    from service.analytics.errors import InfeasibleRequest
    from service.usecases.contact_rules import ContactRules, resolve_rules
    from service.usecases.integrity_rules import FlaggedRule

    _, v = stored
    rule = FlaggedRule(job="j_odd", lists=["near_cliques"], node_ids=["m100", "m101"])
    resolved = resolve_rules(ContactRules(budget=3, flagged=rule), v)
    assert not resolved.rules.eligible[[100, 101]].any() and resolved.rules.eligible[102]
    assert any(w["code"] == "excluded_flagged" and w["count"] == 2 for w in resolved.warnings)
    with pytest.raises(InfeasibleRequest) as err:
        resolve_rules(ContactRules(budget=3, must_include=("m101",), flagged=rule), v)
    assert err.value.data["field"] == "must_include" and "flagged for review by job j_odd" in err.value.reason
    unread = FlaggedRule(job="j_odd")  # as a schedule would store it: never read from the job
    with pytest.raises(InvalidParameter) as err:
        resolve_rules(ContactRules(budget=3, flagged=unread), v)
    assert err.value.data["field"] == "exclude_flagged" and "POST /v1/graphs" in err.value.reason

"""Projections of (person, event) tables onto people (service/analytics/events/projection.py)."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp
from networkx.algorithms import bipartite

from service.analytics.errors import InvalidParameter
from service.analytics.events.projection import (
    EmptyProjection,
    ProjectionTooLarge,
    SingleParticipantEvent,
    UnknownProjection,
    event_table,
    project_events,
)


def _as_dict(g):
    return {(int(a), int(b)): float(w) for a, b, w in zip(g.src, g.dst, g.weight)}


def _davis_table():
    G = nx.davis_southern_women_graph()
    women = sorted(n for n, d in G.nodes(data=True) if d["bipartite"] == 0)
    events = sorted(n for n, d in G.nodes(data=True) if d["bipartite"] == 1)
    wi = {w: i for i, w in enumerate(women)}
    ei = {e: i for i, e in enumerate(events)}
    rows = [(wi[w], ei[e]) for w, e in G.edges() if w in wi] + \
        [(wi[e], ei[w]) for w, e in G.edges() if e in wi]
    person = np.array([r[0] for r in rows])
    event = np.array([r[1] for r in rows])
    return G, women, wi, person, event


def _random_table(seed, n_people=40, n_events=25, p=0.15):
    G = bipartite.random_graph(n_people, n_events, p, seed=seed)
    rows = [(u, v - n_people) if u < n_people else (v, u - n_people) for u, v in G.edges()]
    person = np.array([r[0] for r in rows], dtype=np.int64)
    event = np.array([r[1] for r in rows], dtype=np.int64)
    return G, person, event


def _nx_weights(P, relabel=None):
    out = {}
    for a, b, d in P.edges(data=True):
        a, b = (relabel[a], relabel[b]) if relabel else (a, b)
        out[(min(a, b), max(a, b))] = d["weight"]
    return out


def _assert_same(ours, theirs):
    assert set(ours) == set(theirs)
    for k, v in theirs.items():
        assert ours[k] == pytest.approx(v, rel=1e-12)


@pytest.mark.parametrize("method", ["count", "newman"])
def test_davis_matches_networkx(method):
    G, women, wi, person, event = _davis_table()
    g = project_events(person, event, method=method, max_event_size=None)
    if method == "count":
        # Source: NetworkX bipartite.weighted_projected_graph, computed in this test.
        P = bipartite.weighted_projected_graph(G, women)
    else:
        # Source: NetworkX bipartite.collaboration_weighted_projected_graph (Newman 2001).
        P = bipartite.collaboration_weighted_projected_graph(G, women)
    _assert_same(_as_dict(g), _nx_weights(P, wi))
    assert g.n_people == 18 and g.events == 14
    assert g.pairs == P.number_of_edges()


@pytest.mark.parametrize("seed", [0, 1, 2, 3, 4])
@pytest.mark.parametrize("method", ["count", "newman"])
def test_random_bipartite_matches_networkx(seed, method):
    G, person, event = _random_table(seed)
    g = project_events(person, event, method=method, max_event_size=None, singletons="skip",
                       n_people=40, n_events=25)
    nodes = range(40)
    P = (bipartite.weighted_projected_graph(G, nodes) if method == "count"
         else bipartite.collaboration_weighted_projected_graph(G, nodes))
    # Source: NetworkX, computed in this test.
    _assert_same(_as_dict(g), _nx_weights(P))
    assert np.all(g.src < g.dst)
    keys = g.src.astype(np.int64) * 40 + g.dst
    assert np.all(np.diff(keys) > 0), "pairs sorted and unique"


def test_newman_equals_sparse_product_with_weights_and_decay():
    rng = np.random.default_rng(7)
    rows = 3000
    person = rng.integers(0, 300, rows)
    event = rng.integers(0, 200, rows)
    weight = rng.uniform(0.5, 2.0, rows)
    time = rng.uniform(0, 1000, rows)
    g = project_events(person, event, method="newman", weight=weight, time=time, half_life=250.0,
                       max_event_size=None, singletons="skip", n_people=300, n_events=200)
    # Source: SciPy sparse product B^T D B with duplicates merged by the larger weight and
    # D = diag(2^(-(t_ref - t_e)/h) / (n_e - 1)), computed in this test.
    best: dict[tuple[int, int], float] = {}
    etime = np.full(200, -np.inf)
    for p, e, w, t in zip(person, event, weight, time):
        best[(int(e), int(p))] = max(best.get((int(e), int(p)), 0.0), float(w))
        etime[e] = max(etime[e], t)
    keys = np.array(list(best))
    B = sp.csr_matrix((list(best.values()), (keys[:, 0], keys[:, 1])), shape=(200, 300))
    size = np.diff((B != 0).tocsr().indptr)
    tref = etime[size > 0].max()
    d = np.where(size > 1, 1.0 / np.maximum(size - 1, 1), 0.0) * np.exp2(-(tref - etime) / 250.0)
    d[size == 0] = 0
    W = sp.triu((B.T @ sp.diags(d) @ B).tocsr(), k=1).tocoo()
    ref = {(int(a), int(b)): float(v) for a, b, v in zip(W.row, W.col, W.data) if v != 0}
    _assert_same(_as_dict(g), ref)


def test_resource_allocation_closed_form():
    G, person, event = _random_table(11, n_people=30, n_events=20, p=0.2)
    g = project_events(person, event, method="resource_allocation", max_event_size=None,
                       singletons="skip", n_people=30, n_events=20)
    assert g.directed
    # Source: closed form of Zhou et al. (2007): W_ij = (1/k_j) sum_l a_il a_jl / k_l, the
    # resource i receives from j; an arc j -> i, computed densely here.
    A = np.zeros((30, 20))
    A[person, event] = 1
    k_event = A.sum(axis=0)
    k_person = A.sum(axis=1)
    W = (A / np.where(k_event > 0, k_event, 1)) @ A.T / np.where(k_person > 0, k_person, 1)[None, :]
    got = np.zeros((30, 30))
    got[g.dst, g.src] = g.weight
    np.fill_diagonal(W, 0)
    np.testing.assert_allclose(got, W, rtol=1e-12, atol=1e-15)
    # Each person's resource is conserved: what leaves plus what stays sums to 1.
    stays = (A / np.where(k_event > 0, k_event, 1)) @ A.T
    out = np.bincount(g.src, weights=g.weight, minlength=30)
    active = k_person > 0
    np.testing.assert_allclose((out + np.diag(stays) / np.maximum(k_person, 1))[active], 1.0)


def test_time_decay_halves_per_half_life():
    # Source: closed form 2^(-(t_ref - t)/h): events at t_ref - h and t_ref count 1/2 and 1.
    g = project_events([0, 1, 0, 1], [0, 0, 1, 1], time=[0, 0, 10, 10], half_life=10.0)
    assert _as_dict(g) == {(0, 1): pytest.approx(1.5)}
    g = project_events([0, 1, 0, 1], [0, 0, 1, 1], time=[0, 0, 10, 10], half_life=10.0,
                       t_ref=20.0)
    assert _as_dict(g) == {(0, 1): pytest.approx(0.75)}


def test_cap_drops_or_downweights_and_reports():
    big = list(range(10))
    person = [0, 1] + big
    event = [0, 0] + [1] * 10
    g = project_events(person, event, max_event_size=5)
    assert g.events_over_cap == 1 and g.events_dropped == 1 and g.events_downweighted == 0
    assert _as_dict(g) == {(0, 1): 1.0}
    assert g.largest_event == 10
    assert g.people_in_events == 10 and g.people_without_ties == 8
    g = project_events(person, event, max_event_size=5, oversized="downweight")
    assert g.events_downweighted == 1 and g.events_dropped == 0
    w = _as_dict(g)
    # Source: closed form (cap - 1)/(n - 1) = 4/9 per pair of the 10-person event.
    assert w[(0, 1)] == pytest.approx(1 + 4 / 9)
    assert w[(2, 7)] == pytest.approx(4 / 9)
    assert g.pairs == 45
    g = project_events(person, event, method="newman", max_event_size=5, oversized="downweight")
    assert _as_dict(g)[(2, 7)] == pytest.approx(4 / 9 / 9)


def test_duplicate_rows_count_once():
    g = project_events([0, 1, 0, 0, 1], [0, 0, 0, 0, 0])
    assert _as_dict(g) == {(0, 1): 1.0}
    assert g.duplicate_rows == 3 and g.rows == 5
    t = event_table([0, 0], [0, 0], weight=[1.0, 3.0])
    assert t.member_weight.tolist() == [3.0]


def test_unknown_projection_is_refused_with_its_name():
    with pytest.raises(UnknownProjection) as err:
        project_events([0, 1], [0, 0], method="jaccard")
    assert err.value.data["name"] == "jaccard"
    assert "newman" in err.value.data["choices"]


def test_single_participant_event_is_refused_or_skipped():
    with pytest.raises(SingleParticipantEvent) as err:
        project_events([0, 1, 2, 3], [0, 0, 1, 2])
    assert err.value.data == {"events": 2, "example_event": 1}
    g = project_events([0, 1, 2, 3], [0, 0, 1, 2], singletons="skip")
    assert g.events_single == 2 and g.pairs == 1 and g.people_without_ties == 2


def test_person_id_over_the_limit_is_refused():
    with pytest.raises(InvalidParameter) as err:
        project_events([0, 5], [0, 0], n_people=5)
    assert err.value.data["field"] == "person" and err.value.data["value"] == 5
    assert err.value.data["limit"] == 4
    with pytest.raises(InvalidParameter):
        project_events([0, -1], [0, 0])
    with pytest.raises(InvalidParameter):
        project_events([0.5, 1], [0, 0])
    with pytest.raises(InvalidParameter):
        project_events([0, 1], [0])


def test_no_pair_left_is_an_empty_projection_with_counts():
    with pytest.raises(EmptyProjection) as err:
        project_events(list(range(6)), [0] * 6, max_event_size=5)
    assert err.value.data["pairs"] == 0 and err.value.data["events_over_cap"] == 1
    with pytest.raises(EmptyProjection):
        project_events([], [])


def test_pair_work_limit():
    with pytest.raises(ProjectionTooLarge) as err:
        project_events(list(range(50)), [0] * 50, max_pair_slots=1000)
    assert err.value.data["pair_slots"] == 50 * 49 // 2


def test_option_errors():
    with pytest.raises(InvalidParameter):
        project_events([0, 1], [0, 0], time=[1.0, 2.0])
    with pytest.raises(InvalidParameter):
        project_events([0, 1], [0, 0], time=[1.0, 2.0], half_life=0.0)
    with pytest.raises(InvalidParameter):
        project_events([0, 1], [0, 0], weight=[1.0, 0.0])
    with pytest.raises(InvalidParameter):
        project_events([0, 1], [0, 0], method="resource_allocation", weight=[1.0, 1.0])
    with pytest.raises(InvalidParameter):
        project_events([0, 1], [0, 0], max_event_size=1)
    with pytest.raises(InvalidParameter):
        project_events([0, 1], [0, 0], oversized="shrink")  # type: ignore[arg-type]


def test_errors_map_to_422_problems():
    from service.api.problems import problem_for

    for exc in (UnknownProjection(name="x"), SingleParticipantEvent(events=1),
                ProjectionTooLarge(pair_slots=1), EmptyProjection(pairs=0)):
        ptype = problem_for(exc)
        assert ptype is not None and ptype.status == 422


def test_strength_and_degree_per_person():
    G, person, event = _random_table(5)
    g = project_events(person, event, method="newman", singletons="skip", n_people=40)
    ends = np.concatenate([g.src, g.dst])
    # Source: numpy bincount over both endpoints of every tie.
    np.testing.assert_allclose(g.strength, np.bincount(ends, np.concatenate([g.weight, g.weight]),
                                                       minlength=40), rtol=1e-12)
    assert np.array_equal(g.degree, np.bincount(ends, minlength=40))
    ra = project_events(person, event, method="resource_allocation", singletons="skip")
    assert ra.strength is None and ra.degree is None


@pytest.mark.parametrize("method", ["newman", "resource_allocation"])
def test_any_thread_count_and_round_size_give_the_same_ties(method, monkeypatch):
    # Source: SciPy's sparse product B^T D B (as in the tests above) for the weights; the
    # threads and the rounds only change who writes which rows, so every run is bit-identical.
    from service.analytics._chunks import ChunkSizer
    from service.analytics.events import projection as mod
    from service.analytics.events.backbone import disparity_filter

    rng = np.random.default_rng(5)
    person, event = rng.integers(0, 700, 6_000), rng.integers(0, 400, 6_000)
    runs = []
    for threads, first, target in [(1, 1 << 20, 0.25), (2, 1 << 20, 0.25), (3, 7, 1e-9), (4, 1, 1e-9)]:
        monkeypatch.setattr(mod, "ChunkSizer", lambda first_=first, target_=target, **_: ChunkSizer(
            first=first_, target=target_))
        done: list[float] = []
        g = project_events(person, event, method=method, singletons="skip", threads=threads, progress=done.append)
        b = disparity_filter(g, alpha=0.3, threads=threads) if method == "newman" else None
        runs.append((g, b, len(done)))
    g0, b0, _ = runs[0]
    assert runs[-1][2] > 100  # rounds of a slot or so: the rows were moved down many times
    for g, b, _ in runs[1:]:
        for name in ("src", "dst", "weight", "shared"):
            assert np.array_equal(getattr(g, name), getattr(g0, name)), name
        if b is not None:
            assert np.array_equal(b.p_value, b0.p_value) and np.array_equal(b.keep, b0.keep)
    if method == "newman":
        B = sp.csr_matrix((np.ones(person.size), (event, person)), shape=(400, 700))
        B.data[:] = 1.0  # duplicate rows count once
        size = np.asarray(B.sum(axis=1)).ravel()
        D = sp.diags(np.where((size > 1) & (size <= 100), 1.0 / np.maximum(size - 1, 1), 0.0))
        want = sp.triu((B.T @ D @ B).tocsr(), k=1)
        got = sp.csr_matrix((g0.weight, (g0.src, g0.dst)), shape=(700, 700))
        assert abs(got - want).max() < 1e-12

"""Densest-block peeling on people, attribute tables and time windows (service.analytics.integrity.dense_groups)."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest

from service.analytics import (
    Cancelled,
    EmptyGraph,
    GraphArrays,
    InvalidParameter,
    fraudar,
    fraudar_bipartite,
    lockstep_groups,
    shared_attribute_groups,
)


def graph_of(G: nx.Graph, n: int) -> GraphArrays:
    src, dst = zip(*G.edges) if G.number_of_edges() else ((), ())
    return GraphArrays(n, False, np.asarray(src, np.int32), np.asarray(dst, np.int32),
                       np.ones(len(src)))


def brute_force_density(w: np.ndarray) -> float:
    """max over non-empty node sets S of (weight of ties inside S) / |S|, by enumeration."""
    n = w.shape[0]
    masks = ((np.arange(1, 2**n)[:, None] >> np.arange(n)) & 1).astype(float)
    inside = np.einsum("si,ij,sj->s", masks, w, masks) / 2.0
    return float((inside / masks.sum(1)).max())


def tie_weights(G: nx.Graph, n: int, weighting: str) -> np.ndarray:
    """The peeling's tie weights, written out from the docstring's formula."""
    deg = np.array([G.degree(i) for i in range(n)], float)
    cw = np.ones(n) if weighting == "uniform" else 1.0 / np.log(deg + 5.0)
    w = np.zeros((n, n))
    for u, v in G.edges:
        w[u, v] = w[v, u] = (cw[u] + cw[v]) / 2.0
    return w


@pytest.mark.parametrize("weighting", ["uniform", "log"])
@pytest.mark.parametrize("seed", range(6))
def test_peeling_within_half_of_the_exact_densest_subgraph(seed: int, weighting: str) -> None:
    # Source: exact enumeration of all 2^n - 1 node sets (n = 12 or 13); bound 1/2 from
    # Charikar 2000 (uniform weights) and Hooi et al. 2016 (column-weighted).
    n = 12 + seed % 2
    G = nx.gnp_random_graph(n, 0.35, seed=seed)
    if G.number_of_edges() == 0:
        pytest.skip("empty random graph")
    w = tie_weights(G, n, weighting)
    best = brute_force_density(w)
    (grp,) = fraudar(graph_of(G, n), weighting=weighting, min_size=2)
    members = grp.members
    found = w[np.ix_(members, members)].sum() / 2.0 / members.size
    assert grp.density == pytest.approx(found)
    assert grp.guarantee == 0.5
    assert 0.5 * best - 1e-12 <= grp.density <= best + 1e-12


@pytest.mark.parametrize("seed", range(4))
def test_bipartite_peeling_within_half_of_the_exact_block(seed: int) -> None:
    # Source: exact enumeration of all 2^13 - 1 sets of people and values; column weights
    # 1 / log(holders + 5) as Hooi et al. 2016 define them; bound 1/2 from that paper.
    rng = np.random.default_rng(seed)
    n_rows, n_cols = 7, 6
    link = rng.random((n_rows, n_cols)) < 0.45
    link[0, 0] = link[1, 0] = True
    r, c = np.nonzero(link)
    cw = 1.0 / np.log(link.sum(0) + 5.0)
    n = n_rows + n_cols
    w = np.zeros((n, n))
    w[r, n_rows + c] = w[n_rows + c, r] = cw[c]
    best = brute_force_density(w)
    (grp,) = fraudar_bipartite(r, c, n_rows=n_rows, n_cols=n_cols, min_size=1)
    nodes = np.concatenate((grp.members, n_rows + grp.targets))
    found = w[np.ix_(nodes, nodes)].sum() / 2.0 / nodes.size
    assert grp.density == pytest.approx(found)
    assert 0.5 * best - 1e-12 <= grp.density <= best + 1e-12


def test_planted_block_found_despite_camouflage() -> None:
    # Source: the camouflage property of Hooi et al. 2016: links from the block to other
    # (popular) values add nothing inside the block, so its density is unchanged and the
    # peeling still returns a block at least half as dense. Planted here: 40 accounts x 30
    # values (links with p = 0.8) among 3,000 accounts with 5 links each to 1,000 values
    # of Zipf-like popularity; every planted account also links to 25 of the 50 most
    # popular values (camouflage).
    rng = np.random.default_rng(7)
    n_rows, n_cols = 3000, 1000
    pop = 1.0 / np.arange(1, n_cols + 1)
    r = np.repeat(np.arange(n_rows), 5)
    c = rng.choice(n_cols, r.size, p=pop / pop.sum())
    fraud = rng.choice(n_rows, 40, replace=False)
    targets = rng.choice(np.arange(200, n_cols), 30, replace=False)
    fr, ft = np.meshgrid(fraud, targets, indexing="ij")
    keep = rng.random(fr.shape) < 0.8
    cam_r = np.repeat(fraud, 25)
    cam_c = np.concatenate([rng.choice(50, 25, replace=False) for _ in fraud])
    rows = np.concatenate((r, fr[keep], cam_r))
    cols = np.concatenate((c, ft[keep], cam_c))
    (grp,) = fraudar_bipartite(rows, cols, n_rows=n_rows, n_cols=n_cols, column_label="values")
    caught = np.isin(grp.members, fraud)
    assert caught.mean() >= 0.9 and caught.sum() >= 0.9 * fraud.size
    assert set(grp.targets.tolist()) >= set(targets.tolist()) - set(range(50))
    # Guarantee: at least half the planted block's own density under the same weights.
    pairs = np.unique(rows * n_cols + cols)
    pr, pc = pairs // n_cols, pairs % n_cols
    cw = 1.0 / np.log(np.bincount(pc, minlength=n_cols) + 5.0)
    inside = np.isin(pr, fraud) & np.isin(pc, targets)
    planted = cw[pc[inside]].sum() / (fraud.size + targets.size)
    assert grp.density >= 0.5 * planted


def test_person_graph_block_found_despite_camouflage_and_repeated() -> None:
    # Source: planted structure (as above, on people): two near-cliques of 30 and 25 accounts
    # (ties with p = 0.9) in a clustered random graph of 3,000 people; each member also ties
    # to 20 random people (camouflage).
    rng = np.random.default_rng(11)
    G = nx.powerlaw_cluster_graph(3000, 3, 0.3, seed=11)
    people = rng.permutation(np.arange(500, 3000))
    rings = [people[:30], people[30:55]]
    for ring in rings:
        for a, b in zip(*np.triu_indices(ring.size, 1)):
            if rng.random() < 0.9:
                G.add_edge(int(ring[a]), int(ring[b]))
        for m in ring:
            G.add_edges_from((int(m), int(x)) for x in rng.choice(3000, 20, replace=False) if x != m)
    groups = fraudar(graph_of(G, 3000), blocks=2)
    assert len(groups) == 2
    for grp, ring in zip(groups, rings):
        hit = np.isin(grp.members, ring)
        assert hit.mean() >= 0.9 and hit.sum() >= 0.9 * ring.size
        assert grp.evidence.startswith(f"{grp.members.size} accounts, {grp.ties} of the ")


def test_shared_attributes_and_created_span_in_the_evidence() -> None:
    # Source: hand-made table: 5 accounts share 2 addresses; 30 others have their own.
    person = np.concatenate((np.repeat(np.arange(5), 2), np.arange(5, 35)))
    value = np.concatenate((np.tile([900, 901], 5), np.arange(1000, 1030)))
    created = np.concatenate((np.array([0.0, 1, 2, 2.5, 2.9]) * 86400, np.zeros(30)))
    (grp,) = shared_attribute_groups(person, value, n_people=35, label="addresses",
                                     created=created)
    assert grp.members.tolist() == [0, 1, 2, 3, 4]
    assert grp.evidence == ("5 accounts sharing 2 addresses (10 of the 10 possible links), "
                            "all created within 3 days")


def test_a_wide_sign_up_span_is_left_out_of_the_evidence() -> None:
    # Source: hand-made table as above; the 5 accounts were created over 300 days of a
    # table spanning 400: no sign of signing up together, so the span is not quoted.
    person = np.concatenate((np.repeat(np.arange(5), 2), np.arange(5, 35)))
    value = np.concatenate((np.tile([900, 901], 5), np.arange(1000, 1030)))
    created = np.concatenate((np.array([0.0, 100, 200, 250, 300]) * 86400, np.full(30, 400 * 86400.0)))
    (grp,) = shared_attribute_groups(person, value, n_people=35, label="addresses", created=created)
    assert grp.evidence == "5 accounts sharing 2 addresses (10 of the 10 possible links)"


def test_person_group_evidence_reads_as_plain_words() -> None:
    # Source: hand-made case. 12 accounts with 61 of the 66 possible ties, created on days
    # 0 to 2.5, two addresses each held by several of them; 40 others on a path.
    rng = np.random.default_rng(2)
    G = nx.path_graph(range(12, 52))
    pairs = list(zip(*np.triu_indices(12, 1)))
    for k in rng.choice(len(pairs), 61, replace=False):
        G.add_edge(int(pairs[k][0]), int(pairs[k][1]))
    created = np.concatenate((np.linspace(0, 2.5, 12) * 86400, np.full(40, 9e8)))
    person = np.array([0, 1, 2, 3, 4, 5, 20])
    address = np.array([7, 7, 7, 8, 8, 9, 9])
    (grp,) = fraudar(graph_of(G, 52), created=created,
                     attributes=[("addresses", person, address)])
    assert grp.members.tolist() == list(range(12))
    assert grp.evidence == ("12 accounts, 61 of the 66 possible ties among them, "
                            "all created within 3 days, sharing 2 addresses")


def test_lockstep_group_found_only_when_times_agree() -> None:
    # Source: planted structure. 20 accounts act on the same 8 targets within one hour;
    # 1,000 others act 5 times each on 300 targets at random over 30 days. Spreading the
    # same 20 accounts' actions over the 30 days removes the group.
    rng = np.random.default_rng(3)
    day = 86400.0
    bg_p = np.repeat(np.arange(20, 1020), 5)
    bg_t = rng.integers(0, 300, bg_p.size)
    bg_s = rng.uniform(0, 30 * day, bg_p.size)
    crew = np.repeat(np.arange(20), 8)
    crew_t = np.tile(np.arange(300, 308), 20)
    burst = 10 * day + rng.uniform(0, 3000, crew.size)
    p = np.concatenate((bg_p, crew))
    t = np.concatenate((bg_t, crew_t))
    groups = lockstep_groups(p, t, np.concatenate((bg_s, burst)), n_people=1020, window=3600.0)
    assert sorted(groups[0].members.tolist()) == list(range(20))
    assert groups[0].evidence == "20 accounts acted on the same 8 targets within 1 hour of each other"
    spread = rng.uniform(0, 30 * day, crew.size)
    groups = lockstep_groups(p, t, np.concatenate((bg_s, spread)), n_people=1020, window=3600.0)
    assert all(np.isin(grp.members, np.arange(20)).sum() < 5 for grp in groups)


def test_progress_is_reported_and_cancelling_stops() -> None:
    G = nx.complete_graph(6)
    seen: list[float] = []
    fraudar(graph_of(G, 6), blocks=2, progress=lambda f, _m: seen.append(f))
    assert seen == [0.0, 0.5]

    def stop(_f: float, _m: str) -> None:
        raise Cancelled()

    with pytest.raises(Cancelled):
        fraudar(graph_of(G, 6), progress=stop)


def test_bad_input_is_refused_with_the_reason() -> None:
    with pytest.raises(InvalidParameter) as err:
        shared_attribute_groups(np.arange(4), np.array([7, 8, 9, 10]), n_people=4)
    assert err.value.data == {"links": 4, "people": 4, "values": 4}
    assert "no value is shared" in err.value.reason
    with pytest.raises(InvalidParameter):
        shared_attribute_groups(np.zeros(0, np.int64), np.zeros(0, np.int64), n_people=3)
    with pytest.raises(InvalidParameter) as err:
        fraudar_bipartite(np.array([0, 5]), np.array([0, 0]), n_rows=3, n_cols=1)
    assert err.value.data == {"n_rows": 3, "n_cols": 1}
    with pytest.raises(InvalidParameter) as err:
        fraudar(graph_of(nx.path_graph(3), 3), weighting="square")
    assert err.value.data["field"] == "weighting"
    with pytest.raises(EmptyGraph):
        fraudar(graph_of(nx.empty_graph(3), 3))
    with pytest.raises(InvalidParameter) as err:
        lockstep_groups(np.arange(3), np.arange(3), np.zeros(3), n_people=3, window=0.0)
    assert err.value.data["field"] == "window"
    with pytest.raises(InvalidParameter):
        lockstep_groups(np.arange(3), np.arange(2), np.zeros(3), n_people=3, window=60.0)

"""Ego-network features, power-law fits and OddBall scores (service.analytics.integrity.egonet)."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest

from service.analytics import (
    Cancelled,
    EmptyGraph,
    GraphArrays,
    InvalidParameter,
    auc,
    contact_circles,
    ego_features,
    lof_scores,
    oddball,
    powerlaw_line,
    precision_at_k,
)
from tests.datasets import snap_graph


def arrays(src, dst, w=None, *, n=None, directed=False) -> GraphArrays:
    s = np.asarray(src, np.int32)
    d = np.asarray(dst, np.int32)
    n = int(max(s.max(), d.max()) + 1) if n is None else n
    return GraphArrays(n, directed, s, d, np.ones(s.size) if w is None else np.asarray(w, float))


def nx_ego(G: nx.Graph, i: int) -> tuple[int, int, float, float]:
    """(N, E, W, lambda_w) from NetworkX's ego_graph and numpy's symmetric eigensolver."""
    ego = nx.ego_graph(G, i)
    a = nx.to_numpy_array(ego, weight="weight")
    lam = float(np.linalg.eigvalsh(a).max()) if ego.number_of_nodes() > 1 else 0.0
    return ego.number_of_nodes() - 1, ego.number_of_edges(), ego.size(weight="weight"), lam


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_features_match_networkx_ego_graphs(seed: int) -> None:
    # Source: NetworkX nx.ego_graph sizes and weights, numpy.linalg.eigvalsh, computed here.
    rng = np.random.default_rng(seed)
    G = nx.gnp_random_graph(60, 0.12, seed=seed)
    G.add_node(60)  # an isolated person
    for u, v in G.edges:
        G[u][v]["weight"] = float(rng.integers(1, 6))
    src, dst = zip(*G.edges)
    w = [G[u][v]["weight"] for u, v in G.edges]
    f = ego_features(arrays(src, dst, w, n=61))
    assert f.converged.all()
    for i in G.nodes:
        n_i, e_i, w_i, lam = nx_ego(G, i)
        assert f.neighbours[i] == n_i
        assert f.edges[i] == e_i
        assert f.weight[i] == pytest.approx(w_i)
        assert f.eigenvalue[i] == pytest.approx(lam, rel=1e-8, abs=1e-12)


def test_directed_pairs_merge_and_self_loops_drop() -> None:
    # Source: NetworkX on the undirected graph built by hand: 0->1 (2) and 1->0 (3) are
    # one tie of weight 5, the self-loop 2->2 is ignored, 1->2 and 2->0 are ties of 1.
    g = arrays([0, 1, 2, 1, 2], [1, 0, 2, 2, 0], [2.0, 3.0, 9.0, 1.0, 1.0], directed=True)
    G = nx.Graph()
    G.add_weighted_edges_from([(0, 1, 5.0), (1, 2, 1.0), (2, 0, 1.0)])
    f = ego_features(g)
    for i in range(3):
        n_i, e_i, w_i, lam = nx_ego(G, i)
        assert (f.neighbours[i], f.edges[i]) == (n_i, e_i)
        assert f.weight[i] == pytest.approx(w_i)
        assert f.eigenvalue[i] == pytest.approx(lam, rel=1e-9)


def test_power_iteration_agrees_with_the_dense_solver() -> None:
    # Source: numpy.linalg.eigvalsh on NetworkX ego graphs, computed here, against power
    # iteration forced on every ego (no dense fallback) and against the default path.
    G = nx.gnm_random_graph(300, 1500, seed=4)
    w = np.random.default_rng(4).uniform(0.5, 3.0, G.number_of_edges())
    for (u, v), x in zip(G.edges, w):
        G[u][v]["weight"] = float(x)
    src, dst = zip(*G.edges)
    g = arrays(src, dst, w, n=300)
    ref = np.array([nx_ego(G, i)[3] for i in range(300)])
    power = ego_features(g, dense_limit=1, max_iter=100_000)
    assert power.converged.all()
    assert power.eigenvalue == pytest.approx(ref, rel=1e-8)
    assert ego_features(g).eigenvalue == pytest.approx(ref, rel=1e-8)


def test_star_and_clique_closed_forms() -> None:
    # Source: closed form. Star with k unit leaves: centre N = E = k, lambda = sqrt(k).
    # Complete graph K_n: N = n - 1, E = n(n-1)/2, lambda = n - 1.
    k = 12
    f = ego_features(arrays([0] * k, list(range(1, k + 1))))
    assert (f.neighbours[0], f.edges[0]) == (k, k)
    assert f.eigenvalue[0] == pytest.approx(np.sqrt(k), rel=1e-9)
    n = 9
    u, v = np.triu_indices(n, 1)
    f = ego_features(arrays(u, v))
    assert (f.neighbours == n - 1).all() and (f.edges == n * (n - 1) // 2).all()
    assert f.eigenvalue == pytest.approx(np.full(n, n - 1.0), rel=1e-9)


def test_bad_options_name_the_field() -> None:
    g = arrays([0], [1])
    with pytest.raises(InvalidParameter) as err:
        ego_features(g, max_iter=0)
    assert err.value.data["field"] == "max_iter"
    with pytest.raises(InvalidParameter) as err:
        powerlaw_line(np.ones(5), np.ones(5), method="median")
    assert err.value.data["allowed"] == ["huber", "least-squares"]


def test_powerlaw_line_exact_and_robust() -> None:
    # Source: closed form, y = 2 x^1.7 exactly; then 10% of points pushed up 20-fold.
    rng = np.random.default_rng(3)
    x = rng.uniform(1, 100, 400)
    y = 2.0 * x**1.7 * np.exp(rng.normal(0, 0.05, x.size))
    for method in ("huber", "least-squares"):
        fit = powerlaw_line(x, y, method=method)
        assert fit.exponent == pytest.approx(1.7, abs=0.01)
        assert fit.constant == pytest.approx(2.0, rel=0.05)
    y2 = y.copy()
    y2[:40] *= 20.0
    huber = powerlaw_line(x, y2, method="huber")
    ls = powerlaw_line(x, y2, method="least-squares")
    assert abs(np.log(huber.constant / 2.0)) < 0.1
    assert abs(np.log(huber.constant / 2.0)) < abs(np.log(ls.constant / 2.0))


def test_outline_score_formula_on_a_hand_example() -> None:
    # Source: the OddBall out-line score written out by hand on the fit oddball returns:
    # score = max(y, C x^a) / min(y, C x^a) * log(|y - C x^a| + 1).
    g, _ = _ring_graph()
    r = oddball(g, method="least-squares")
    fit = r.fits[0]
    i = int(np.argmax(r.law_scores["E~N"]))
    x, y = float(r.features.neighbours[i]), float(r.features.edges[i])
    c = fit.constant * x**fit.exponent
    assert r.law_scores["E~N"][i] == pytest.approx(max(y, c) / min(y, c) * np.log(abs(y - c) + 1))


def _ring_graph() -> tuple[GraphArrays, np.ndarray]:
    """A clustered random graph of 2,000 people with one planted clique of 12 and one star."""
    G = nx.powerlaw_cluster_graph(2000, 3, 0.5, seed=5)
    ring = np.arange(1000, 1012)  # late arrivals: few contacts of their own
    G.add_edges_from((int(ring[a]), int(ring[b])) for a, b in zip(*np.triu_indices(12, 1)))
    G.add_edges_from((1999, j) for j in range(100, 250))
    src, dst = zip(*G.edges)
    return arrays(src, dst, n=2000), ring


def test_near_cliques_and_near_stars_are_reported_apart() -> None:
    # Source: planted structure. The clique members lie above the E ~ N line and the star
    # centre far below it; evidence is plain words from the numbers.
    g, ring = _ring_graph()
    r = oddball(g, lof=True)
    assert {p.node for p in r.near_cliques[:12]} == set(ring.tolist())
    assert r.near_stars[0].node == 1999
    assert (r.side[ring] == 1).all() and r.side[1999] == -1
    star = r.near_stars[0]
    assert star.evidence.startswith(f"{star.neighbours:,} contacts with")
    assert "expected for that many contacts" in star.evidence
    assert 1.0 <= r.fits[0].exponent <= 2.0


def test_oddball_reports_progress_and_can_be_cancelled() -> None:
    g, _ = _ring_graph()
    seen: list[float] = []
    oddball(g, progress=lambda f, _m: seen.append(f))
    assert seen == [0.0, 0.8, 1.0]

    def stop(_f: float, _m: str) -> None:
        raise Cancelled()

    with pytest.raises(Cancelled):
        oddball(g, progress=stop)


def test_lof_flags_the_isolated_point() -> None:
    # Source: definition (Breunig et al. 2000): a point far from a tight cluster has LOF >> 1,
    # points inside a uniform grid have LOF close to 1.
    grid = np.array([[i, j] for i in range(6) for j in range(6)], float)
    pts = np.vstack((grid, [[30.0, 30.0]]))
    s = lof_scores(pts, k=4)
    assert int(np.argmax(s)) == 36 and s[36] > 5
    assert np.median(s[:36]) == pytest.approx(1.0, abs=0.15)


def test_too_few_egos_and_empty_graph_are_refused() -> None:
    path = arrays([0, 1, 2], [1, 2, 3])
    with pytest.raises(InvalidParameter) as err:
        oddball(path)
    assert err.value.data["egos"] == 2 and err.value.data["required"] == 10
    with pytest.raises(EmptyGraph):
        oddball(GraphArrays(3, False, np.zeros(0, np.int32), np.zeros(0, np.int32), np.zeros(0)))


@pytest.mark.shared
@pytest.mark.slow
@pytest.mark.parametrize("name,directed", [("ca-HepTh", False), ("email-Enron", False),
                                            ("wiki-Vote", True)])
def test_alpha_between_star_and_clique_on_real_graphs(name: str, directed: bool) -> None:
    # Source: Akoglu et al. 2010 (OddBall) report 1 <= alpha <= 2 for E ~ N^alpha on real
    # graphs (range partly from memory). Measured here with the Huber fit: ca-HepTh 1.239,
    # email-Enron 1.469, wiki-Vote 1.564 (least squares: 1.286, 1.451, 1.558); beta = 1
    # exactly on these unweighted graphs (wiki-Vote 1.014: reciprocal votes weigh 2), gamma
    # 0.47-0.49.
    g, _ = snap_graph(name, directed=directed)
    r = oddball(g)
    alpha = r.fits[0].exponent
    assert 1.0 < alpha < 2.0
    assert r.fits[1].exponent >= 1.0 - 1e-9


def plant(g: GraphArrays, rng: np.random.Generator, sizes: list[int], stars: int, leaves: int,
          p: float = 0.9) -> tuple[GraphArrays, list[np.ndarray], np.ndarray]:
    """Rings (each pair tied with probability p) among random people; stars to random people."""
    nodes = rng.permutation(g.n)
    pos, src, dst, rings, centres = 0, [g.src], [g.dst], [], []
    for s in sizes:
        mem = nodes[pos:pos + s]
        pos += s
        rings.append(mem)
        iu = np.triu_indices(s, 1)
        keep = rng.random(iu[0].size) < p
        src.append(mem[iu[0][keep]].astype(np.int32))
        dst.append(mem[iu[1][keep]].astype(np.int32))
    for _ in range(stars):
        c = nodes[pos]
        pos += 1
        centres.append(c)
        to = rng.choice(g.n, leaves, replace=False)
        to = to[to != c]
        src.append(np.full(to.size, c, np.int32))
        dst.append(to.astype(np.int32))
    s, d = np.concatenate(src), np.concatenate(dst)
    return GraphArrays(g.n, False, s, d, np.ones(s.size)), rings, np.array(centres)


def _rank(scores: np.ndarray, members: np.ndarray) -> tuple[float, float]:
    m = np.zeros(scores.size, bool)
    m[members] = True
    return precision_at_k(scores[m], scores[~m], int(m.sum())), auc(scores[m], scores[~m])


def _planted_figures(name: str, seed: int = 1) -> dict[str, tuple[float, float]]:
    """(precision at the number injected, AUC) of each score on one planted graph."""
    g0, _ = snap_graph(name, directed=False)
    g, rings, centres = plant(g0, np.random.default_rng(seed), [10, 20, 30, 40], 5, 150)
    out: dict[str, tuple[float, float]] = {}
    for ring_score in ("own", "shared-contacts", "separate-circles"):
        r = oddball(g, ring_score=ring_score)
        up = np.where(r.side == 1, r.score, 0.0)
        down = np.where(r.side == -1, r.score, 0.0)
        out[f"{ring_score} rings>=20"] = _rank(up, np.concatenate(rings[1:]))
        out[f"{ring_score} ring of 10"] = _rank(up, rings[0])
        out[f"{ring_score} stars"] = _rank(down, centres)
        if ring_score != "own":
            planted = np.zeros(g.n, bool)
            planted[np.concatenate(rings)] = True
            top = np.argsort(-up, kind="stable")[:90]
            n_, e_ = r.features.neighbours[top], r.features.edges[top]
            density = (e_ - n_) / np.maximum(n_ * (n_ - 1) / 2, 1)
            out[f"{ring_score} top 90 unplanted, median ego density"] = (
                float((~planted[top]).sum()), float(np.median(density)))
    for key, (a, b) in out.items():
        if "top 90" in key:
            print(f"{name} seed {seed} {key.split(' top')[0]} top 90 near-cliques: {a:.0f} unplanted, "
                  f"median ego density {b:.3f}")
        else:
            print(f"{name} seed {seed} {key}: precision {a:.3f}, AUC {b:.3f}")
    return out


@pytest.mark.shared
@pytest.mark.slow
def test_planted_rings_and_stars_in_email_enron() -> None:
    # Source: planted anomalies in the open email-Enron graph (seed 1): rings of 10, 20, 30,
    # 40 random people (pairs tied with p = 0.9) and 5 stars of 150 random invitees.
    # Measured, precision at the number injected (90 for rings >= 20, 10, 5) and AUC:
    #   own out-line score:   rings >= 20 0.678, 0.971; ring of 10 0.000, 0.669
    #   shared-contacts:      rings >= 20 0.956, 0.978; ring of 10 0.000, 0.706
    #   separate-circles:     rings >= 20 0.956, 0.978; ring of 10 0.000, 0.791
    #   star centres (all):   0.400, 1.000 (AUC 0.99992)
    # Seeds 2 and 3 give 0.589 / 0.633 (own), 0.956 / 0.956 (shared-contacts) and
    # 0.944 / 0.933 (separate-circles) at 90; see test_separate_circles_on_seeds_2_and_3.
    f = _planted_figures("email-Enron")
    prec, area = f["own rings>=20"]
    assert prec == pytest.approx(0.678, abs=0.001) and area == pytest.approx(0.971, abs=0.001)
    prec, area = f["shared-contacts rings>=20"]
    assert prec >= 0.9  # the goal for rings of 20 or more
    assert prec == pytest.approx(0.956, abs=0.001) and area == pytest.approx(0.978, abs=0.001)
    prec, area = f["separate-circles rings>=20"]
    assert prec >= 0.9
    assert prec == pytest.approx(0.956, abs=0.001) and area == pytest.approx(0.978, abs=0.001)
    assert f["shared-contacts ring of 10"][1] > f["own ring of 10"][1]
    assert f["separate-circles ring of 10"] == pytest.approx((0.0, 0.791), abs=0.001)
    assert f["shared-contacts stars"] == f["own stars"] == f["separate-circles stars"]
    assert f["own stars"][1] >= 0.99


@pytest.mark.shared
@pytest.mark.slow
def test_planted_rings_and_stars_in_ca_grqc() -> None:
    # Source: planted anomalies in the open ca-GrQc graph (seed 1), as for email-Enron.
    # Measured, precision at the number injected and AUC:
    #   own out-line score:   rings >= 20 0.000, 0.943; ring of 10 0.000, 0.659
    #   shared-contacts:      rings >= 20 0.000, 0.937; ring of 10 0.000, 0.644
    #   separate-circles:     rings >= 20 0.922, 0.978; ring of 10 0.000, 0.701
    #   star centres (all):   1.000, 1.000
    # Density above the law cannot meet the goal here: of the top 90 near-cliques by
    # shared-contacts 89 are unplanted, with median ego density 0.989 - authors of papers
    # with 40-47 authors, real near-complete groups - while a planted ring's members have
    # median ego density 0.61-0.78 (ties at p = 0.9 plus their own contacts). Those groups
    # are closed or embedded: their members' other contacts (if any) know other members, so
    # few have a second circle of contacts, while nearly every ring member does (their old
    # contacts). separate-circles keeps 7 unplanted people in its top 90 (median ego
    # density 0.761). Seeds 2 and 3: own 0.000 / 0.000, shared-contacts 0.000 / 0.000,
    # separate-circles 0.911 / 0.922.
    f = _planted_figures("ca-GrQc")
    assert f["own stars"] == f["shared-contacts stars"] == f["separate-circles stars"] == (1.0, 1.0)
    prec, area = f["own rings>=20"]
    assert prec == 0.0 and area == pytest.approx(0.943, abs=0.001)
    prec, area = f["shared-contacts rings>=20"]
    assert prec == 0.0 and area == pytest.approx(0.937, abs=0.001)
    unplanted, density = f["shared-contacts top 90 unplanted, median ego density"]
    assert unplanted == 89 and density >= 0.98
    prec, area = f["separate-circles rings>=20"]
    assert prec >= 0.9  # the goal for rings of 20 or more
    assert prec == pytest.approx(0.922, abs=0.001) and area == pytest.approx(0.978, abs=0.001)
    assert f["separate-circles ring of 10"] == pytest.approx((0.0, 0.701), abs=0.001)
    unplanted, density = f["separate-circles top 90 unplanted, median ego density"]
    assert unplanted == 7 and density == pytest.approx(0.761, abs=0.001)


@pytest.mark.shared
@pytest.mark.slow
@pytest.mark.parametrize("name,seed,want", [
    ("ca-GrQc", 2, (0.911, 0.985)), ("ca-GrQc", 3, (0.922, 0.992)),
    ("email-Enron", 2, (0.944, 0.985)), ("email-Enron", 3, (0.933, 0.985)),
])
def test_separate_circles_on_seeds_2_and_3(name: str, seed: int, want: tuple[float, float]) -> None:
    # Source: planted anomalies in the open graphs, as above, with other seeds (not tuned on
    # one seed). Measured, precision at 90 and AUC for rings >= 20 (listed in the
    # parameters); ring of 10: ca-GrQc 0.000, 0.767 / 0.000, 0.542; email-Enron
    # 0.000, 0.643 / 0.000, 0.500. Stars are scored as by the other ring scores.
    f = _planted_figures(name, seed)
    prec, area = f["separate-circles rings>=20"]
    assert prec >= 0.9
    assert (prec, area) == pytest.approx(want, abs=0.001)
    assert f["separate-circles stars"] == f["own stars"]


def test_shared_contact_mean_matches_networkx() -> None:
    # Source: NetworkX common neighbours of each tie (its triangle count), computed here:
    # r_i = sum_j t_ij v_j / sum_j t_ij, and 0 for a person on no triangle.
    from service.analytics.integrity.egonet import _shared_contact_mean

    G = nx.gnp_random_graph(80, 0.1, seed=9)
    G.add_edge(80, 0)  # a pendant person: no triangle
    values = np.random.default_rng(9).uniform(0, 3, 81)
    src, dst = zip(*G.edges)
    got = _shared_contact_mean(arrays(src, dst, n=81), values)
    for i in G.nodes:
        t = {j: len(list(nx.common_neighbors(G, i, j))) for j in G[i]}
        total = sum(t.values())
        want = sum(t[j] * values[j] for j in t) / total if total else 0.0
        assert got[i] == pytest.approx(want, rel=1e-12, abs=1e-15)
    assert got[80] == 0.0


def test_ring_score_lifts_the_whole_ring_and_leaves_the_rest() -> None:
    # Source: planted structure (the clique of 12 and the star of 150 in _ring_graph); the
    # ring score is the triangle-weighted mean of log(E / C N^alpha) over contacts above
    # the line, written out here from the returned fit and features.
    g, ring = _ring_graph()
    plain = oddball(g)
    r = oddball(g, ring_score="shared-contacts")
    assert {p.node for p in r.near_cliques[:12]} == set(ring.tolist())
    assert r.near_stars == plain.near_stars
    below = r.side != 1
    assert np.array_equal(r.score[below], plain.score[below])
    assert r.law_scores["E~N"] == pytest.approx(plain.law_scores["E~N"])
    fit = r.fits[0]
    n_, e_ = r.features.neighbours.astype(float), r.features.edges.astype(float)
    above = np.where(r.side == 1, np.log(e_ / (fit.constant * n_**fit.exponent)), 0.0)
    G = nx.Graph(zip(g.src.tolist(), g.dst.tolist()))

    def mean_over_contacts(k: int) -> float:
        t = {j: len(list(nx.common_neighbors(G, k, j))) for j in G[k]}
        total = sum(t.values())
        return sum(t[j] * above[j] for j in t) / total if total else 0.0

    raw = {k: mean_over_contacts(k) for k in np.flatnonzero(r.side == 1).tolist()}
    peak = max(raw.values())
    for k in ring.tolist() + [p.node for p in r.near_cliques[12:20]]:
        assert r.score[k] == pytest.approx(raw[k] / peak, rel=1e-9)
    with pytest.raises(InvalidParameter) as err:
        oddball(g, ring_score="group")
    assert err.value.data["allowed"] == ["own", "shared-contacts", "separate-circles"]


def _nx_circles(G: nx.Graph, i: int) -> int:
    return nx.number_connected_components(G.subgraph(G[i])) if G.degree(i) else 0


@pytest.mark.parametrize("seed,p", [(0, 0.05), (1, 0.15), (2, 0.3)])
def test_contact_circles_match_networkx(seed: int, p: float) -> None:
    # Source: NetworkX, number_connected_components of the subgraph induced by each
    # person's neighbours (the person left out), computed here; 0 for an isolated person.
    G = nx.gnp_random_graph(120, p, seed=seed)
    G.add_node(120)
    G.add_edges_from([(121, 122), (121, 123)])  # a path: 2 circles at its middle
    src, dst = zip(*G.edges)
    got = contact_circles(arrays(src, dst, n=124))
    want = np.array([_nx_circles(G, i) for i in range(124)])
    assert np.array_equal(got, want)
    assert got[120] == 0 and got[121] == 2


def test_contact_circles_read_the_graph_as_simple_and_undirected() -> None:
    # Source: NetworkX on the undirected simple graph written out by hand: both directions of
    # 0-1 and the repeated 1-2 are one tie each, the self-loop 3-3 is dropped.
    g = arrays([0, 1, 1, 1, 2, 3, 3, 0], [1, 0, 2, 2, 0, 3, 4, 3], directed=True)
    G = nx.Graph([(0, 1), (1, 2), (2, 0), (3, 4), (0, 3)])
    assert contact_circles(g).tolist() == [_nx_circles(G, i) for i in range(5)]


def _stitched_and_closed() -> tuple[GraphArrays, np.ndarray, np.ndarray]:
    """The clique of 12 of _ring_graph (people with contacts of their own) and a closed
    clique of 16 new people who know nobody else."""
    G = nx.powerlaw_cluster_graph(2000, 3, 0.5, seed=5)
    ring = np.arange(1000, 1012)
    G.add_edges_from((int(ring[a]), int(ring[b])) for a, b in zip(*np.triu_indices(12, 1)))
    closed = np.arange(2000, 2016)
    G.add_edges_from((int(closed[a]), int(closed[b])) for a, b in zip(*np.triu_indices(16, 1)))
    src, dst = zip(*G.edges)
    return arrays(src, dst, n=2016), ring, closed


def test_separate_circles_put_a_stitched_ring_before_a_closed_group() -> None:
    # Source: planted structure, and the score written out here with NetworkX: per person,
    # (sum_j t_ij d_j / sum_j t_ij) * (sum_j t_ij a_j / sum_j t_ij), t_ij the common
    # neighbours of the tie, d_j = log(E_j / C N_j^alpha) above the line (else 0) and
    # a_j = 1 when j's contacts form two or more components; divided by its maximum.
    g, ring, closed = _stitched_and_closed()
    shared = oddball(g, ring_score="shared-contacts")
    r = oddball(g, ring_score="separate-circles")
    # The closed clique is the denser group, so the shared-contacts score lists it first ...
    assert {p.node for p in shared.near_cliques[:16]} == set(closed.tolist())
    # ... while its members have no contact outside it: one circle each, and the ring first.
    assert {p.node for p in r.near_cliques[:12]} == set(ring.tolist())
    assert (r.score[closed] == 0).all()
    plain = oddball(g)
    assert np.array_equal(r.score[r.side != 1], plain.score[plain.side != 1])
    fit = r.fits[0]
    n_, e_ = r.features.neighbours.astype(float), r.features.edges.astype(float)
    d = np.where(r.side == 1, np.log(e_ / (fit.constant * n_**fit.exponent)), 0.0)
    G = nx.Graph(zip(g.src.tolist(), g.dst.tolist()))
    apart = {i: float(_nx_circles(G, i) >= 2) for i in G}

    def raw(k: int) -> float:
        t = {j: len(list(nx.common_neighbors(G, k, j))) for j in G[k]}
        total = sum(t.values())
        if not total:
            return 0.0
        return (sum(t[j] * d[j] for j in t) / total) * (sum(t[j] * apart[j] for j in t) / total)

    values = {k: raw(k) for k in np.flatnonzero(r.side == 1).tolist()}
    peak = max(values.values())
    for k in ring.tolist() + closed.tolist() + [p.node for p in r.near_cliques[12:30]]:
        assert r.score[k] == pytest.approx(values[k] / peak, rel=1e-9, abs=1e-15)


def test_evidence_sentence() -> None:
    # Source: hand-made numbers; ties among contacts are E - N, possible N(N-1)/2.
    from service.analytics.integrity.egonet import _evidence

    assert _evidence(12, 73, 20.4) == ("12 contacts with 61 ties among them (92% of the 66 "
                                       "possible); about 8 expected for that many contacts")
    assert _evidence(1383, 1831, 46733.0).startswith(
        "1,383 contacts with 448 ties among them (under 1% of the 955,653 possible)")
    assert "with 1 tie among" in _evidence(3, 4, 3.2)

"""Tests for service.analytics.structure.profile: power-law fits (Clauset, Shalizi and Newman
2009), clustering, assortativity and distances against NetworkX / igraph."""

from __future__ import annotations

import math

import networkx as nx
import numpy as np
import pytest
from scipy.special import zeta

from service.analytics.structure import profile as P
from service.analytics.errors import Cancelled, EmptyGraph, InvalidParameter
from service.analytics.graph import GraphArrays, to_igraph
from tests.datasets import snap_edges


def from_nx(G: nx.Graph) -> GraphArrays:
    e = np.array(list(G.edges()), dtype=np.int32).reshape(-1, 2)
    return GraphArrays(G.number_of_nodes(), G.is_directed(), e[:, 0].copy(), e[:, 1].copy(),
                       np.ones(len(e)))


def discrete_powerlaw_sample(alpha: float, size: int, seed: int) -> np.ndarray:
    """Inverse transform from the discrete law p(x) = x^-alpha / zeta(alpha), x >= 1."""
    xs = np.arange(1, 1_000_001, dtype=float)
    surv = zeta(alpha, xs) / zeta(alpha, 1.0)  # P(X >= x)
    u = np.random.default_rng(seed).random(size)
    u = np.maximum(u, surv[-1])  # P(X >= 10^6) ~ 1e-9 at alpha 2.5: clip, practically never
    return xs[np.searchsorted(-surv, -u, side="right") - 1]


def test_exports() -> None:
    assert set(P.__all__) == {"graph_profile", "powerlaw_fit", "powerlaw_alpha",
                              "log_binned_histogram", "sample_distances"}


def test_continuous_fit_recovers_pareto_alpha() -> None:
    # Pareto with density ~ x^-2.5 above 1, by inverse transform x = (1-u)^(-1/(alpha-1)).
    x = (1.0 - np.random.default_rng(11).random(5000)) ** (-1.0 / 1.5)
    fixed = P.powerlaw_fit(x, discrete=False, x_min=1.0)
    # Source: Clauset et al. 2009, MLE with se (alpha-1)/sqrt(n); truth 2.5 by construction.
    assert abs(fixed["alpha"] - 2.5) <= 3 * fixed["alpha_se"]
    assert fixed["alpha"] == pytest.approx(1 + 5000 / np.log(x).sum())  # eq. 3.1, closed form
    assert fixed["alpha_se"] == pytest.approx((fixed["alpha"] - 1) / math.sqrt(5000))
    free = P.powerlaw_fit(x, discrete=False)  # x_min by smallest KS distance
    assert abs(free["alpha"] - 2.5) <= 3 * free["alpha_se"]
    assert free["x_min"] < 2.0 and free["n_tail"] >= 2500


def test_discrete_fit_recovers_alpha() -> None:
    x = discrete_powerlaw_sample(2.5, 5000, seed=12)
    fixed = P.powerlaw_fit(x, discrete=True, x_min=1)
    # Source: truth alpha = 2.5 by construction; Clauset et al. 2009 discrete MLE (eq. 3.5).
    assert abs(fixed["alpha"] - 2.5) <= 3 * fixed["alpha_se"]
    free = P.powerlaw_fit(x, discrete=True)
    assert abs(free["alpha"] - 2.5) <= 3 * free["alpha_se"]
    # The continuous formula is biased on small integers (Clauset et al. 2009, sec. 3.1):
    naive = P.powerlaw_fit(x, discrete=False, x_min=1.0)
    assert abs(naive["alpha"] - 2.5) > 3 * naive["alpha_se"]


def test_discrete_standard_error_tends_to_continuous_one() -> None:
    # Source: Clauset et al. 2009: eq. 3.6 approaches (alpha-1)/sqrt(n) as x_min grows.
    x = discrete_powerlaw_sample(2.5, 20000, seed=3)
    alpha, se = P.powerlaw_alpha(x, 30, discrete=True)
    n_tail = int(np.count_nonzero(x >= 30))
    assert se * math.sqrt(n_tail) == pytest.approx(alpha - 1, rel=0.03)


def test_bootstrap_plausible_for_power_law_not_for_erdos_renyi() -> None:
    pl = P.powerlaw_fit(discrete_powerlaw_sample(2.5, 2000, seed=102), discrete=True,
                        bootstrap=40, random_seed=1)
    # Source: Clauset et al. 2009, plausible when p > 0.1 (a true power law).
    assert pl["p_value"] > 0.1 and pl["plausible"] is True
    G = nx.fast_gnp_random_graph(10000, 10 / 10000, seed=1)  # Poisson degrees, mean 10
    deg = np.array([d for _, d in G.degree()])
    er = P.powerlaw_fit(deg[deg > 0], discrete=True, bootstrap=40, random_seed=1)
    assert er["p_value"] <= 0.1 and er["plausible"] is False
    assert er["bootstrap"] == 40


def test_powerlaw_fit_rejects_bad_input() -> None:
    with pytest.raises(InvalidParameter):
        P.powerlaw_fit(np.array([1.0, -2.0]), discrete=False)
    with pytest.raises(InvalidParameter):
        P.powerlaw_fit(np.array([1.5, 2.0]), discrete=True)
    with pytest.raises(InvalidParameter):
        P.powerlaw_fit(np.ones(5), discrete=True)


def test_log_binned_histogram() -> None:
    x = np.array([0, 1, 1, 2, 3, 5, 8, 13, 21, 34, 55, 89, 144])
    h = P.log_binned_histogram(x)
    assert sum(h["counts"]) == 12 and h["zeros"] == 1
    assert h["edges"][0] == 1 and h["edges"][-1] == 145
    assert np.all(np.diff(h["edges"]) > 0)
    widths = np.diff(h["edges"])
    assert np.dot(h["density"], widths) == pytest.approx(1.0)  # a probability mass


@pytest.mark.parametrize("G", [nx.karate_club_graph(),
                               nx.gnp_random_graph(200, 0.03, seed=5, directed=True)],
                         ids=["karate", "directed"])
def test_profile_matches_networkx(G) -> None:
    g = from_nx(G)
    p = P.graph_profile(g, bfs_samples=10_000)
    U = nx.Graph(G)
    # Source: NetworkX on the same graph, computed in this test.
    assert p["clustering"]["average"] == pytest.approx(nx.average_clustering(U))
    assert p["clustering"]["global"] == pytest.approx(nx.transitivity(U))
    assert p["assortativity"] == pytest.approx(nx.degree_assortativity_coefficient(G))
    lengths = [d for _, dd in nx.all_pairs_shortest_path_length(G) for d in dd.values() if d]
    d = p["distances"]
    assert d["sources"] == g.n and d["pairs"] == len(lengths)
    assert d["average_distance_se"] == 0.0  # every node a source: nothing sampled
    assert d["average_distance"] == pytest.approx(np.mean(lengths))
    share = np.array([np.mean(np.array(lengths) <= k) for k in range(max(lengths) + 1)])
    assert d["effective_diameter_hops"] == int(np.argmax(share >= 0.9))
    assert d["effective_diameter_hops"] - 1 <= d["effective_diameter"] <= \
        d["effective_diameter_hops"]
    assert set(p["readings"]) >= {"size", "components", "degrees", "power_law", "clustering",
                                  "assortativity", "distances", "communities"}
    assert p["summary"]["nodes"] == g.n


def test_karate_profile_readings() -> None:
    p = P.graph_profile(from_nx(nx.karate_club_graph()))
    # Source: nx.average_shortest_path_length(karate) = 2.4082 (computed by NetworkX
    # in test_profile_matches_networkx); all 34 nodes are sources.
    assert p["distances"]["average_distance"] == pytest.approx(
        nx.average_shortest_path_length(nx.karate_club_graph()))
    assert p["communities"]["modularity"] >= 0.40  # best known ~0.42 (from memory)
    assert "often friends" in p["readings"]["clustering"]  # average clustering 0.57
    assert "hub-and-spoke" in p["readings"]["assortativity"]  # assortativity -0.48
    assert "not tested" in p["readings"]["power_law"]  # bootstrap = 0


def test_erdos_renyi_profile_reads_not_plausible() -> None:
    G = nx.fast_gnp_random_graph(10000, 10 / 10000, seed=1)
    seen: list[float] = []
    p = P.graph_profile(from_nx(G), bootstrap=40, random_seed=1, bfs_samples=50,
                        progress=lambda f, m: seen.append(f))
    assert "not a plausible fit" in p["readings"]["power_law"]
    assert seen == sorted(seen) and seen[-1] == 1.0
    assert p["distances"]["sources"] == 50


@pytest.mark.shared
def test_ca_grqc_sampled_distances_close_to_exact() -> None:
    # Own load: tests.datasets.snap_graph drops self-loops *and* the one node that
    # has nothing but a self-loop (5,241 nodes); the published figures count 5,242.
    e = snap_edges("ca-GrQc")
    ids, inv = np.unique(e.ravel(), return_inverse=True)
    inv = inv.reshape(-1, 2).astype(np.int32)
    g = GraphArrays(len(ids), False, inv[:, 0].copy(), inv[:, 1].copy(), np.ones(len(inv)))
    assert g.n == 5242  # Source: datasets/README.md
    p = P.graph_profile(g, bfs_samples=300, random_seed=2)
    # Source: igraph average_path_length over all reachable pairs (exact, all sources).
    ig = to_igraph(g, weights=False)
    ig.simplify()
    exact = ig.average_path_length(directed=False, unconn=True)
    d = p["distances"]
    assert d["sources"] == 300 and d["average_distance_se"] > 0
    # Monte Carlo over sources: within 4 of its stated standard errors.
    assert abs(d["average_distance"] - exact) <= 4 * d["average_distance_se"]
    assert d["average_distance"] == pytest.approx(exact, rel=0.05)
    # Source: datasets/README.md (SNAP): average clustering 0.5296, computed the same way.
    assert p["clustering"]["average"] == pytest.approx(0.5296, abs=5e-5)


def test_profile_empty_and_cancel() -> None:
    with pytest.raises(EmptyGraph):
        P.graph_profile(GraphArrays(0, False, np.zeros(0, np.int32), np.zeros(0, np.int32),
                                    np.zeros(0)))

    def cancel(f: float, m: str) -> None:
        raise Cancelled()

    with pytest.raises(Cancelled):
        P.graph_profile(from_nx(nx.karate_club_graph()), progress=cancel)


def _readings_agree(r: dict[str, str]) -> None:
    """The degree and assortativity readings never contradict each other."""
    if "evenly" in r["degrees"]:
        assert "hub" not in r["assortativity"], r
    if "hub-and-spoke" in r["assortativity"]:
        assert "evenly" not in r["degrees"], r


def test_star_heavy_graph_reads_heavy_tailed_and_hub_and_spoke() -> None:
    # Ten stars of 30 leaves whose centres form a ring: maximum degree 32, median 1
    # (counted in this test); leaves link only to centres, so mixing is disassortative.
    G = nx.Graph()
    for c in range(10):
        G.add_edges_from((f"c{c}", f"l{c}_{i}") for i in range(30))
        G.add_edge(f"c{c}", f"c{(c + 1) % 10}")
    G = nx.convert_node_labels_to_integers(G)
    p = P.graph_profile(from_nx(G))
    r = p["readings"]
    degrees = sorted(d for _, d in G.degree())
    assert p["summary"]["degree_max"] == degrees[-1] == 32
    assert p["summary"]["degree_median"] == float(np.median(degrees)) == 1.0
    assert r["degrees"].startswith("Heavy-tailed") and "32" in r["degrees"]
    assert p["assortativity"] == pytest.approx(nx.degree_assortativity_coefficient(G))  # NetworkX, here
    assert "hub-and-spoke" in r["assortativity"]
    _readings_agree(r)


def test_regular_graph_reads_even_without_hubs() -> None:
    G = nx.random_regular_graph(4, 200, seed=3)  # every degree is 4
    p = P.graph_profile(from_nx(G))
    r = p["readings"]
    assert "evenly" in r["degrees"] and "best connected has 4" in r["degrees"]
    assert "hub" not in r["assortativity"]
    _readings_agree(r)


@pytest.mark.parametrize("G", [nx.karate_club_graph(), nx.barabasi_albert_graph(500, 2, seed=4),
                               nx.watts_strogatz_graph(300, 6, 0.1, seed=2)],
                         ids=["karate", "preferential", "small-world"])
def test_degree_and_mixing_readings_agree(G) -> None:  # type: ignore[no-untyped-def]
    _readings_agree(P.graph_profile(from_nx(G))["readings"])

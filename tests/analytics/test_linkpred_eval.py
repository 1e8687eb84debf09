"""Tests for service.analytics.ties.evaluation: held-out link-prediction evaluation."""

from __future__ import annotations

import itertools

import networkx as nx
import numpy as np
import pytest
from scipy.stats import mannwhitneyu

from service.analytics.ties import evaluation as eval_module
from service.analytics.errors import Cancelled, InfeasibleRequest, InvalidParameter
from service.analytics.graph import GraphArrays
from service.analytics.ties.evaluation import (
    _ppr_pairs,
    _sample_two_hop,
    auc,
    evaluate_link_prediction,
    precision_at_k,
)
from service.analytics.ties.strength import neighbour_index
from tests.datasets import snap_graph


def from_nx(G: nx.Graph) -> GraphArrays:
    edges = np.array(list(G.edges()), dtype=np.int32).reshape(-1, 2)
    return GraphArrays(G.number_of_nodes(), G.is_directed(), edges[:, 0].copy(),
                       edges[:, 1].copy(), np.ones(len(edges)))


def test_auc_matches_mann_whitney_with_ties() -> None:
    rng = np.random.default_rng(4)
    pos = rng.integers(0, 6, 40).astype(float)
    neg = rng.integers(0, 4, 55).astype(float)
    # Source: SciPy scipy.stats.mannwhitneyu U statistic / (P N), computed in this test.
    assert auc(pos, neg) == pytest.approx(mannwhitneyu(pos, neg).statistic / (40 * 55))
    # Source: definition, every positive-negative pair compared (ties count 1/2).
    brute = np.mean([(p > q) + 0.5 * (p == q) for p in pos for q in neg])
    assert auc(pos, neg) == pytest.approx(brute)


def test_precision_at_k_shares_ties_at_the_cut() -> None:
    pos = np.array([5.0, 3.0, 3.0])
    neg = np.array([3.0, 1.0])
    # Source: expectation over every ordering of the three pairs tied at 3.0, computed here.
    labels = [1, 1, 0]
    orders = list(itertools.permutations(labels))
    expected = np.mean([(1 + o[0]) / 2 for o in orders])
    assert precision_at_k(pos, neg, 2) == pytest.approx(expected)
    assert precision_at_k(pos, neg, 1) == 1.0
    assert precision_at_k(pos, neg, 10) == pytest.approx(3 / 5)


def test_ppr_pair_score_is_symmetrised_pagerank() -> None:
    G = nx.gnp_random_graph(40, 0.12, seed=1)
    ix = neighbour_index(from_nx(G))
    u = np.array([0, 0, 3, 5, 9], np.int32)
    v = np.array([7, 12, 4, 5, 30], np.int32)
    got = _ppr_pairs(ix, u, v, 0.85, 1e-9, chunk=2)
    for a, b, s in zip(u.tolist(), v.tolist(), got):
        pa = nx.pagerank(G, alpha=0.85, personalization={a: 1}, weight=None, tol=1e-13)
        pb = nx.pagerank(G, alpha=0.85, personalization={b: 1}, weight=None, tol=1e-13)
        # Source: NetworkX nx.pagerank, ppr_u(v) + ppr_v(u); push error below eps * degree.
        assert s == pytest.approx(pa[b] + pb[a], abs=1e-6)


def test_holdout_split_and_reproducibility() -> None:
    G = nx.gnp_random_graph(120, 0.06, seed=9)
    g = from_nx(G)
    a = evaluate_link_prediction(g, methods=["adamic_adar", "jaccard"], holdout=0.2,
                                 random_seed=3, negatives_per_positive=2, k=20)
    b = evaluate_link_prediction(g, methods=["adamic_adar", "jaccard"], holdout=0.2,
                                 random_seed=3, negatives_per_positive=2, k=20)
    c = evaluate_link_prediction(g, methods=["adamic_adar", "jaccard"], holdout=0.2,
                                 random_seed=4, negatives_per_positive=2, k=20)
    assert a == b
    assert a["methods"] != c["methods"]
    h = round(0.2 * g.m)
    assert a["positives"] == a["hidden"] == h
    assert a["negatives"] == 2 * h and a["train_edges"] == g.m - h
    assert a["base_rate"] == pytest.approx(1 / 3)
    assert a["best"] in ("adamic_adar", "jaccard")
    for r in a["methods"].values():
        assert 0 <= r["auc"] <= 1 and 0 <= r["precision_at_k"] <= 1


def test_max_positives_caps_the_scored_pairs() -> None:
    g = from_nx(nx.gnp_random_graph(120, 0.06, seed=9))
    r = evaluate_link_prediction(g, methods=["resource_allocation"], holdout=0.3, max_positives=25,
                                 negatives_per_positive=3)
    h = round(0.3 * g.m)
    assert r["hidden"] == h and r["train_edges"] == g.m - h
    assert r["positives"] == 25 and r["negatives"] == 75


def test_two_hop_negatives_share_a_contact_and_are_untied() -> None:
    G = nx.gnp_random_graph(100, 0.05, seed=6)
    ix = neighbour_index(from_nx(G))
    keys = np.sort(np.array([min(e) * 100 + max(e) for e in G.edges()], dtype=np.int64))
    u, v = _sample_two_hop(ix, keys, 300, np.random.default_rng(0))
    assert len(u) == 300
    for a, b in zip(u.tolist(), v.tolist()):
        # Source: NetworkX G.has_edge and nx.common_neighbors, computed in this test.
        assert a != b and not G.has_edge(a, b)
        assert len(list(nx.common_neighbors(G, a, b))) >= 1
    r = evaluate_link_prediction(from_nx(G), methods=["common_neighbours"], negatives="two_hop")
    assert r["negative_sampling"] == "two_hop"
    with pytest.raises(InvalidParameter):
        evaluate_link_prediction(from_nx(G), negatives="hard")
    with pytest.raises(InfeasibleRequest):  # complete graph: no untied pair at all
        evaluate_link_prediction(from_nx(nx.complete_graph(5)), negatives="two_hop")


def test_directed_holdout_removes_both_arcs() -> None:
    # Every tie reciprocated: hiding a tie must remove two arcs.
    G = nx.gnp_random_graph(50, 0.1, seed=2)
    D = nx.DiGraph(G)
    g = from_nx(D)
    r = evaluate_link_prediction(g, methods=["common_neighbours"], holdout=0.1)
    assert r["train_edges"] == g.m - 2 * r["positives"]


def test_progress_and_cancel() -> None:
    g = from_nx(nx.gnp_random_graph(60, 0.1, seed=5))
    seen: list[float] = []
    evaluate_link_prediction(g, methods=["adamic_adar", "personalized_pagerank"],
                             progress=seen.append)
    assert seen == sorted(seen) and seen[-1] == 1.0

    def stop(f: float) -> None:
        raise Cancelled(job_id="x")

    with pytest.raises(Cancelled):
        evaluate_link_prediction(g, progress=stop)


def test_bad_settings() -> None:
    g = from_nx(nx.gnp_random_graph(30, 0.2, seed=1))
    with pytest.raises(InvalidParameter):
        evaluate_link_prediction(g, holdout=1.0)
    with pytest.raises(InvalidParameter):
        evaluate_link_prediction(g, methods=["katz"])
    with pytest.raises(InvalidParameter):
        evaluate_link_prediction(g, negatives_per_positive=0)
    with pytest.raises(InvalidParameter):
        evaluate_link_prediction(g, max_positives=0)
    with pytest.raises(InfeasibleRequest):
        evaluate_link_prediction(from_nx(nx.complete_graph(6)))
    with pytest.raises(InfeasibleRequest):
        evaluate_link_prediction(from_nx(nx.path_graph(2)))


def test_all_exported() -> None:
    for name in eval_module.__all__:
        assert hasattr(eval_module, name)


@pytest.mark.shared
def test_ca_grqc_pattern() -> None:
    g, _ = snap_graph("ca-GrQc", directed=False)
    r = evaluate_link_prediction(g, holdout=0.1, random_seed=0, negatives_per_positive=1)
    auc_of = {m: v["auc"] for m, v in r["methods"].items()}
    # Source: pattern of Liben-Nowell & Kleinberg (2007) and Zhou, Lu & Zhang (2009)
    # (REFERENCES.md): neighbourhood indices beat preferential attachment, all beat random.
    assert auc_of["adamic_adar"] > auc_of["preferential_attachment"]
    assert auc_of["resource_allocation"] > auc_of["preferential_attachment"]
    assert all(a > 0.5 for a in auc_of.values())
    assert r["positives"] == round(0.1 * (14496 - 12))  # 12 self-loops are not ties
    # Hard (two-hop) negatives: harder for every method, still better than random for AA and RA.
    hard = evaluate_link_prediction(g, methods=["adamic_adar", "resource_allocation",
                                                "common_neighbours"], negatives="two_hop")
    for m, v in hard["methods"].items():
        assert 0.5 < v["auc"] < auc_of[m]

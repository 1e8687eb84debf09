"""Backbones of projections: disparity filter and SDSM (service/analytics/events/backbone.py)."""

from __future__ import annotations

import itertools

import networkx as nx
import numpy as np
import pytest
from networkx.algorithms import bipartite
from scipy import integrate, optimize, stats

from service.analytics.events import _kernels as K
from service.analytics.events.backbone import (
    EmptyBackbone,
    adjust_p_values,
    bicm,
    disparity_filter,
    sdsm,
    sdsm_p_values,
)
from service.analytics.errors import InvalidParameter
from service.analytics.events.projection import Projection, event_table, project_events, project_table


def _graph(src, dst, w, n, directed=False):
    src = np.asarray(src, np.int32)
    return Projection(src=src, dst=np.asarray(dst, np.int32), weight=np.asarray(w, float),
                      shared=np.ones(len(src), np.int32), strength=None, degree=None,
                      method="given", directed=directed,
                      n_people=n, rows=0, duplicate_rows=0, events=0, largest_event=0,
                      max_event_size=None, oversized="drop", events_over_cap=0, events_single=0,
                      people_in_events=n, people_without_ties=0)


def _closed_form(g):
    """Source: closed form alpha_ij = (1 - w_ij/s_i)^(k_i - 1), Serrano et al. (2009)."""
    s: dict[int, float] = {}
    k: dict[int, int] = {}
    for a, b, w in zip(g.src.tolist(), g.dst.tolist(), g.weight.tolist()):
        for v in (a, b):
            s[v] = s.get(v, 0.0) + w
            k[v] = k.get(v, 0) + 1
    out = []
    for a, b, w in zip(g.src.tolist(), g.dst.tolist(), g.weight.tolist()):
        out.append(((1 - w / s[a]) ** (k[a] - 1), (1 - w / s[b]) ** (k[b] - 1), k[a], k[b]))
    return out


def _davis_newman():
    G = nx.davis_southern_women_graph()
    women = sorted(n for n, d in G.nodes(data=True) if d["bipartite"] == 0)
    idx = {w: i for i, w in enumerate(women)}
    # Source: NetworkX collaboration_weighted_projected_graph, computed in this test.
    P = bipartite.collaboration_weighted_projected_graph(G, women)
    e = sorted((min(idx[a], idx[b]), max(idx[a], idx[b]), d["weight"]) for a, b, d in P.edges(data=True))
    return _graph([x[0] for x in e], [x[1] for x in e], [x[2] for x in e], len(women))


def _random_weighted(seed, n=60, m=400):
    rng = np.random.default_rng(seed)
    pairs = set()
    while len(pairs) < m:
        a, b = rng.integers(0, n, 2)
        if a != b:
            pairs.add((min(a, b), max(a, b)))
    e = sorted(pairs)
    return _graph([x[0] for x in e], [x[1] for x in e], rng.pareto(1.5, m) + 0.1, n)


@pytest.mark.parametrize("which", ["davis", "random0", "random1"])
def test_disparity_p_values_equal_closed_form(which):
    g = _davis_newman() if which == "davis" else _random_weighted(int(which[-1]))
    b = disparity_filter(g, alpha=0.3)
    cf = _closed_form(g)
    expected = [min(pa if ka > 1 else 1.0, pb if kb > 1 else 1.0) for pa, pb, ka, kb in cf]
    np.testing.assert_allclose(b.p_value, expected, rtol=1e-10, atol=1e-300)
    assert np.array_equal(b.keep, np.asarray(expected) < 0.3)
    both = disparity_filter(g, alpha=0.3, rule="both")
    exp_both = [max(pa if ka > 1 else pb, pb if kb > 1 else pa) for pa, pb, ka, kb in cf]
    np.testing.assert_allclose(both.p_value, exp_both, rtol=1e-10, atol=1e-300)
    assert np.all(both.keep <= b.keep)


def test_closed_form_equals_the_papers_integral():
    # Source: Serrano et al. (2009) integral alpha = 1 - (k - 1) int_0^p (1 - x)^(k - 2) dx,
    # by SciPy quad, against our p-values on the Davis projection.
    g = _davis_newman()
    b = disparity_filter(g, alpha=0.9)
    s = np.bincount(np.concatenate([g.src, g.dst]), np.concatenate([g.weight, g.weight]))
    k = np.bincount(np.concatenate([g.src, g.dst]))
    for e in range(0, g.pairs, 7):
        vals = []
        for v in (g.src[e], g.dst[e]):
            p = g.weight[e] / s[v]
            vals.append(1 - (k[v] - 1) * integrate.quad(lambda x: (1 - x) ** (k[v] - 2), 0, p)[0])
        assert b.p_value[e] == pytest.approx(min(vals), rel=1e-8, abs=1e-14)


def test_disparity_on_directed_resource_allocation():
    rng = np.random.default_rng(3)
    person = rng.integers(0, 30, 200)
    event = rng.integers(0, 40, 200)
    g = project_events(person, event, method="resource_allocation", singletons="skip",
                       n_people=30, n_events=40)
    b = disparity_filter(g, alpha=0.2)
    # Source: closed form at the source's out-ties and the target's in-ties.
    s_out = np.bincount(g.src, g.weight, 30)
    k_out = np.bincount(g.src, minlength=30)
    s_in = np.bincount(g.dst, g.weight, 30)
    k_in = np.bincount(g.dst, minlength=30)
    for e in range(g.pairs):
        a, c, w = g.src[e], g.dst[e], g.weight[e]
        pa = (1 - w / s_out[a]) ** (k_out[a] - 1) if k_out[a] > 1 else 1.0
        pc = (1 - w / s_in[c]) ** (k_in[c] - 1) if k_in[c] > 1 else 1.0
        assert b.p_value[e] == pytest.approx(min(pa, pc), rel=1e-10, abs=1e-300)


def test_degree_one_conventions_and_summary():
    # A star centre 0 with leaves 1..4 (leaf 1 heavy) and an isolated dyad (5, 6).
    g = _graph([0, 0, 0, 0, 5], [1, 2, 3, 4, 6], [10.0, 1.0, 1.0, 1.0, 2.0], 7)
    b = disparity_filter(g, alpha=0.1)
    # Source: closed form at the centre (k = 4, s = 13): (1 - 10/13)^3 = 0.0123 < 0.1;
    # (1 - 1/13)^3 = 0.787. The dyad has no test at either end: p = 1.
    assert b.p_value.tolist() == pytest.approx([(3 / 13) ** 3, (12 / 13) ** 3,
                                                (12 / 13) ** 3, (12 / 13) ** 3, 1.0])
    assert b.keep.tolist() == [True, False, False, False, False]
    assert b.edge_share == pytest.approx(1 / 5)
    assert b.weight_share == pytest.approx(10 / 15)
    assert b.people_with_ties == 7 and b.people_left_without_ties == 5
    assert b.people_without_ties_share == pytest.approx(5 / 7)
    kept_all = disparity_filter(g, alpha=0.1, degree_one="keep")
    assert kept_all.keep.all()


def test_backbone_that_removes_everything_is_an_error_with_counts():
    # Complete graph on 6 with equal weights: every p = (1 - 1/5)^4 = 0.4096 (closed form).
    e = list(itertools.combinations(range(6), 2))
    g = _graph([a for a, _ in e], [b for _, b in e], np.ones(15), 6)
    with pytest.raises(EmptyBackbone) as err:
        disparity_filter(g, alpha=0.05)
    assert err.value.data["edges_tested"] == 15
    assert err.value.data["smallest_p_value"] == pytest.approx(0.8**4)
    from service.api.problems import problem_for

    ptype = problem_for(err.value)
    assert ptype is not None and ptype.status == 422


def test_bad_options():
    g = _random_weighted(0)
    for kw in ({"alpha": 0.0}, {"alpha": 1.5}, {"rule": "any"}, {"degree_one": "drop"},
               {"correction": "holm"}):
        with pytest.raises(InvalidParameter):
            disparity_filter(g, **kw)


def test_corrections_match_scipy():
    rng = np.random.default_rng(0)
    p = rng.uniform(0, 0.2, 50)
    # Source: SciPy stats.false_discovery_control(method="bh"), computed in this test.
    np.testing.assert_allclose(adjust_p_values(p, correction="fdr_bh"),
                               stats.false_discovery_control(p, method="bh"), rtol=1e-12)
    padded = np.concatenate([p, np.ones(30)])
    np.testing.assert_allclose(adjust_p_values(p, correction="fdr_bh", tests=80),
                               stats.false_discovery_control(padded, method="bh")[:50], rtol=1e-12)
    # Source: closed form min(1, m p).
    np.testing.assert_allclose(adjust_p_values(p, correction="bonferroni"), np.minimum(50 * p, 1))


def _small_table(seed, n_people=9, n_events=8, p=0.4):
    G = bipartite.random_graph(n_people, n_events, p, seed=seed)
    rows = [(u, v - n_people) if u < n_people else (v, u - n_people) for u, v in G.edges()]
    return np.array([r[0] for r in rows]), np.array([r[1] for r in rows])


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_bicm_reproduces_degrees_and_matches_scipy_mle(seed):
    person, event = _small_table(seed, 12, 10, 0.35)
    t = event_table(person, event)
    fit = bicm(t)
    P = fit.probability(np.arange(t.n_people)[:, None], np.arange(t.n_events)[None, :])
    np.testing.assert_allclose(P.sum(axis=1), t.person_degree, atol=1e-7)
    np.testing.assert_allclose(P.sum(axis=0), t.event_size, atol=1e-7)
    # Source: SciPy L-BFGS-B on the BiCM log-likelihood with one parameter per node
    # (no degree classes), computed in this test; only nodes not saturated and not empty.
    fp = (t.person_degree > 0) & (t.person_degree < t.n_events)
    fe = (t.event_size > 0) & (t.event_size < t.n_people)
    d, f = t.person_degree[fp], t.event_size[fe]
    sat_e = int(((t.event_size == t.n_people)).sum())
    sat_p = int(((t.person_degree == t.n_events)).sum())
    d = d - sat_e
    f = f - sat_p

    def nll(theta):
        a, b = theta[: len(d)], theta[len(d):]
        z = a[:, None] + b[None, :]
        val = -(d @ a + f @ b) + np.logaddexp(0, z).sum()
        s = 1 / (1 + np.exp(-z))
        return val, np.concatenate([s.sum(1) - d, s.sum(0) - f])

    res = optimize.minimize(nll, np.zeros(len(d) + len(f)), jac=True, method="L-BFGS-B",
                            options={"gtol": 1e-12, "ftol": 1e-15, "maxiter": 10000})
    z = res.x[: len(d)][:, None] + res.x[len(d):][None, :]
    ref = 1 / (1 + np.exp(-z))
    np.testing.assert_allclose(P[np.ix_(fp, fe)], ref, atol=1e-5)


@pytest.mark.parametrize("seed", [4, 5, 6])
def test_sdsm_p_values_match_enumeration_and_scipy(seed):
    person, event = _small_table(seed)
    t = event_table(person, event)
    g = project_table(t, method="count", max_event_size=None, singletons="skip")
    fit = bicm(t)
    got = sdsm_p_values(t, fit, g.src, g.dst, g.shared.astype(np.int64))
    m = t.n_events
    outcomes = np.array(list(itertools.product([0, 1], repeat=m)))
    for e in range(g.pairs):
        q = fit.probability(g.src[e], np.arange(m)) * fit.probability(g.dst[e], np.arange(m))
        c = int(g.shared[e])
        # Source: exact enumeration of all 2^m outcomes (m = 8).
        probs = np.prod(np.where(outcomes == 1, q, 1 - q), axis=1)
        enum = probs[outcomes.sum(axis=1) >= c].sum()
        # Source: SciPy stats.poisson_binom survival function.
        sci = stats.poisson_binom.sf(c - 1, q)
        assert got[e] == pytest.approx(enum, rel=1e-9, abs=1e-15)
        assert got[e] == pytest.approx(sci, rel=1e-9, abs=1e-15)


def test_grouped_exact_tail_matches_scipy_on_larger_groups():
    rng = np.random.default_rng(9)
    for _ in range(5):
        q = rng.uniform(0, 0.3, 6)
        mult = rng.integers(1, 60, 6)
        full = np.repeat(q, mult)
        for c in (1, 5, 20, 40):
            # Source: SciPy stats.poisson_binom on the expanded probability list.
            expect = stats.poisson_binom.sf(c - 1, full)
            got = K.grouped_tail_exact(q, mult.astype(np.int64), c)
            assert got == pytest.approx(expect, rel=1e-9, abs=1e-300)
            approx = K.refined_normal_tail(q, mult.astype(np.int64), c)
            # Refined normal approximation (Hong 2013): close in absolute terms.
            assert abs(approx - expect) < 0.01


def _planted(seed=0, groups=12, size=5, small_events=6, huge_events=3):
    rng = np.random.default_rng(seed)
    n = groups * size
    person, event = [], []
    e = 0
    for gi in range(groups):
        members = np.arange(gi * size, (gi + 1) * size)
        for _ in range(small_events):
            who = rng.choice(members, size=rng.integers(3, size + 1), replace=False)
            person += who.tolist()
            event += [e] * len(who)
            e += 1
    for _ in range(huge_events):
        person += list(range(n))
        event += [e] * n
        e += 1
    return np.array(person), np.array(event), n, size


def _is_within(src, dst, size):
    return (src // size) == (dst // size)


def test_planted_groups_survive_the_disparity_filter():
    person, event, n, size = _planted()
    g = project_events(person, event, method="newman", max_event_size=None)
    b = disparity_filter(g, alpha=0.05)
    within = _is_within(g.src, g.dst, size)
    # Group ties kept, ties made only by the huge events dropped.
    assert b.keep[within].mean() >= 0.9
    assert not b.keep[~within].any()
    assert b.people_left_without_ties == 0


def test_planted_groups_survive_sdsm():
    person, event, n, size = _planted(small_events=10)
    b = sdsm(person, event, alpha=0.05, correction="fdr_bh")
    g = b.graph
    within = _is_within(g.src, g.dst, size)
    assert b.keep[within].mean() >= 0.9
    assert not b.keep[~within].any()
    assert b.edge_share < 0.2 and b.weight_share < b.edge_share + 0.2


def test_sdsm_refuses_when_nothing_is_significant():
    # Everyone meets everyone at every event: nothing beats chance.
    person = np.tile(np.arange(5), 4)
    event = np.repeat(np.arange(4), 5)
    with pytest.raises(EmptyBackbone) as err:
        sdsm(person, event)
    assert err.value.data["edges_tested"] == 10


@pytest.mark.parametrize("seed", [3, 8])
def test_bicm_agrees_with_the_bicm_package(seed):
    pkg = pytest.importorskip("bicm", reason="the bicm package is an optional cross-check")
    rng = np.random.default_rng(seed)
    A = (rng.random((15, 12)) < 0.3).astype(int)
    for _ in range(3):  # no empty or saturated rows or columns (the package needs none)
        A = A[(A.sum(1) > 0) & (A.sum(1) < A.shape[1])]
        A = A[:, (A.sum(0) > 0) & (A.sum(0) < A.shape[0])]
    person, event = np.nonzero(A)
    fit = bicm(person, event)
    P = fit.probability(np.arange(A.shape[0])[:, None], np.arange(A.shape[1])[None, :])
    # Source: the bicm package (Saracco, Squartini et al.), BipartiteGraph.get_bicm_matrix.
    bg = pkg.BipartiteGraph(biadjacency=A)
    bg.solve_tool(print_error=False)
    np.testing.assert_allclose(P, bg.get_bicm_matrix(), atol=1e-7)


def test_grouped_exact_tail_with_large_groups_matches_scipy_binomials():
    # Source: SciPy stats.binom (pmf and sf), two groups convolved directly in this test.
    for n1, q1, n2, q2 in [(200_000, 1e-5, 50, 0.3), (5_000, 0.002, 300_000, 2e-6),
                           (100, 0.5, 10, 0.9)]:
        t = np.arange(0, 80)
        pmf1 = stats.binom.pmf(t, n1, q1)
        for c in (1, 3, 8, 20, 40):
            expect = sum(pmf1[s] * stats.binom.sf(c - s - 1, n2, q2) for s in range(c)) + \
                stats.binom.sf(c - 1, n1, q1)
            got = K.grouped_tail_exact(np.array([q1, q2]), np.array([n1, n2], np.int64), c)
            assert got == pytest.approx(expect, rel=1e-8, abs=1e-300)


def test_sdsm_bounds_pair_work_and_checks_options():
    from service.analytics.events.projection import ProjectionTooLarge

    person = np.concatenate([np.arange(50), [0, 1]])
    event = np.concatenate([np.zeros(50, int), [1, 1]])
    with pytest.raises(ProjectionTooLarge) as err:
        sdsm(person, event, max_pair_slots=100)
    assert err.value.data["pair_slots"] == 50 * 49 // 2 + 1
    with pytest.raises(InvalidParameter):
        sdsm(person, event, correction="holm")
    with pytest.raises(InvalidParameter):
        sdsm(person, event, alpha=0.0)


def test_disparity_same_with_and_without_the_projections_node_totals():
    import dataclasses

    person, event, n, size = _planted(seed=2)
    g = project_events(person, event, method="newman", max_event_size=None)
    bare = dataclasses.replace(g, strength=None, degree=None)
    for rule in ("either", "both"):
        a = disparity_filter(g, alpha=0.05, rule=rule)
        b = disparity_filter(bare, alpha=0.05, rule=rule)
        np.testing.assert_allclose(a.p_value, b.p_value, rtol=1e-12)


def test_sdsm_uses_exact_tails_for_small_counts():
    # At counts of a few, the normal approximation can be off by several hundredths
    # (seen here: up to about 0.05), so counts up to 50 take the exact tail by default.
    person, event, n, size = _planted(seed=4, small_events=10)
    t = event_table(person, event)
    g = project_table(t, method="count", max_event_size=None)
    fit = bicm(t)
    counts = g.shared.astype(np.int64)
    exact = sdsm_p_values(t, fit, g.src, g.dst, counts, exact_limit=10**6)
    default = sdsm_p_values(t, fit, g.src, g.dst, counts)
    approx = sdsm_p_values(t, fit, g.src, g.dst, counts, exact_limit=0)
    assert counts.max() <= 50
    np.testing.assert_array_equal(default, exact)
    assert np.abs(exact - approx).max() > 0.01


@pytest.mark.parametrize("rule,degree_one", [("either", "other_end"), ("both", "other_end"), ("either", "keep"),
                                             ("both", "keep")])
def test_p_values_by_blocks_and_threads_equal_the_closed_form(rule, degree_one):
    # Source: the closed form alpha_ij = (1 - w_ij/s_i)^(k_i - 1) of Serrano et al. (2009),
    # computed here with numpy for every tie. The kernel reads targets a block of ties at a
    # time and splits the ties over threads; every thread count gives the same bits.
    rng = np.random.default_rng(11)
    person, event = rng.integers(0, 40_000, 160_000), rng.integers(0, 30_000, 160_000)
    g = project_events(person, event, method="newman", singletons="skip")
    assert g.pairs > 1 << 16  # enough ties to be split over threads
    runs = {threads: disparity_filter(g, alpha=0.2, rule=rule, degree_one=degree_one, threads=threads)
            for threads in (1, 2, 3)}
    base = runs[1]
    for b in runs.values():
        assert np.array_equal(b.p_value, base.p_value) and np.array_equal(b.keep, base.keep)
    s, k = g.strength, g.degree.astype(float)
    pa = np.where(k[g.src] > 1, (1 - g.weight / s[g.src]) ** (k[g.src] - 1), 1.0)
    pb = np.where(k[g.dst] > 1, (1 - g.weight / s[g.dst]) ** (k[g.dst] - 1), 1.0)
    if rule == "both":
        pa, pb = np.where(k[g.src] == 1, pb, pa), np.where(k[g.dst] == 1, pa, pb)
        want = np.maximum(pa, pb)
    else:
        want = np.minimum(pa, pb)
    np.testing.assert_allclose(base.p_value, want, rtol=1e-9, atol=1e-300)
    if degree_one == "keep":
        assert base.keep[(k[g.src] == 1) | (k[g.dst] == 1)].all()

"""Learning IC probabilities from past campaigns: EM, counting estimators, model choice."""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from service.analytics.learning._em import log_likelihood
from service.analytics.diffusion.cascades import independent_cascade
from service.analytics.errors import InvalidParameter, UnknownNode
from service.analytics.graph import GraphArrays, arcs, edge_probabilities
from service.analytics.learning.probabilities import (
    Campaign,
    adoption_chance,
    bucket_rounds,
    campaign_episodes,
    edge_features,
    em_probabilities,
    goyal_probabilities,
    learn_probabilities,
    learned_diffusion_graph,
    match_arcs,
    transfer_probabilities,
)
from tests.datasets import snap_graph


def simulate_campaigns(g: GraphArrays, arc_prob: np.ndarray, count: int, *, seeds: int = 5,
                       random_seed: int = 0) -> list[Campaign]:
    """Campaigns simulated by the service's own IC simulator from random seed sets."""
    dg = learned_diffusion_graph(g, arc_prob)
    rng = np.random.default_rng(random_seed)
    out = []
    for i in range(count):
        s = rng.choice(g.n, size=seeds, replace=False)
        r = independent_cascade(dg, s, rng_seed=int(rng.integers(1 << 31)))
        node = np.flatnonzero(r >= 0)
        out.append(Campaign(node.astype(np.int64), r[node].astype(np.int64), label=f"c{i}"))
    return out


def _fan_in_graph() -> GraphArrays:
    """Parents 0 and 1 point at 2; node 3 is a seed with no arcs (keeps every log >= 2 adopters)."""
    return GraphArrays(4, True, np.array([0, 1], np.int32), np.array([2, 2], np.int32),
                       np.ones(2))


def _fan_in_campaigns(counts: dict[tuple[bool, bool, bool], int]) -> list[Campaign]:
    out = []
    for (a0, a1, hit), k in counts.items():
        nodes = [3] + [0] * a0 + [1] * a1 + [2] * hit
        rounds = [0] + [0] * a0 + [0] * a1 + [1] * hit
        out += [Campaign(np.array(nodes), np.array(rounds), horizon=1)] * k
    return out


def test_em_maximum_equals_brute_force_grid_maximum_of_the_likelihood() -> None:
    # Source: exact enumeration of the likelihood over a grid of (p0, p1) (closed form of the IC
    # episode likelihood, Saito et al. 2008): both parents active -> 1 - (1 - p0)(1 - p1).
    counts = {(True, True, True): 7, (True, True, False): 5, (True, False, True): 3,
              (True, False, False): 6, (False, True, True): 2, (False, True, False): 9}
    runs = _fan_in_campaigns(counts)
    fit = em_probabilities(_fan_in_graph(), runs, tol=1e-13, max_iter=5000)
    grid = np.linspace(0.0005, 0.9995, 1000)
    p0, p1 = np.meshgrid(grid, grid, indexing="ij")
    both = 1 - (1 - p0) * (1 - p1)
    ll = (7 * np.log(both) + 5 * np.log(1 - both) + 3 * np.log(p0) + 6 * np.log(1 - p0)
          + 2 * np.log(p1) + 9 * np.log(1 - p1))
    i, j = np.unravel_index(np.argmax(ll), ll.shape)
    assert abs(fit.arc_prob[0] - grid[i]) < 2e-3 and abs(fit.arc_prob[1] - grid[j]) < 2e-3
    assert fit.log_likelihood >= ll.max() - 1e-9
    assert np.all(np.diff(fit.trace) >= -1e-9)


def test_one_em_step_credits_each_parent_p_over_one_minus_product() -> None:
    # Source: the E-step derived in service/analytics/learning/_em.py: E[x_u | v adopted] = p_u / P.
    runs = _fan_in_campaigns({(True, True, True): 1, (True, False, False): 1,
                              (False, True, False): 1})
    fit = em_probabilities(_fan_in_graph(), runs, max_iter=1, tol=0.0)
    start = 1 / 4  # pooled rate: 1 activation over 4 trials
    credit = start / (1 - (1 - start) ** 2)
    assert fit.arc_prob.tolist() == pytest.approx([credit / 2, credit / 2])


@pytest.mark.parametrize("k,j", [(1, 1), (5, 2), (12, 0), (9, 9)])
def test_single_edge_with_k_trials_and_j_successes_gives_j_over_k(k: int, j: int) -> None:
    # Source: Goyal, Bonchi, Lakshmanan (WSDM 2010), Bernoulli estimator A_u2v / A_u.
    g = GraphArrays(3, True, np.array([0], np.int32), np.array([1], np.int32), np.ones(1))
    hit = Campaign(np.array([0, 2, 1]), np.array([0, 0, 1]), horizon=1)
    miss = Campaign(np.array([0, 2]), np.array([0, 0]), horizon=1)
    runs = [hit] * j + [miss] * (k - j)
    assert em_probabilities(g, runs).arc_prob[0] == pytest.approx(j / k)
    assert goyal_probabilities(g, runs, prior=(0.0, 0.0))[0] == pytest.approx(j / k)
    # Beta(a, b) prior: posterior mean (j + a) / (k + a + b) (conjugacy, closed form).
    assert goyal_probabilities(g, runs, prior=(1.0, 3.0))[0] == pytest.approx((j + 1) / (k + 4))


def test_goyal_window_and_jaccard_by_hand() -> None:
    # Source: hand count of A_u, A_u2v, A_u|v (Goyal et al. 2010, Bernoulli and Jaccard forms).
    g = GraphArrays(4, True, np.array([0], np.int32), np.array([1], np.int32), np.ones(1))
    runs = [Campaign(np.array([0, 1]), np.array([0, 1])),          # credited (gap 1)
            Campaign(np.array([0, 1]), np.array([0, 3])),          # gap 3: only with window 3
            Campaign(np.array([1, 2]), np.array([0, 0])),          # v without u
            Campaign(np.array([0, 3]), np.array([0, 0]))]          # u without v
    assert goyal_probabilities(g, runs, prior=(0, 0))[0] == pytest.approx(1 / 3)
    assert goyal_probabilities(g, runs, prior=(0, 0), window=3)[0] == pytest.approx(2 / 3)
    assert goyal_probabilities(g, runs, form="jaccard", prior=(0, 0))[0] == pytest.approx(1 / 4)
    # Default prior: 2 pseudo-campaigns at the pooled rate (here 1/3): (1 + 2/3) / (3 + 2).
    assert goyal_probabilities(g, runs)[0] == pytest.approx((1 + 2 / 3) / 5)


def test_adoption_chance_is_one_minus_product_over_active_in_neighbours() -> None:
    # Source: closed form 1 - prod(1 - p_uv) over in-neighbours u active in round t (Kempe et al.
    # 2003), computed here by a plain loop, and the service's simulator's frequency.
    rng = np.random.default_rng(3)
    n, m = 30, 120
    src = rng.integers(0, n, m).astype(np.int32)
    dst = rng.integers(0, n, m).astype(np.int32)
    keep = src != dst
    key = np.unique(src[keep].astype(np.int64) * n + dst[keep])
    g = GraphArrays(n, True, (key // n).astype(np.int32), (key % n).astype(np.int32), np.ones(key.size))
    p = rng.uniform(0, 0.6, key.size)
    active = rng.choice(n, 6, replace=False)
    chance = adoption_chance(g, p, active)
    for v in range(n):
        q = 1.0
        for u, w, pe in zip(g.src, g.dst, p):
            if w == v and u in active:
                q *= 1 - pe
        assert chance[v] == pytest.approx(1 - q, abs=1e-12)
    dg = learned_diffusion_graph(g, p)
    runs = 4000
    freq = np.zeros(n)
    for s in range(runs):
        r = independent_cascade(dg, active, rounds=1, rng_seed=s)
        freq += r == 1
    free = np.setdiff1d(np.arange(n), active)
    se = np.sqrt(chance[free] * (1 - chance[free]) / runs) + 1e-9
    assert np.all(np.abs(freq[free] / runs - chance[free]) <= 5 * se + 1e-3)


@pytest.mark.parametrize("kind", ["per_edge", "uniform", "segment_pair", "logistic"])
def test_em_log_likelihood_never_decreases(kind: str) -> None:
    # Source: the EM monotonicity property (Dempster, Laird, Rubin 1977).
    rng = np.random.default_rng(5)
    n = 60
    src = rng.integers(0, n, 400).astype(np.int32)
    dst = rng.integers(0, n, 400).astype(np.int32)
    keep = src != dst
    key = np.unique(src[keep].astype(np.int64) * n + dst[keep])
    g = GraphArrays(n, True, (key // n).astype(np.int32), (key % n).astype(np.int32),
                    rng.integers(1, 5, key.size).astype(np.float64))
    p = rng.uniform(0.05, 0.4, key.size)
    runs = simulate_campaigns(g, p, 30, seeds=3, random_seed=1)
    x, _ = edge_features(g)
    fit = em_probabilities(g, runs, parameterisation=kind, segments=np.arange(n) % 3,
                           features=x, prior_strength=2.0, tol=1e-12, max_iter=200)
    tr = np.array(fit.trace)
    assert tr.size > 3
    assert np.all(np.diff(tr) >= -1e-7 * np.abs(tr[1:]))


def test_unexplained_adoptions_are_counted_and_left_out() -> None:
    g = GraphArrays(3, True, np.array([0], np.int32), np.array([1], np.int32), np.ones(1))
    ep = campaign_episodes(g, [Campaign(np.array([0, 2]), np.array([0, 1]))])
    assert ep.unexplained.tolist() == [1] and ep.n_events == 0


@pytest.mark.parametrize("campaigns,message", [
    ([], "at least one past campaign"),
    ([Campaign(np.array([0, 1]), np.array([1, 2]))], "no seeds"),
    ([Campaign(np.array([0]), np.array([0]))], "one adopter"),
    ([Campaign(np.array([0, 0]), np.array([0, 1]))], "at most once"),
    ([Campaign(np.array([0, 1]), np.array([0, 3]), horizon=2)], "before its last adoption"),
    ([Campaign(np.array([0, 1]), np.array([0, -1]))], ">= 0"),
])
def test_bad_campaigns_are_refused_with_what_is_wrong(campaigns: list[Campaign],
                                                      message: str) -> None:
    g = GraphArrays(3, True, np.array([0], np.int32), np.array([1], np.int32), np.ones(1))
    with pytest.raises(InvalidParameter, match=message):
        em_probabilities(g, campaigns)


def test_unknown_adopter_is_named() -> None:
    g = GraphArrays(3, True, np.array([0], np.int32), np.array([1], np.int32), np.ones(1))
    with pytest.raises(UnknownNode) as e:
        learn_probabilities(g, [Campaign(np.array([0, 7]), np.array([0, 1]), label="spring")])
    assert e.value.data["node_index"] == 7 and "spring" in e.value.reason


def test_bucket_rounds_refuses_out_of_order_and_seedless_logs() -> None:
    assert bucket_rounds([5.0, 5.5, 9.0], [True, False, False], window=2).tolist() == [0, 1, 2]
    with pytest.raises(InvalidParameter, match="out of order") as e:
        bucket_rounds([5.0, 4.0], [True, False], window=1.0)
    assert e.value.data["position"] == 1
    with pytest.raises(InvalidParameter, match="no seeds"):
        bucket_rounds([5.0, 4.0], [False, False], window=1.0)
    with pytest.raises(InvalidParameter, match="window"):
        bucket_rounds([5.0, 4.0], [True, False], window=0.0)


# ------------------------------------------------------------- recovery on open datasets

TABLE = np.array([[0.12, 0.02], [0.04, 0.08]])  # true per-segment-pair probabilities


def _email_truth() -> tuple[GraphArrays, np.ndarray, np.ndarray]:
    g, _ = snap_graph("email-Eu-core", directed=True)
    seg = (np.random.default_rng(11).random(g.n) < 0.4).astype(np.int64)
    a = arcs(g)
    return g, seg, TABLE[seg[a.src], seg[a.dst]]


@pytest.mark.slow
@pytest.mark.shared
def test_segment_pair_table_recovered_within_intervals_that_shrink() -> None:
    # Source: email-Eu-core (SNAP, ../shared/datasets); recovery of known probabilities from
    # simulated cascades, as Saito et al. (2008) show on synthetic data.
    g, seg, p = _email_truth()
    widths = []
    for count in (20, 80):
        runs = simulate_campaigns(g, p, count, seeds=5, random_seed=count)
        fit = learn_probabilities(g, runs, methods=["segment_pair"], segments=seg)
        est = {q.name: q for q in fit.parameters}
        inside = 0
        for i, j in itertools.product(range(2), range(2)):
            q = est[f"segment {i} -> segment {j}"]
            inside += q.low <= TABLE[i, j] <= q.high
        assert inside >= 3  # four 95% intervals: one miss is allowed
        widths.append(np.mean([q.high - q.low for q in fit.parameters]))
        if count == 80:
            err = max(abs(est[f"segment {i} -> segment {j}"].value - TABLE[i, j])
                      for i, j in itertools.product(range(2), range(2)))
            assert err < 0.02
    assert widths[1] < 0.7 * widths[0]  # about 1/sqrt(4) of the width with 4x the campaigns


@pytest.mark.slow
@pytest.mark.shared
def test_true_model_has_the_best_held_out_likelihood_and_is_chosen() -> None:
    # Source: email-Eu-core (SNAP); truth per segment pair; misspecified: weighted cascade,
    # trivalency, uniform, per-edge.
    g, seg, p = _email_truth()
    train = simulate_campaigns(g, p, 40, random_seed=1)
    test = simulate_campaigns(g, p, 40, random_seed=2)
    model = learn_probabilities(g, train, segments=seg)
    assert model.method == "segment_pair", model.held_out
    assert "pair of segments" in model.reason
    ep = campaign_episodes(g, test)
    a = arcs(g)

    def score(q: np.ndarray) -> float:
        return log_likelihood(ep, np.clip(q, 1e-6, 1 - 1e-6)[ep.arc])

    truth = score(p)
    others = {"weighted_cascade": edge_probabilities(a, "weighted_cascade"),
              "trivalency": edge_probabilities(a, "trivalency"),
              "uniform": model.fits["uniform"],
              "per_edge": em_probabilities(g, train, prior_strength=2.0).arc_prob}
    for name, q in others.items():
        assert truth > score(q), name


@pytest.mark.slow
@pytest.mark.shared
def test_logistic_model_recovered_on_ca_grqc() -> None:
    # Source: ca-GrQc (SNAP, ../shared/datasets) with interaction counts drawn at random;
    # truth p = sigmoid(-3 + 0.8 log(1 + w) + 2 overlap).
    g0, _ = snap_graph("ca-GrQc", directed=False)
    w = np.random.default_rng(2).integers(1, 20, g0.m).astype(np.float64)
    g = GraphArrays(g0.n, False, g0.src, g0.dst, w)
    x, names = edge_features(g)
    cols = [names.index("interactions (log)"), names.index("overlap")]
    x = x[:, cols]
    beta = np.array([-3.0, 0.8, 2.0])
    p = 1 / (1 + np.exp(-(beta[0] + x @ beta[1:])))
    runs = simulate_campaigns(g, p, 150, seeds=10, random_seed=4)
    model = learn_probabilities(g, runs, methods=["logistic", "uniform", "weighted_cascade"],
                                features=x, feature_names=["log interactions", "overlap"])
    assert model.method == "logistic", model.held_out
    est = model.parameters
    assert [q.name for q in est] == ["intercept", "log interactions", "overlap"]
    inside = sum(q.low <= b <= q.high for q, b in zip(est, beta))
    assert inside >= 2
    assert all(abs(q.value - b) < 4 * (q.high - q.low) / 3.92 + 0.05 for q, b in zip(est, beta))
    few = learn_probabilities(g, runs[:40], methods=["logistic"], features=x, folds=2)
    assert sum(q.low <= b <= q.high for q, b in zip(few.parameters, beta)) >= 2
    width = [np.mean([q.high - q.low for q in m.parameters]) for m in (few, model)]
    assert width[1] < 0.7 * width[0]  # about sqrt(40 / 150) of the width


def _random_graph(n: int, m: int, seed: int) -> GraphArrays:
    rng = np.random.default_rng(seed)
    src = rng.integers(0, n, m)
    dst = rng.integers(0, n, m)
    keep = src != dst
    key = np.unique(src[keep] * n + dst[keep])
    return GraphArrays(n, True, (key // n).astype(np.int32), (key % n).astype(np.int32),
                       np.ones(key.size))


def test_model_carries_to_a_later_version_with_new_arcs() -> None:
    # Source: definition: matched arcs keep their learned probability, new arcs get the
    # per-segment-pair table learned on the same campaigns. Truth: each arc 0.02 or 0.5, so
    # that one probability per arc predicts best and is chosen.
    g = _random_graph(40, 300, 8)
    seg = np.arange(40) % 2
    p = np.random.default_rng(1).choice([0.02, 0.5], g.m)
    runs = simulate_campaigns(g, p, 60, seeds=3, random_seed=3)
    model = learn_probabilities(g, runs, methods=["per_edge", "segment_pair"], segments=seg)
    assert (model.method, model.new_arc_method) == ("per_edge", "segment_pair"), model.held_out
    # a later version: one new person (index 0, old people shifted by one) and two new arcs
    src = np.concatenate([g.src + 1, [0, 5]]).astype(np.int32)
    dst = np.concatenate([g.dst + 1, [3, 0]]).astype(np.int32)
    g2 = GraphArrays(41, True, src, dst, np.ones(src.size))
    node_map = np.arange(-1, 40)
    prev = match_arcs(g, g2, node_map)
    assert prev[:-2].tolist() == list(range(g.m)) and prev[-2:].tolist() == [-1, -1]
    seg2 = np.concatenate([[1], seg])
    got = transfer_probabilities(model, g2, previous_arc=prev, segments=seg2)
    assert np.array_equal(got[:-2], model.arc_prob)
    fresh = model.coefficients["segment_pair"]
    assert got[-2] == fresh[1 * 2 + seg2[3]] and got[-1] == fresh[seg2[5] * 2 + 1]
    sp = learn_probabilities(g, runs, methods=["segment_pair"], segments=seg)
    table = sp.coefficients["segment_pair"].reshape(2, 2)
    got = transfer_probabilities(sp, g2, previous_arc=prev, segments=seg2)
    assert np.array_equal(got, table[seg2[src], seg2[dst]])
    with pytest.raises(InvalidParameter, match="previous_arc"):
        transfer_probabilities(sp, g2, previous_arc=prev[:-1], segments=seg2)


def test_e_step_counted_per_arc_equals_the_per_trial_e_step() -> None:
    # Source: the per-trial E-step (reference implementation) on the same episodes.
    from service.analytics.learning._em import _e_step_by_arc, e_step

    g = _random_graph(30, 200, 4)
    p = np.random.default_rng(2).uniform(0.05, 0.5, g.m)
    ep = campaign_episodes(g, simulate_campaigns(g, p, 10, seeds=3, random_seed=6))
    q_ref, ll_ref = e_step(ep, p[ep.arc])
    hit = ep.event >= 0
    fails = np.bincount(ep.arc[~hit], minlength=g.m).astype(np.float64)
    q, ll = _e_step_by_arc(p, fails, ep.arc[hit], ep.event[hit], ep.n_events)
    assert ll == pytest.approx(ll_ref, rel=1e-12)
    assert np.allclose(q, q_ref[hit]) and np.all(q_ref[~hit] == 0)
    assert ll_ref == pytest.approx(log_likelihood(ep, p[ep.arc]), rel=1e-12)


def test_lt_weights_count_credit_and_sum_to_at_most_one() -> None:
    # Source: hand count of A_u2v / max(A_v, sum of credits into v) (Goyal et al. 2010 counts);
    # the Linear Threshold condition sum_u b_uv <= 1 checked by check_lt_weights.
    from service.analytics.graph import check_lt_weights
    from service.analytics.learning.probabilities import goyal_lt_weights

    g = GraphArrays(4, True, np.array([0, 1, 3], np.int32), np.array([2, 2, 2], np.int32),
                    np.ones(3))
    runs = [Campaign(np.array([0, 2]), np.array([0, 1])),
            Campaign(np.array([1, 2]), np.array([0, 1])),
            Campaign(np.array([0, 3, 2]), np.array([0, 0, 5])),  # too late: no credit
            Campaign(np.array([1, 3]), np.array([0, 0]))]
    assert goyal_lt_weights(g, runs).tolist() == pytest.approx([1 / 3, 1 / 3, 0.0])
    assert goyal_lt_weights(g, runs, window=5).tolist() == pytest.approx([0.5, 0.25, 0.25])
    g2 = _random_graph(40, 400, 9)
    w = goyal_lt_weights(g2, simulate_campaigns(g2, np.full(g2.m, 0.3), 30, random_seed=2))
    check_lt_weights(arcs(g2), w)
    assert w.max() > 0


@pytest.mark.parametrize("kind", ["classes", "logistic"])
def test_fisher_information_equals_numerical_hessian_of_the_likelihood(kind: str) -> None:
    # Source: central second differences of the observed log-likelihood (closed form of the
    # IC episode likelihood), against the analytic Hessian used for the intervals.
    from service.analytics.learning._em import fisher_information

    g = _random_graph(30, 250, 12)
    p = np.random.default_rng(3).uniform(0.05, 0.4, g.m)
    ep = campaign_episodes(g, simulate_campaigns(g, p, 15, seeds=3, random_seed=8))
    seg = np.arange(30) % 2
    classes = (seg[g.src] * 2 + seg[g.dst]).astype(np.int64)
    x = np.column_stack([np.ones(g.m), np.random.default_rng(4).normal(size=(g.m, 2))])
    theta = np.array([0.1, 0.2, 0.15, 0.3]) if kind == "classes" else np.array([-1.5, 0.3, -0.2])

    def ll(t: np.ndarray) -> float:
        pa = t[classes] if kind == "classes" else 1 / (1 + np.exp(-(x @ t)))
        return log_likelihood(ep, pa[ep.arc])

    k, h = theta.size, 1e-4
    num = np.zeros((k, k))
    for i in range(k):
        for j in range(k):
            ei, ej = np.eye(k)[i] * h, np.eye(k)[j] * h
            num[i, j] = (ll(theta + ei + ej) - ll(theta + ei - ej) - ll(theta - ei + ej)
                         + ll(theta - ei - ej)) / (4 * h * h)
    info = fisher_information(ep, kind, theta, classes=classes, features=x)
    assert np.allclose(info, -num, rtol=1e-3, atol=1e-2 * np.abs(num).max() * 1e-3)


def test_campaigns_without_any_trial_are_refused() -> None:
    g = GraphArrays(3, True, np.array([0], np.int32), np.array([1], np.int32), np.ones(1))
    seeds_only = [Campaign(np.array([0, 2]), np.array([0, 0]))]  # horizon 0: nothing watched
    with pytest.raises(InvalidParameter, match="horizon"):
        learn_probabilities(g, seeds_only)
    fit = em_probabilities(g, [Campaign(np.array([0, 2]), np.array([0, 0]), horizon=1)] * 2)
    assert fit.arc_prob.tolist() == [0.0]  # with the horizon given: two failed trials

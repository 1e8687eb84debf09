"""The demo's last part: past campaigns, probabilities learned from them, and a backtest.

The cooperative ran campaigns before. Their logs are generated here from a
hidden probability model (a tie with w interactions passes a campaign on with
probability ``1 / (1 + exp(-(HIDDEN_INTERCEPT + HIDDEN_SLOPE * log(1 + w))))``),
one round a day, and uploaded over HTTP; the ``learn_probabilities`` job must
find that model again, and the ``backtest`` job says how right each scheme's
forecasts of the latest campaigns were.
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from typing import Any

import numpy as np
from numpy.typing import NDArray

__all__ = ["campaigns_story", "HIDDEN_INTERCEPT", "HIDDEN_SLOPE", "simulate_campaign"]

HIDDEN_INTERCEPT = -4.0
HIDDEN_SLOPE = 0.6
CAMPAIGNS = 20
SEEDS = 20
HOLD_OUT = 5


def simulate_campaign(n: int, src: NDArray[np.int32], dst: NDArray[np.int32], prob: NDArray[np.float64],
                      seeds: NDArray[np.int64], rng: np.random.Generator) -> dict[int, int]:
    """Independent Cascade on undirected ties with one probability per tie: person -> day adopted."""
    a = np.concatenate((src, dst)).astype(np.int64)
    b = np.concatenate((dst, src)).astype(np.int64)
    p = np.concatenate((prob, prob))
    order = np.argsort(a, kind="stable")
    a, b, p = a[order], b[order], p[order]
    start = np.searchsorted(a, np.arange(n + 1))
    day = {int(s): 0 for s in seeds}
    frontier, t = [int(s) for s in seeds], 0
    while frontier:
        t += 1
        new: list[int] = []
        for u in frontier:
            lo, hi = start[u], start[u + 1]
            hit = b[lo:hi][rng.random(hi - lo) < p[lo:hi]]
            for v in hit.tolist():
                if v not in day:
                    day[v] = t
                    new.append(v)
        frontier = new
    return day


def campaigns_story(d: Any, sc: Any, gid: str) -> None:
    """Upload past campaigns, learn from them and backtest (``d`` is the demo's HTTP session)."""
    d.section("Learning from past campaigns (campaigns, learn_probabilities, backtest)")
    rng = np.random.default_rng(21)
    hidden = 1.0 / (1.0 + np.exp(-(HIDDEN_INTERCEPT + HIDDEN_SLOPE * np.log1p(sc.weight))))
    first = datetime(2025, 3, 3, 9, 0, tzinfo=UTC)
    sizes = []
    for i in range(CAMPAIGNS):
        started = first + timedelta(days=21 * i)
        c = d.check(d.http.post(f"/v1/graphs/{gid}/campaigns", json={
            "name": f"{started.day} {started:%b %Y} newsletter", "started_at": started.isoformat(), "channel": "email"}))
        seeds = rng.choice(sc.members, SEEDS, replace=False).astype(np.int64)
        day = simulate_campaign(sc.members, sc.src, sc.dst, hidden, seeds, rng)
        rows = ["person,role,time"]
        for v, t in day.items():
            # Day t's adoptions fall some time in the t-th day after the start: round t of one day.
            when = started + timedelta(hours=24.0 * (t - 1) + float(rng.uniform(1, 23))) if t else started
            rows.append(f"{sc.ids[v]},{'seed' if t == 0 else 'adopter'},{when.isoformat()}")
        d.check(d.http.put(f"/v1/graphs/{gid}/campaigns/{c['id']}/log", content="\n".join(rows) + "\n",
                           headers={"Content-Type": "text/csv"}))
        sizes.append(len(day))
    d.say(f"Uploaded the logs of {CAMPAIGNS} past campaigns ({SEEDS} members contacted each; "
          f"{min(sizes)} to {max(sizes)} people took part). They were made from a hidden model in which a tie\n"
          f"with w interactions passes a campaign on with chance 1 / (1 + exp(-({HIDDEN_INTERCEPT} + "
          f"{HIDDEN_SLOPE} log(1 + w)))).")
    learned = d.run_job(gid, "learn_probabilities", {"round_hours": 24}, "learn_probabilities")
    model = learned["model"]
    for line in learned.get("readings", []):
        d.say(f"  - {line}", md=f"- {line}")
    d.table(["parameter", "learned", "95% interval", "hidden truth"],
            [[q["name"], f"{q['value']:.2f}", f"{q['low']:.2f} to {q['high']:.2f}",
              {"intercept": f"{HIDDEN_INTERCEPT}", "interactions (log)": f"{HIDDEN_SLOPE}"}.get(q["name"], "0")]
             for q in model.get("parameters", [])])
    d.say(f"Forecasts and shortlists use it with probability {{\"scheme\": \"learned\", \"model\": "
          f"\"{learned['_job_id']}\"}}.")
    bt = d.run_job(gid, "backtest", {"latest": HOLD_OUT, "round_hours": 24, "simulations": 500}, "backtest")
    d.say(f"Backtest: the latest {HOLD_OUT} campaigns were held out, the model learned on the other "
          f"{CAMPAIGNS - HOLD_OUT}, and each held-out campaign forecast from its real seeds.")
    d.say(bt["verdict"])
    d.table(["scheme", "off by (average)", "inside the 5-95% band", "log-likelihood", "AUC"],
            [[s["name"], f"{100 * s['mean_rel_error']:.0f}%", f"{s['inside']} of {s['campaigns']}",
              f"{s['log_likelihood']:,.0f}", "-" if s["mean_auc"] is None else f"{s['mean_auc']:.2f}"]
             for s in bt["summary"]])
    plot = d.save_plot(f"/v1/jobs/{bt['_job_id']}/plots/forecast_vs_actual.svg", "backtest.svg")
    if plot:
        d.md.append(f"\n![forecasts of past campaigns against what they reached]({plot})\n")

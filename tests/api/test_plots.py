"""Plots are valid SVG, in plain words, and carry the figures they draw (read back from ``<desc id="chart-data">``)."""

from __future__ import annotations

import json
import math
import re
import xml.etree.ElementTree as ET
from typing import Any

import networkx as nx
import numpy as np
import pytest

from service.api.plots import render_plot
from service.usecases.plots import AdoptionSeries, adoption_svg, nice_name, reach_curve_svg

SVG = "{http://www.w3.org/2000/svg}"
#: Names that only a developer knows; a plot shows plain words.
INTERNAL = re.compile(r"\btop_degree\b|\bdegree_discount\b|\btop_pagerank\b|_|\bimm\b|\bopim\b|RR sets")


def parse(svg: str) -> tuple[ET.Element, dict[str, Any]]:
    root = ET.fromstring(svg)  # well-formed XML, or this raises
    assert root.tag == SVG + "svg"
    desc = root.find(SVG + "desc")
    assert desc is not None and desc.get("id") == "chart-data" and desc.text
    return root, dict(json.loads(desc.text))


def texts(root: ET.Element) -> list[str]:
    return [t.text or "" for t in root.iter(SVG + "text") if t.text]


def words(root: ET.Element) -> str:
    return " ".join(texts(root))


def test_reach_curve_marks_the_budget_and_percent_axis() -> None:
    root, data = parse(reach_curve_svg([3.0, 5.5, 7.0], low=[2.5, 5.0, 6.2], high=[3.5, 6.0, 7.8],
                                       others={nice_name("top_degree"): [2.0, 4.0, 5.0]}, budget=3, people=20,
                                       check=(7.1, 6.8, 7.4)))
    t = words(root)
    assert "people contacted, in shortlist order" in t and "expected reach (people)" in t
    assert "expected reach (% of all people)" in t and "budget: 3" in t
    assert "best-connected people" in t and "95% interval of the estimate" in t
    assert not INTERNAL.search(t), t
    assert data["series"][0]["y"] == [3.0, 5.5, 7.0] and data["series"][0]["high"] == [3.5, 6.0, 7.8]
    assert data["budget"] == 3 and data["check"]["mean"] == 7.1


def test_adoption_cuts_the_flat_tail_and_draws_both_bands() -> None:
    rounds = list(range(12))
    mean = [5.0, 20.0, 40.0, 49.0, 50.0] + [50.0] * 7  # flat after round 4
    s = AdoptionSeries("shortlist (5 people)", rounds, mean, [m - 0.5 for m in mean], [m + 0.5 for m in mean],
                       [max(m - 9, 5.0) for m in mean], [m + 9 for m in mean], final_p5=38.0, final_p95=61.0)
    root, data = parse(adoption_svg([s]))
    # 99.5% of the final 50 is 49.75: round 3 (49) still grows, so the axis ends after round 4.
    assert data["last_round_shown"] == 4 and data["series"][0]["x"] == [0, 1, 2, 3, 4]
    t = words(root)
    assert "90% of campaigns fall in this band" in t and "interval ±0.5" in t
    assert data["series"][0]["spread_high"][-1] == 59.0 and data["series"][0]["final_p95"] == 61.0


def _profile_of(G: nx.Graph) -> dict[str, Any]:
    from service.analytics.graph import GraphArrays
    from service.analytics.structure.profile import graph_profile

    e = np.array(G.edges())
    g = GraphArrays(G.number_of_nodes(), False, e[:, 0].astype(np.int32), e[:, 1].astype(np.int32),
                    np.ones(len(e)))
    return dict(json.loads(json.dumps(graph_profile(g), default=float)))


def test_degree_distribution_axes_fit_the_data_and_line_starts_at_x_min() -> None:
    G = nx.barabasi_albert_graph(2000, 3, seed=1)
    prof = _profile_of(G)
    root, data = parse(render_plot("degree_distribution", prof))
    assert "ties per person (log scale)" in texts(root)
    obs, fit = data["series"]
    assert obs["name"] == "observed" and fit["name"] == "power law"
    # Source: the profile's own histogram: every plotted share is a positive density.
    assert all(y > 0 for y in obs["y"])
    assert fit["x"][0] == prof["power_law"]["x_min"]  # the fitted line starts at x_min
    # Source: NetworkX degrees; the line ends at the largest degree.
    assert fit["x"][-1] == pytest.approx(max(d for _, d in G.degree()))
    # The fitted law is a probability per degree over the tail: it sums to the tail's share
    # (zeta normalisation, Clauset, Shalizi, Newman 2009, eq. 2.4), checked here on the integers.
    from scipy.special import zeta

    pl = prof["power_law"]
    xs = np.arange(pl["x_min"], 200000)
    mass = (xs ** -pl["alpha"]).sum() / zeta(pl["alpha"], pl["x_min"]) * pl["n_tail"] / pl["n"]
    assert mass == pytest.approx(pl["n_tail"] / pl["n"], rel=1e-3)


def test_unknown_plot_name_is_rejected() -> None:
    from service.api.errors import InvalidParams

    with pytest.raises(InvalidParams):
        render_plot("pie", {})


@pytest.mark.anyio
async def test_plot_endpoint_over_http_and_its_problems(client) -> None:  # type: ignore[no-untyped-def]
    from tests.jobs.api_helpers import assert_problem, make_graph, run_worker_once, worker_for

    G = nx.karate_club_graph()
    gid = await make_graph(client, "source,target\n" + "".join(f"k{u},k{v}\n" for u, v in G.edges()))
    job = (await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "profile", "params": {}})).json()
    # Not succeeded yet: a problem, not an empty picture.
    assert_problem(await client.get(f"/v1/jobs/{job['id']}/plots/degree_distribution.svg"), 422, "invalid-parameter")
    await run_worker_once(worker_for(client))
    r = await client.get(f"/v1/jobs/{job['id']}/plots/degree_distribution.svg")
    assert r.status_code == 200 and r.headers["content-type"].startswith("image/svg+xml")
    root, data = parse(r.text)
    # Source: NetworkX degrees of karate: plotted bins lie between the smallest and largest degree.
    xs = data["series"][0]["x"]
    degrees = [d for _, d in G.degree()]
    assert data["series"][0]["name"] == "observed" and min(degrees) <= min(xs) and max(xs) <= max(degrees)
    # A profile job has no reach curve; unknown plot names and jobs are problems too.
    assert_problem(await client.get(f"/v1/jobs/{job['id']}/plots/reach_curve.svg"), 422, "invalid-parameter")
    assert_problem(await client.get(f"/v1/jobs/{job['id']}/plots/pie.svg"), 422, "validation-error")
    assert_problem(await client.get("/v1/jobs/j_missing/plots/adoption.svg"), 404, "not-found")


@pytest.mark.anyio
async def test_shortlist_and_forecast_plots_over_http(client) -> None:  # type: ignore[no-untyped-def]
    from tests.api.test_result_output import WC, _run, _setup

    gid = await _setup(client)
    jid = await _run(client, gid, "shortlist", {"budget": 4, **WC})
    body = (await client.get(f"/v1/jobs/{jid}/result")).json()
    r = await client.get(f"/v1/jobs/{jid}/plots/reach_curve.svg")
    assert r.status_code == 200, r.text
    root, data = parse(r.text)
    t = words(root)
    assert not INTERNAL.search(t), t
    assert data["budget"] == 4 and data["people"] == 90
    curve = data["series"][0]
    assert curve["y"] == pytest.approx(body["reach_curve"], abs=0.05)
    # The band is the binomial interval of the covered share of the fresh samples: it holds the curve.
    assert all(lo <= y <= hi for lo, y, hi in zip(curve["low"], curve["y"], curve["high"]))
    r = await client.get(f"/v1/jobs/{jid}/plots/segment_reach.svg")
    root, data = parse(r.text)
    assert data["segments"] == [s["segment"] for s in body["segment_reach"]]
    assert data["series"][0]["y"] == pytest.approx([s["expected"] for s in body["segment_reach"]], abs=0.05)

    fid = await _run(client, gid, "forecast", {"seed_sets": {"top_degree": ["p0", "p1"], "shortlist": ["p2"]},
                                               "simulations": 600, **WC})
    fbody = (await client.get(f"/v1/jobs/{fid}/result")).json()
    for name in ("adoption", "outcomes", "segment_reach"):
        r = await client.get(f"/v1/jobs/{fid}/plots/{name}.svg")
        assert r.status_code == 200, (name, r.text)
        root, data = parse(r.text)
        t = words(root)
        assert not INTERNAL.search(t), (name, t)
        assert "2 best-connected people" in t and "shortlist (1 people)" in t or "shortlist" in t
    root, data = parse((await client.get(f"/v1/jobs/{fid}/plots/outcomes.svg")).text)
    # Every simulated campaign is counted once (source: the job's own simulation count).
    assert [sum(s["counts"]) for s in data["series"]] == [f["simulations"] for f in fbody["forecasts"]]
    root, data = parse((await client.get(f"/v1/jobs/{fid}/plots/adoption.svg")).text)
    for s, f in zip(data["series"], fbody["forecasts"]):
        assert s["final_p95"] == pytest.approx(f["percentiles"]["p95"], abs=0.05)
        assert all(lo <= m <= hi for lo, m, hi in zip(s["spread_low"], s["mean"], s["spread_high"]))
        assert not math.isnan(s["mean"][-1])
    r = await client.get(f"/v1/jobs/{jid}/plots/outcomes.svg")
    assert r.status_code == 422 and "forecast" in r.json()["detail"]

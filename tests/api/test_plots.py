"""Plots are valid SVG and carry the data they draw."""

from __future__ import annotations

import json
import xml.etree.ElementTree as ET

import networkx as nx
import pytest

from service.api.plots import render_plot
from service.plots import adoption_svg, reach_curve_svg

SVG = "{http://www.w3.org/2000/svg}"


def parse(svg: str) -> tuple[ET.Element, dict]:
    root = ET.fromstring(svg)  # well-formed XML, or this raises
    assert root.tag == SVG + "svg"
    meta = root.find(SVG + "metadata")
    assert meta is not None and meta.text
    return root, json.loads(meta.text)


def texts(root: ET.Element) -> list[str]:
    return [t.text or "" for t in root.iter(SVG + "text")]


def test_reach_curve_has_axes_legend_and_data() -> None:
    root, data = parse(reach_curve_svg([3.0, 5.5, 7.0], {"top degree": [2.0, 4.0, 5.0]}))
    labels = texts(root)
    assert "seeds contacted (people)" in labels and "expected reach (people)" in labels
    assert "optimised" in labels and "top degree" in labels
    assert data["series"][0]["y"] == [3.0, 5.5, 7.0] and data["series"][1]["x"] == [1.0, 2.0, 3.0]


def test_adoption_band_is_drawn() -> None:
    root, data = parse(adoption_svg([0, 1, 2], [1.0, 2.5, 3.0], [1.0, 2.0, 2.6], [1.0, 3.0, 3.4]))
    assert root.find(SVG + "polygon") is not None
    assert data["series"][0]["band_high"] == [1.0, 3.0, 3.4]


def test_degree_distribution_of_a_profile_result() -> None:
    from service.analytics.graph import GraphArrays
    from service.analytics.profile import graph_profile
    import numpy as np

    G = nx.barabasi_albert_graph(2000, 3, seed=1)
    e = np.array(G.edges())
    g = GraphArrays(2000, False, e[:, 0].astype(np.int32), e[:, 1].astype(np.int32), np.ones(len(e)))
    prof = graph_profile(g)
    root, data = parse(render_plot("degree_distribution", json.loads(json.dumps(prof, default=float))))
    assert "ties per person (log scale)" in texts(root)
    names = [s["name"] for s in data["series"]]
    assert names[0] == "observed" and names[1].startswith("power law")
    # Source: the profile's own histogram: every plotted share is a positive density.
    assert all(y > 0 for y in data["series"][0]["y"])


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

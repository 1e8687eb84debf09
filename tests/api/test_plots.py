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

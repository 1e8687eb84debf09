"""What referral-integrity results look like outside JSON: CSV tables and the neighbourhood-law plot.

- :func:`odd_neighbourhoods_table` and :func:`dense_groups_table`: the CSV exports
  (``GET /v1/jobs/{id}/result.csv``), one row per flagged person, or per member of
  each group, with the evidence beside it;
- :func:`neighbourhood_law`: ties against contacts on log scales, the fitted law,
  and the near-cliques and near-stars marked (``GET /v1/jobs/{id}/plots/neighbourhood_law.svg``);
- :func:`group_density`: each dense group as a bar, the share of its possible ties (or
  shared values) present against the share in the whole table, coloured by the kind of
  evidence (``GET /v1/jobs/{id}/plots/group_density.svg``).
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import TYPE_CHECKING, Any

from service.analytics.errors import InvalidParameter

from . import plots

if TYPE_CHECKING:
    from numpy.typing import NDArray

    from .loading import LoadedVersion

__all__ = ["ODD_HEADER", "GROUP_HEADER", "odd_neighbourhoods_table", "dense_groups_table", "neighbourhood_law",
           "group_density"]

ODD_HEADER = ["list", "rank", "node_id", "label", "score", "contacts", "ties", "expected_ties",
              "ties_among_contacts", "possible_ties_among_contacts", "evidence"]
GROUP_HEADER = ["group", "found_in", "people", "density", "node_id", "label", "evidence"]
_LISTS = (("near_cliques", "near-clique"), ("near_stars", "near-star"))


def odd_neighbourhoods_table(
    version: LoadedVersion, data: dict[str, Any], arrays: dict[str, NDArray[Any]]
) -> tuple[list[str], Iterator[list[Any]]]:
    """Near-cliques, then near-stars, each in rank order, with the figures and evidence."""

    def rows() -> Iterator[list[Any]]:
        for key, name in _LISTS:
            for p in data.get(key) or []:
                yield [name, p["rank"], p["node_id"], p.get("label"), p["score"], p["contacts"], p["ties"],
                       p["expected_ties"], p["ties_among_contacts"], p["possible_ties_among_contacts"],
                       p["evidence"]]

    return ODD_HEADER, rows()


def dense_groups_table(
    version: LoadedVersion, data: dict[str, Any], arrays: dict[str, NDArray[Any]]
) -> tuple[list[str], Iterator[list[Any]]]:
    """One row per member of each group (all members, not only those listed in the document)."""
    groups = {g["rank"]: g for g in data.get("groups") or []}
    index, group = arrays.get("member_index"), arrays.get("member_group")
    labels = version.labels

    def rows() -> Iterator[list[Any]]:
        if index is None or group is None:
            return
        for node, rank in zip(index.tolist(), group.tolist()):
            g = groups.get(int(rank))
            if g is not None:
                yield [rank, g["found_in"], g["people"], g["density"], version.ids[int(node)],
                       labels[int(node)], g["evidence"]]

    return GROUP_HEADER, rows()


def neighbourhood_law(data: dict[str, Any]) -> str:
    """Ties against contacts of every compared person, the fitted law, and the flagged people marked."""
    pts = data.get("law_points") or {}
    law = next((x for x in data.get("laws") or [] if x.get("law") == "E~N"), None)
    if not pts.get("contacts") or law is None:
        raise InvalidParameter("the result has no neighbourhoods to plot", field="name")
    fig, ax = plots._figure()
    ax.set_xscale("log")
    ax.set_yscale("log")
    xs, ys, people = pts["contacts"], pts["ties"], pts["people"]
    sizes = [6 + 10 * min(c, 1000) ** 0.4 for c in people]
    sample = " (a sample)" if pts.get("sampled") else ""
    ax.scatter(xs, ys, s=sizes, color="#b8b8b8", alpha=0.6, linewidths=0,
               label=f"people compared{sample}, larger dots: more people")
    lo, hi = min(xs), max(xs)
    line_x = [lo * (hi / lo) ** (i / 40) for i in range(41)] if hi > lo else [lo, lo * 2]
    a, c = float(law["exponent"]), float(law["constant"])
    ax.plot(line_x, [c * x**a for x in line_x], color=plots.PALETTE[0], linewidth=1.8,
            label=f"fitted law: ties ~ contacts^{a:.2f}")
    ax.plot(line_x, [x * (x + 1) / 2 for x in line_x], color="#888", linestyle=":", linewidth=1,
            label="everyone knows everyone (fully connected)")
    ax.plot(line_x, line_x, color="#888", linestyle="--", linewidth=1, label="nobody knows each other (star)")
    series: list[dict[str, Any]] = [
        {"name": "people compared", "x": xs, "y": ys, "people": people},
        {"name": "fitted law", "x": line_x, "y": [c * x**a for x in line_x], "exponent": a, "constant": c}]
    for (key, name), colour, marker in zip(_LISTS, (plots.PALETTE[1], plots.PALETTE[3]), ("^", "v")):
        flagged = data.get(key) or []
        fx, fy = [p["contacts"] for p in flagged], [p["ties"] for p in flagged]
        ax.scatter(fx, fy, s=46, color=colour, marker=marker, edgecolors="white", linewidths=0.6, zorder=3,
                   label=f"{name}s flagged ({len(flagged):,})")
        for p in flagged[:1]:
            # Near-cliques crowd together: their label sits above-left with a pointer and a
            # white backing, clear of the other markers.
            above = marker == "^"
            ax.annotate("top: " + str(p.get("label") or p["node_id"])[:24], (p["contacts"], p["ties"]), fontsize=8,
                        xytext=(-8, 16) if above else (4, 3), textcoords="offset points", color=colour,
                        ha="right" if above else "left",
                        bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.85},
                        arrowprops={"arrowstyle": "-", "color": colour, "lw": 0.7} if above else None)
        series.append({"name": f"{name}s", "x": fx, "y": fy, "node_ids": [p["node_id"] for p in flagged]})
    top = max(max(ys), *(p["ties"] for k, _ in _LISTS for p in data.get(k) or []))
    ax.set_xlim(lo / 1.4, hi * 1.4)
    ax.set_ylim(max(min(ys) / 1.6, 0.5), top * 2.0)
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

    plain = FuncFormatter(lambda v, _pos: f"{v:,.0f}" if v >= 1 else f"{v:g}")
    for axis in (ax.xaxis, ax.yaxis):
        axis.set_major_locator(LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
        axis.set_major_formatter(plain)
        axis.set_minor_formatter(NullFormatter())
    ax.set_xlabel("contacts (log scale)")
    ax.set_ylabel("ties in the neighbourhood, own ties included (log scale)")
    title = "Neighbourhoods against the graph's own law"
    ax.set_title(title, loc="left", fontweight="bold")
    ax.legend(loc="upper left", frameon=True, framealpha=0.92, fontsize=8.5)
    plots._note(fig, "Flags are leads for a person to review, not verdicts.")
    return plots._svg(fig, title, {"series": series})


GROUPS_DRAWN = 15  # bars in the group plot; every group is in the result and the CSV


def _evidence_kind(found_in: str) -> str:
    """Plain words for where a group was found."""
    if found_in == "ties":
        return "tied to each other"
    if found_in == "sign-up times":
        return "joined together"
    return f"sharing {found_in.replace('_', ' ')}"


def _times_denser(share: float, base: float | None) -> str:
    if not base or base <= 0:
        return ""
    ratio = share / base
    if ratio < 1.5:
        return ", about as dense as the whole table"
    return f", {ratio:,.0f}x the whole table" if ratio >= 10 else f", {ratio:.1f}x the whole table"


def group_density(data: dict[str, Any]) -> str:
    """Each group as a bar: the share of its possible ties (or links) present, against the whole table's."""
    groups = (data.get("groups") or [])[:GROUPS_DRAWN]
    if not groups:
        raise InvalidParameter("the result has no groups to plot", field="name")
    base = {t["found_in"]: t.get("share_at_random") for t in data.get("searched") or []}
    kinds = list(dict.fromkeys(_evidence_kind(g["found_in"]) for g in groups))
    colour = {k: plots.PALETTE[i % len(plots.PALETTE)] for i, k in
              enumerate(sorted(kinds, key=lambda k: (k != "tied to each other", k == "joined together", k)))}
    fig, ax = plots._figure()
    fig.set_size_inches(plots.SIZE[0], max(3.2, 1.9 + 0.5 * len(groups)))
    y = list(range(len(groups)))[::-1]
    shares = [g["ties"] / g["possible"] if g["possible"] else 0.0 for g in groups]
    for k in kinds:
        idx = [i for i, g in enumerate(groups) if _evidence_kind(g["found_in"]) == k]
        ax.barh([y[i] for i in idx], [100 * shares[i] for i in idx], height=0.62, color=colour[k], label=k)
    at_random = [base.get(g["found_in"]) for g in groups]
    marked = [(y[i], 100 * b) for i, b in enumerate(at_random) if b is not None]
    if marked:
        ax.scatter([x for _, x in marked], [yy for yy, _ in marked], marker="|", s=260, color="#222",
                   linewidths=1.6, zorder=3, label="whole table (people picked at random)")
    link = {"ties": "ties", "sign-up times": "links"}
    for i, g in enumerate(groups):
        what = link.get(g["found_in"], "links")
        text = (f"{g['ties']:,} of {g['possible']:,} possible {what}"
                f"{_times_denser(shares[i], at_random[i])}")
        inside = shares[i] > 0.55
        ax.text(100 * shares[i] + (-1.2 if inside else 1.2), y[i], text, va="center",
                ha="right" if inside else "left", fontsize=8.5, color="white" if inside else "#333")
    names = []
    for g in groups:
        who = ", ".join(g["members"][:3]) + (", ..." if g["people"] > 3 else "")
        names.append(f"group {g['rank']}: {g['people']:,} people\n{who[:34]}")
    ax.set_yticks(y, names, fontsize=8.5)
    ax.set_xlim(0, 100)
    ax.set_ylim(-0.6, len(groups) - 0.4)
    ax.set_xlabel("share of the possible ties (or shared values) present among the members, %")
    ax.grid(axis="y", visible=False)
    more = len(data.get("groups") or []) - len(groups)
    title = "Dense groups: how tightly each is knit" + (f" (the first {len(groups)}; {more:,} more in the CSV)"
                                                         if more > 0 else "")
    ax.set_title(title, loc="left", fontweight="bold", pad=24)
    ax.legend(loc="lower left", bbox_to_anchor=(0.0, 1.0), ncol=len(kinds) + int(bool(marked)), frameon=False,
              fontsize=8.5, borderaxespad=0.2, handlelength=1.4)
    plots._note(fig, "Flags are leads for a person to review, not verdicts.")
    series = [{"group": g["rank"], "found_in": g["found_in"], "evidence_kind": _evidence_kind(g["found_in"]),
               "people": g["people"], "share_present": round(s, 4), "share_at_random": b,
               "members": g["members"], "evidence": g["evidence"]} for g, s, b in zip(groups, shares, at_random)]
    return plots._svg(fig, title, {"series": series})

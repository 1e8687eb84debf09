"""The demo's tasting-events part: a relationship graph built from who attended which tasting.

The cooperative's stores hold small tastings; members of a "tasting circle" (five to
eight neighbours) come together, and a few other store members drop in. Twice a
season every store joins a large fair. The attendance table is invented and
generated reproducibly from the demo's seed, written as CSV beside the report, and
uploaded with ``part=events``: Newman's weighting (a tasting of n people adds
1/(n-1) to each pair), the fairs above the size cap down-weighted, and the disparity
filter keeping the ties that stand out from each member's many weak fair ties.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from .scenario import STORES

if TYPE_CHECKING:
    from .demo import Demo

__all__ = ["tasting_events", "write_tastings"]

FAIRS = 4


def write_tastings(sc: Any, folder: Path, *, seed: int) -> Path:
    """Write the invented attendance table (member, tasting, date) and return its path."""
    rng = np.random.default_rng(seed + 1)
    rows: list[str] = []
    members = np.arange(sc.members)
    by_store = [members[sc.store == s] for s in range(len(STORES))]
    start = np.datetime64("2026-03-01")
    n = 0
    for s, people in enumerate(by_store):
        if people.size < 10:
            continue
        order = rng.permutation(people)
        circles = np.array_split(order, max(people.size // 6, 1))
        for c, circle in enumerate(circles[: max(len(circles) // 3, 1)]):
            for _ in range(int(rng.integers(8, 15))):
                came = circle[rng.random(circle.size) < 0.8]
                guests = rng.choice(people, size=int(rng.integers(0, 3)), replace=False)
                attendees = np.unique(np.concatenate([came, guests]))
                if attendees.size < 2:
                    continue
                day = start + np.timedelta64(int(rng.integers(0, 120)), "D")
                rows += [f"{sc.ids[p]},{STORES[s][0]} tasting {n},{day}\n" for p in attendees]
                n += 1
    for f in range(FAIRS):
        day = start + np.timedelta64(30 * f + 14, "D")
        fair = rng.choice(members, size=min(400, sc.members // 3), replace=False)
        rows += [f"{sc.ids[p]},spring fair {f + 1},{day}\n" for p in fair]
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "tastings.csv"
    path.write_text("member,tasting,date\n" + "".join(rows), encoding="utf-8")
    return path


def tasting_events(d: Demo, sc: Any, folder: Path, *, seed: int = 7) -> None:
    """Build the tasting graph over HTTP and report how its ties were made."""
    path = write_tastings(sc, folder, seed=seed)
    d.section("Ties from tasting attendance (upload part: events)")
    d.say("Not every team holds a list of ties. The cooperative also knows who attended which tasting\n"
          f"({path.name} beside this report). Each tasting of n members adds 1/(n-1) to each pair who came\n"
          "(Newman's weighting); the large fairs, where everyone meets everyone, count for less still\n"
          "(down-weighted above 100 people); the disparity filter keeps only ties that stand out from\n"
          "each member's other ties, so the fairs' weak ties go and the tasting circles stay.")
    g = d.check(d.http.post("/v1/graphs", json={"name": "tasting attendance", "directed": False,
                                               "description": "invented demo data"}))
    with open(path, "rb") as fh:
        v = d.check(d.http.post(f"/v1/graphs/{g['id']}/versions", content=fh, headers={"Content-Type": "text/csv"},
                                params={"part": "events", "person": "member", "event": "tasting", "time": "date",
                                        "projection": "newman", "max_event_size": 100, "oversized": "downweight",
                                        "backbone": "disparity_filter", "alpha": 0.05}))
    p, b = v["summary"]["projection"], v["summary"]["backbone"]
    d.table(["figure", "value"], [
        ["attendance rows", f"{p['rows']:,}"],
        ["tastings and fairs", f"{p['events']:,}"],
        ["events above 100 people (down-weighted)", f"{p['events_downweighted']:,}"],
        ["members who attended", f"{p['people_in_events']:,}"],
        ["ties from shared tastings and fairs", f"{p['ties']:,}"],
        ["ties kept by the filter", f"{b['ties_kept']:,} ({b['edge_share_kept']:.0%} of ties, "
                                    f"{b['weight_share_kept']:.0%} of tie weight)"],
        ["members left without a tie", f"{b['people_left_without_ties']:,} ({b['people_left_without_ties_share']:.0%})"],
    ])
    d.say(f"Version {v['number']} of graph '{g['name']}' holds these ties; scores, shortlists and forecasts\n"
          "run on it like on any uploaded edge list.")

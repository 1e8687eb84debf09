"""The demo's referral-integrity part: a ring gaming the sign-up bonus, found and left out.

During the delivery launch the cooperative pays a bonus for every member who signs
up through a referral. One ordinary member games it: seven new accounts opened
within two days, all at that member's delivery address, all referring each other.
The ring and every member's delivery address (one per household) and sign-up date
are invented here, reproducibly from the demo's seed, written as CSV beside the
report and uploaded as a new version of the members' graph once every other part
of the demo has run, so no earlier figure changes. ``odd_neighbourhoods`` (on the
ties) and ``dense_groups`` (on the addresses and sign-up times) look for such
structures; a shortlist then leaves out the near-cliques the first job listed,
until someone has reviewed them.
"""

from __future__ import annotations

import csv
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from .scenario import STORES

if TYPE_CHECKING:
    from .demo import Demo

__all__ = ["RING_ACCOUNTS", "write_signups", "integrity_story"]

RING_ACCOUNTS = 7  # new accounts opened by one member to collect the sign-up bonus
RING_DAYS = ("2026-02-10", "2026-02-11")
# Invented street names for the delivery addresses.
STREETS = ("Orchard Row", "Millrace Lane", "Tanner's Walk", "Quarry Street", "Bramble Close", "Weaver Road",
           "Heron Place", "Sorrel Way", "Chapel Yard", "Linden Avenue", "Copper Lane", "Meadow Terrace",
           "Saddler Street", "Rookery Road", "Thistle Court", "Beacon Hill", "Malting Lane", "Ferry Road",
           "Gorse Way", "Pinfold Street", "Cider Lane", "Hazel Grove", "Lantern Walk", "Wharf Street")


def write_signups(sc: Any, folder: Path, *, seed: int) -> tuple[Path, Path, list[str]]:
    """Write the ring's referral ties and every member's address and sign-up date; return the ring's ids.

    The first id of the ring is the member who opened the accounts; the others are the new accounts.
    """
    rng = np.random.default_rng(seed + 3)
    n = sc.members
    degree = np.bincount(np.concatenate((sc.src, sc.dst)), minlength=n)
    ordinary = np.flatnonzero(sc.consent & (degree >= 2) & (degree <= 6))
    organiser = int(rng.choice(ordinary))
    accounts = [f"m{n + i:05d}" for i in range(1, RING_ACCOUNTS + 1)]
    ring = [sc.ids[organiser], *accounts]
    _, home = np.unique(sc.household, return_inverse=True)
    address = [f"{c // len(STREETS) + 1} {STREETS[c % len(STREETS)]}" for c in np.asarray(home).ravel().tolist()]
    day = np.datetime64("2017-01-01") + rng.integers(0, 9 * 365, size=n).astype("timedelta64[D]")
    folder.mkdir(parents=True, exist_ok=True)
    ties, people = folder / "signup_ring.csv", folder / "members_signups.csv"
    with open(ties, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["source", "target", "weight"])
        w.writerows((a, b, int(rng.integers(1, 3))) for i, a in enumerate(ring) for b in ring[i + 1:])
    with open(people, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["id", "segment", "region", "consent", "cost", "value", "delivery_address", "joined"])
        for i, ident in enumerate(sc.ids):
            name, district = STORES[int(sc.store[i])]
            # Only members already on delivery have a delivery address (value 0: not the campaign's target).
            w.writerow([ident, name, district, "true" if sc.consent[i] else "false", f"{sc.cost[i]:.2f}",
                        int(sc.value[i]), address[i] if sc.value[i] == 0 or i == organiser else "", str(day[i])])
        name, district = STORES[int(sc.store[organiser])]
        for k, ident in enumerate(accounts):
            w.writerow([ident, name, district, "true", f"{sc.cost[organiser]:.2f}", 1, address[organiser],
                        RING_DAYS[k % len(RING_DAYS)]])
    return ties, people, ring


def integrity_story(d: Demo, sc: Any, gid: str, folder: Path, *, seed: int, shortlist: dict[str, Any]) -> None:
    """Upload the ring, look for it with both integrity kinds, and shortlist without the flagged people."""
    ties, people, ring = write_signups(sc, folder, seed=seed)
    d.section("Referral integrity: a ring gaming the sign-up bonus (odd_neighbourhoods, dense_groups)")
    d.say(_lines(
        "The delivery launch pays a bonus for every member who signs up through a referral. In this invented "
        f"story one member opened {RING_ACCOUNTS} new accounts within two days, all at their own delivery "
        f"address, all referring each other ({ties.name} beside this report; {people.name} holds every "
        "member's delivery address, one per household, and sign-up date). They are uploaded as a new version "
        "of the members' graph, after everything above."))
    with open(ties, "rb") as fh:
        d.check(d.http.post(f"/v1/graphs/{gid}/versions", params={"part": "edges", "mode": "append"}, content=fh,
                            headers={"Content-Type": "text/csv"}))
    with open(people, "rb") as fh:
        v = d.check(d.http.post(f"/v1/graphs/{gid}/versions", params={"part": "nodes", "mode": "append"},
                                content=fh, headers={"Content-Type": "text/csv"}))
    d.say(f"Version {v['number']}: {v['nodes']:,} people, {v['edges']:,} ties.")

    odd = d.run_job(gid, "odd_neighbourhoods", {"top": 10}, "odd neighbourhoods")
    cliques, stars = odd.get("near_cliques") or [], odd.get("near_stars") or []
    law = next((x for x in odd.get("laws") or [] if x.get("law") == "E~N"), None)
    if law:
        d.say(_lines(law["reading"]))
    found = sum(p["node_id"] in ring for p in cliques)
    d.say(_lines(
        f"Listed for review: {len(cliques)} people whose contacts know each other far more than that law "
        f"expects (near-cliques: possible rings; {found} of the {len(ring)} in the sign-up ring), and "
        f"{len(stars)} whose many contacts hardly know each other (near-stars)."))
    if cliques:
        d.say(_lines(f"Top near-clique, {cliques[0]['node_id']}: {cliques[0]['evidence']}"))
    plot = d.save_plot(f"/v1/jobs/{odd['_job_id']}/plots/neighbourhood_law.svg", "neighbourhood_law.svg")
    if plot:
        d.md.append(f"\n![neighbourhoods against the law]({plot})\n")

    dense = d.run_job(gid, "dense_groups", {"ties": False, "attributes": ["delivery_address"],
                                            "time_column": "joined", "window_hours": 72, "groups": 2},
                      "dense groups")
    groups = dense.get("groups") or []
    sizes = _and([f"{g['people']:,}" for g in groups]) or "no"
    d.say(_lines(
        f"Dense groups: {len(groups)} group{'s' if len(groups) != 1 else ''} of {sizes} people, searched among "
        "the delivery addresses and among people who joined through the same contacts within 3 days (the ties "
        "themselves were compared above)."))
    d.table(["group", "found in", "people", "in the ring", "evidence"],
            [[g["rank"], g["found_in"].replace("_", " "), g["people"], sum(m in ring for m in g["members"]),
              g["evidence"]] for g in groups])
    base = {t["found_in"]: t.get("share_at_random") or 0.0 for t in dense.get("searched") or []}

    def stands_out(g: dict[str, Any]) -> float:  # times denser than its whole table
        return (g["ties"] / g["possible"]) / base[g["found_in"]] if g["possible"] and base[g["found_in"]] else 0.0

    if groups:
        top = max(groups, key=stands_out)
        d.say(_lines(f"The group that stands out most from its table is group {top['rank']} "
                     f"({_where(top['found_in'])}, {stands_out(top):,.0f} times as dense as the whole table): "
                     f"{top['evidence']}."))
        shows = [g["rank"] for g in groups if 2 * sum(m in ring for m in g["members"]) >= len(ring)]
        d.say(_lines(f"The sign-up ring is in group{'s' if len(shows) != 1 else ''} "
                     f"{_and([str(x) for x in shows]) or 'none'}. The groups also hold households sharing a home "
                     "and neighbours who joined in the same week: exactly the cases a person reviews and clears."))
    plot = d.save_plot(f"/v1/jobs/{dense['_job_id']}/plots/group_density.svg", "group_density.svg")
    if plot:
        d.md.append(f"\n![dense groups]({plot})\n")
    d.say(_lines(str(dense.get("caution") or "")))

    rule = {"job": odd["_job_id"], "lists": ["near_cliques"]}
    sl = d.run_job(gid, "shortlist", {**shortlist, "exclude_flagged": rule}, "shortlist (flags out)")
    note = next((w for w in sl.get("warnings") or [] if w.get("code") == "excluded_flagged"), None)
    seeds = [s["node_id"] for s in sl.get("seeds") or []]
    left_out = set(((sl.get("params") or {}).get("exclude_flagged") or {}).get("node_ids") or [])
    if note:
        d.say(_lines(f"The shortlist again, with exclude_flagged naming the near-cliques of the neighbourhood "
                     f"job: {note['message']}."))
    among = sum(s in left_out for s in seeds)
    d.say(_lines(
        f"It has {len(seeds)} members, {among or 'none'} of them flagged, and expected reach "
        f"{(sl.get('expected_reach') or {}).get('mean', 0):,.0f} people. Leaving people out until someone has "
        "looked is the cautious use of a flag; it decides nothing about them."))


def _and(items: list[str]) -> str:
    """``a, b and c``."""
    return ", ".join(items[:-1]) + " and " + items[-1] if len(items) > 1 else "".join(items)


def _where(found_in: str) -> str:
    if found_in == "ties":
        return "among the ties"
    if found_in == "sign-up times":
        return "people who joined together"
    return "people sharing a " + found_in.replace("_", " ")


def _lines(text: str) -> str:
    from .demo import _wrap

    return _wrap(text)

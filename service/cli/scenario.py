"""The demo's invented scenario: a regional food cooperative launching home delivery.

Everything here is made up and generated reproducibly from a seed: no real
people, places or brands. About 20,000 members shop at a dozen neighbourhood
stores; the cooperative has 25 ambassador kits to hand out for the delivery
launch. Ties come from three sources, with interaction counts as weights:

* shared households: everyone in a household is tied to everyone else, with
  many interactions (20 to 40);
* volunteer shifts: volunteers of one store work shifts together, and each
  pair's weight is the number of shifts they shared;
* referrals and acquaintance: a heavy-tailed "activity" per member (Pareto,
  exponent about 2.5) drives a Chung-Lu style draw of ties, mostly inside the
  member's store, some across stores (about 12%).

Attributes: store (the segment), district (the region), marketing consent
(about 70% yes), the cost of delivering a kit (grows with the member's
distance from their store), and a value of 1 for members not yet on delivery
(the campaign's target audience) and 0 for those already on it.
"""

from __future__ import annotations

import csv
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

__all__ = ["STORES", "Scenario", "generate", "write_csv"]

# Invented neighbourhood store names and the district each lies in.
STORES: tuple[tuple[str, str], ...] = (
    ("Ashgrove", "north"),
    ("Birchfold", "north"),
    ("Cobble Hill", "north"),
    ("Dovecote", "east"),
    ("Emberly", "east"),
    ("Foxmoor", "east"),
    ("Glenwick", "south"),
    ("Hollowmere", "south"),
    ("Inkwell Yard", "south"),
    ("Juniper Flats", "west"),
    ("Kilnworth", "west"),
    ("Larkspur", "west"),
)


@dataclass(frozen=True)
class Scenario:
    ids: list[str]
    store: NDArray[np.int32]
    consent: NDArray[np.bool_]
    cost: NDArray[np.float64]
    value: NDArray[np.float64]
    src: NDArray[np.int32]
    dst: NDArray[np.int32]
    weight: NDArray[np.float64]
    kits: int = 25
    # The home each member shares (households of 1 to 4 people of one store); read by the
    # demo's integrity part for delivery addresses, never uploaded with the ties' files.
    household: NDArray[np.int32] | None = None

    @property
    def members(self) -> int:
        return len(self.ids)


def generate(members: int = 20_000, *, seed: int = 7, cross_store_share: float = 0.12) -> Scenario:
    """Generate the cooperative's member graph (undirected, weighted)."""
    if members < 60:
        raise ValueError("the scenario needs at least 60 members")
    rng = np.random.default_rng(seed)
    k = len(STORES)
    # Store sizes vary: some neighbourhoods are busier than others.
    share = rng.dirichlet(np.full(k, 6.0))
    store = np.sort(rng.choice(k, size=members, p=share)).astype(np.int32)
    activity = (rng.pareto(1.5, size=members) + 1.0)  # tail exponent 2.5 for the density
    pairs: dict[tuple[int, int], float] = {}

    def add(a: NDArray[np.int64], b: NDArray[np.int64], w: NDArray[np.float64]) -> None:
        keep = a != b
        lo = np.minimum(a[keep], b[keep])
        hi = np.maximum(a[keep], b[keep])
        for x, y, ww in zip(lo.tolist(), hi.tolist(), w[keep].tolist()):
            pairs[(x, y)] = pairs.get((x, y), 0.0) + ww

    # Households: consecutive members of one store share a home (sizes 1-4).
    sizes = rng.choice([1, 2, 3, 4], size=members, p=[0.35, 0.35, 0.18, 0.12])
    household = np.arange(members, dtype=np.int32)  # alone unless a household below (no draws of its own)
    start = 0
    for size in sizes:
        if start >= members:
            break
        end = min(start + int(size), members)
        if end - start > 1 and store[start] == store[end - 1]:
            hh = np.arange(start, end)
            household[start:end] = start
            a, b = np.triu_indices(len(hh), 1)
            add(hh[a], hh[b], rng.integers(20, 41, size=len(a)).astype(np.float64))
        start = end

    # Volunteer shifts: 15% volunteer; shifts of 4-8 volunteers of one store.
    volunteers = np.flatnonzero(rng.random(members) < 0.15)
    for s in range(k):
        vs = volunteers[store[volunteers] == s]
        if len(vs) < 4:
            continue
        for _ in range(len(vs) // 3):
            crew = rng.choice(vs, size=min(len(vs), int(rng.integers(4, 9))), replace=False)
            a, b = np.triu_indices(len(crew), 1)
            add(crew[a], crew[b], np.ones(len(a)))

    # Referrals and acquaintance: Chung-Lu draws weighted by activity.
    offsets = np.searchsorted(store, np.arange(k + 1))
    draws = int(members * 2.5)
    cross = rng.random(draws) < cross_store_share
    p_all = activity / activity.sum()
    a = rng.choice(members, size=draws, p=p_all)
    b = np.empty(draws, dtype=np.int64)
    b[cross] = rng.choice(members, size=int(cross.sum()), p=p_all)
    for s in range(k):
        lo, hi = offsets[s], offsets[s + 1]
        mask = ~cross & (store[a] == s)
        if hi > lo and mask.any():
            local = activity[lo:hi] / activity[lo:hi].sum()
            b[mask] = lo + rng.choice(hi - lo, size=int(mask.sum()), p=local)
    add(a, b, rng.integers(1, 4, size=draws).astype(np.float64))

    keys = np.array(list(pairs.keys()), dtype=np.int64).reshape(-1, 2)
    weights = np.array(list(pairs.values()), dtype=np.float64)
    # Distance from the store drives the kit's delivery cost (1.5 to about 9 units).
    distance = rng.gamma(2.0, 1.2, size=members)
    cost = np.round(1.5 + 0.9 * distance, 2)
    consent = rng.random(members) < 0.70
    on_delivery = rng.random(members) < 0.15
    ids = [f"m{i:05d}" for i in range(1, members + 1)]
    perm = rng.permutation(members)  # ids should not reveal the store order
    ids = [ids[i] for i in perm]
    return Scenario(
        ids=ids,
        store=store,
        consent=consent,
        cost=cost,
        value=np.where(on_delivery, 0.0, 1.0),
        src=keys[:, 0].astype(np.int32),
        dst=keys[:, 1].astype(np.int32),
        weight=weights,
        household=household,
    )


def write_csv(sc: Scenario, folder: Path) -> tuple[Path, Path]:
    """Write ``edges.csv`` and ``members.csv`` in the upload format."""
    folder.mkdir(parents=True, exist_ok=True)
    edges, nodes = folder / "edges.csv", folder / "members.csv"
    with open(edges, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["source", "target", "weight"])
        ids = sc.ids
        w.writerows(
            (ids[s], ids[t], int(x)) for s, t, x in zip(sc.src.tolist(), sc.dst.tolist(), sc.weight.tolist())
        )
    with open(nodes, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["id", "segment", "region", "consent", "cost", "value"])
        for i, ident in enumerate(sc.ids):
            name, district = STORES[int(sc.store[i])]
            w.writerow(
                [ident, name, district, "true" if sc.consent[i] else "false", f"{sc.cost[i]:.2f}", int(sc.value[i])]
            )
    return edges, nodes

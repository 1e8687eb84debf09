"""Past campaigns simulated under Independent Cascade and uploaded over HTTP, for tests of the
learning and backtest kinds.

The simulation follows Kempe, Kleinberg and Tardos (2003): each person who adopts in round t
gets one chance to pass the campaign to each connection who has not adopted, in round t + 1.
"""

from __future__ import annotations

import httpx
import numpy as np

__all__ = ["simulate", "upload_campaigns"]


def simulate(edges: list[tuple[str, str]], p: float, seeds: list[str], rng: np.random.Generator) -> dict[str, int]:
    """Independent Cascade on the undirected edges: person -> round adopted (0 = seed)."""
    nb: dict[str, list[str]] = {}
    for a, b in edges:
        nb.setdefault(a, []).append(b)
        nb.setdefault(b, []).append(a)
    when = {s: 0 for s in seeds}
    frontier, t = list(seeds), 0
    while frontier:
        t += 1
        new = []
        for u in frontier:
            for v in nb.get(u, []):
                if v not in when and rng.random() < p:
                    when[v] = t
                    new.append(v)
        frontier = new
    return when


async def upload_campaigns(client: httpx.AsyncClient, gid: str, edges: list[tuple[str, str]], count: int,
                           *, p: float, seed: int = 5, seeds_per_campaign: int = 3) -> list[str]:
    """Create ``count`` campaigns (oldest first) and upload a simulated log (in rounds) to each."""
    rng = np.random.default_rng(seed)
    people = sorted({x for e in edges for x in e})
    ids = []
    for i in range(count):
        r = await client.post(f"/v1/graphs/{gid}/campaigns",
                              json={"name": f"c{i}", "started_at": f"2026-01-{i % 28 + 1:02d}T08:{i // 28:02d}:00Z"})
        assert r.status_code == 201, r.text
        cid = r.json()["id"]
        chosen = [people[int(k)] for k in rng.choice(len(people), seeds_per_campaign, replace=False)]
        when = simulate(edges, p, chosen, rng)
        if len(when) < 2:  # a campaign needs two people: a second seed
            when[next(x for x in people if x not in when)] = 0
        log = "person,role,round\n" + "".join(f"{v},{'seed' if t == 0 else 'adopter'},{t}\n" for v, t in when.items())
        r = await client.put(f"/v1/graphs/{gid}/campaigns/{cid}/log", content=log,
                             headers={"Content-Type": "text/csv"})
        assert r.status_code == 200, r.text
        ids.append(cid)
    return ids

"""The console over HTTP, without a browser: sign-in, sessions, CSRF, scopes, tenants, escaping, the picture.

The browser walk is tests/console/test_browser.py; these checks read the raw answers.
"""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET
from collections.abc import AsyncIterator
from pathlib import Path
from urllib.parse import quote

import httpx
import networkx as nx
import numpy as np
import pytest

from tests.conftest import make_settings
from tests.jobs.api_helpers import run_worker_once, worker_for

pytestmark = pytest.mark.anyio

EVIL_ID = '"><img src=x onerror=alert(1)>'
SCRIPT_ID = "<script>alert(2)</script>"


@pytest.fixture
async def app_client(sqlite_url: str, tmp_path: Path) -> AsyncIterator[httpx.AsyncClient]:
    from service.app import create_app
    from service.usecases.loading import clear_cache

    app = create_app(make_settings(sqlite_url, tmp_path, auth_disabled=False))
    async with app.router.lifespan_context(app):
        transport = httpx.ASGITransport(app=app)
        async with httpx.AsyncClient(transport=transport, base_url="http://testserver") as c:
            c.app = app  # type: ignore[attr-defined]
            yield c
    clear_cache()


def make_key(client: httpx.AsyncClient, tenant: str, scopes: list[str]) -> tuple[str, str]:
    from storage.repo import keys as key_repo

    with client.app.state.sessionmaker() as db:  # type: ignore[attr-defined]
        key, plain = key_repo.add_key(db, tenant_id=tenant, scopes=scopes, name=f"{tenant} test key")
        db.commit()
        return key.id, plain


async def make_network(client: httpx.AsyncClient, key: str, name: str = "Cooperative <b>north</b>") -> str:
    auth = {"Authorization": f"Bearer {key}"}
    r = await client.post("/v1/graphs", json={"name": name, "directed": False}, headers=auth)
    assert r.status_code == 201, r.text
    gid = str(r.json()["id"])
    # Zachary's karate club (NetworkX) with two hostile ids in place of two members.
    names = {0: SCRIPT_ID, 33: EVIL_ID}
    csv = "source,target\n" + "".join(
        ",".join('"' + x.replace('"', '""') + '"' for x in (names.get(u, f"k{u}"), names.get(v, f"k{v}"))) + "\n"
        for u, v in nx.karate_club_graph().edges())
    r = await client.post(f"/v1/graphs/{gid}/versions", params={"part": "edges"}, content=csv,
                          headers={**auth, "Content-Type": "text/csv"})
    assert r.status_code == 201, r.text
    nodes = "id,segment,consent,label\n" + "".join(
        f"k{i},{'<i>east</i>' if i % 2 else 'west'},true,member {i}\n" for i in range(1, 33)) + (
        f'"{SCRIPT_ID}",west,true,<u>hostile label</u>\n"{EVIL_ID.replace(chr(34), chr(34) * 2)}",west,true,x\n')
    r = await client.post(f"/v1/graphs/{gid}/versions", params={"part": "nodes", "mode": "append"}, content=nodes,
                          headers={**auth, "Content-Type": "text/csv"})
    assert r.status_code == 201, r.text
    return gid


async def sign_in(client: httpx.AsyncClient, key: str) -> httpx.Response:
    return await client.post("/console/sign-in", data={"key": key, "next": "/console/graphs"})


def csrf_of(html: str) -> str:
    found = re.search(r'name="csrf" value="([^"]+)"', html)
    assert found, html[:500]
    return found.group(1)


async def test_sign_in_sets_a_strict_session_and_a_new_id_each_time(app_client: httpx.AsyncClient) -> None:
    _, key = make_key(app_client, "t1", ["read"])
    r = await app_client.get("/console/graphs")
    assert r.status_code == 303 and r.headers["location"].startswith("/console/sign-in")
    r = await sign_in(app_client, key)
    assert r.status_code == 303 and r.headers["location"] == "/console/graphs"
    cookie = r.headers["set-cookie"]
    # RFC 6265 attributes: not readable by scripts, not sent cross-site, scoped to the console.
    assert "HttpOnly" in cookie and "SameSite=strict" in cookie and "Path=/console" in cookie
    assert "Secure" not in cookie  # plain http here; over https the flag is set (request scheme)
    first = app_client.cookies.get("bw_console")
    await sign_in(app_client, key)
    assert app_client.cookies.get("bw_console") != first  # session fixation: a new id at every sign-in
    page = await app_client.get("/console/graphs")
    assert page.status_code == 200 and "look only" in page.text
    # OWASP secure headers: a strict CSP with only our own scripts and styles, and no framing.
    csp = page.headers["content-security-policy"]
    assert "script-src 'self'" in csp and "style-src 'self'" in csp and "frame-ancestors 'none'" in csp
    assert "unsafe-inline" not in csp and page.headers["x-frame-options"] == "DENY"
    r = await sign_in(app_client, "bw_nothing_here")
    assert r.status_code == 401 and "not known" in r.text


async def test_forged_and_revoked_sessions_end(app_client: httpx.AsyncClient) -> None:
    from storage.repo import keys as key_repo

    key_id, key = make_key(app_client, "t1", ["read"])
    await sign_in(app_client, key)
    value = app_client.cookies.get("bw_console") or ""
    forged = value.replace(key_id, "key_someone_else", 1)
    app_client.cookies.set("bw_console", forged, path="/console")
    assert (await app_client.get("/console/graphs")).status_code == 303
    app_client.cookies.set("bw_console", value, path="/console")
    assert (await app_client.get("/console/graphs")).status_code == 200
    with app_client.app.state.sessionmaker() as db:  # type: ignore[attr-defined]
        key_repo.revoke_key(db, key_id)
        db.commit()
    assert (await app_client.get("/console/graphs")).status_code == 303


async def test_forms_need_the_csrf_token_and_the_write_scope(app_client: httpx.AsyncClient) -> None:
    _, writer = make_key(app_client, "t1", ["read", "write"])
    _, reader = make_key(app_client, "t1", ["read"])
    gid = await make_network(app_client, writer)
    await sign_in(app_client, writer)
    page = await app_client.get(f"/console/graphs/{gid}/start/shortlist")
    token = csrf_of(page.text)
    form = {"budget": "3", "version": "2", "method": "imm", "scheme": "uniform", "p": "0.1", "model": "ic"}
    r = await app_client.post(f"/console/graphs/{gid}/start/shortlist", data=form)
    assert r.status_code == 403 and "expired" in r.text  # no token
    r = await app_client.post(f"/console/graphs/{gid}/start/shortlist", data={**form, "csrf": "x" + token})
    assert r.status_code == 403
    # A refusal of the rules is shown above the form in the API's words.
    r = await app_client.post(f"/console/graphs/{gid}/start/shortlist",
                              data={**form, "csrf": token, "must_include": "nobody"})
    assert r.status_code == 422 and "nobody" in r.text and 'role="alert"' in r.text
    r = await app_client.post(f"/console/graphs/{gid}/start/shortlist", data={**form, "csrf": token})
    assert r.status_code == 303 and r.headers["location"].startswith("/console/jobs/")
    await sign_in(app_client, reader)
    token = csrf_of((await app_client.get(f"/console/graphs/{gid}/start/shortlist")).text)
    r = await app_client.post(f"/console/graphs/{gid}/start/shortlist", data={**form, "csrf": token})
    assert r.status_code == 403 and "may look but not start" in r.text
    jobs = (await app_client.get("/v1/jobs", headers={"Authorization": f"Bearer {reader}"})).json()["items"]
    assert len(jobs) == 1  # only the writer's shortlist


async def test_other_tenants_ids_are_not_found_and_ids_are_escaped(app_client: httpx.AsyncClient) -> None:
    _, writer = make_key(app_client, "t1", ["read", "write"])
    _, stranger = make_key(app_client, "t2", ["read", "write"])
    gid = await make_network(app_client, writer)
    auth = {"Authorization": f"Bearer {writer}"}
    job = (await app_client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "layout", "params": {}}, headers=auth)).json()
    sl = (await app_client.post(f"/v1/graphs/{gid}/jobs", headers=auth, json={"kind": "shortlist", "params": {
        "budget": 2, "must_include": [SCRIPT_ID, EVIL_ID], "probability": {"scheme": "uniform", "p": 0.1},
        "forecast_runs": 200, "evaluation_samples": 2000}})).json()
    await app_client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "scores", "params": {"measures": ["degree"]}},
                          headers=auth)
    worker = worker_for(app_client)
    for _ in range(3):
        await run_worker_once(worker)
    await sign_in(app_client, writer)
    person = f"/console/graphs/{gid}/versions/2/people/" + quote(SCRIPT_ID, safe="")
    r = await app_client.get(person)
    assert r.status_code == 200 and "&lt;u&gt;hostile label&lt;/u&gt;" in r.text
    r = await app_client.get(f"/console/graphs/{gid}/versions/2/rankings?measure=degree")
    assert r.status_code == 200 and 'href="/console/graphs/' + gid + '/versions/2/people/%3Cscript%3E' in r.text
    # Next contacts of a pasted list: the hostile ids come back escaped, by NetworkX's neighbours of k0.
    token = csrf_of(r.text)
    r = await app_client.post(f"/console/graphs/{gid}/versions/2/next-contacts",
                              data={"csrf": token, "adopters": SCRIPT_ID})
    assert r.status_code == 200
    shown = set(re.findall(r'<tr><td><span class="mono">([^<]+)</span>', r.text))
    assert shown and shown <= {f"k{v}" for v in nx.karate_club_graph()[0]}
    pages = [person, f"/console/graphs/{gid}/versions/2/rankings?measure=degree", f"/console/graphs/{gid}", f"/console/graphs/{gid}/versions/2", f"/console/jobs/{sl['id']}",
             f"/console/graphs/{gid}/versions/2/picture?shortlist={sl['id']}", "/console/graphs", "/console/jobs"]
    for url in pages:
        r = await app_client.get(url)
        assert r.status_code == 200, (url, r.text[:300])
        # HTML injection: the hostile ids, labels, segments and graph name come back escaped, never as markup.
        for raw in (SCRIPT_ID, EVIL_ID, "<b>north</b>", "<i>east</i>", "<u>hostile"):
            assert raw not in r.text, (url, raw)
    picture = (await app_client.get(pages[5])).text
    assert 'data-id="&lt;script&gt;alert(2)&lt;/script&gt;"' in picture
    assert 'data-id="&#34;&gt;&lt;img' in picture or 'data-id="&quot;&gt;&lt;img' in picture
    await sign_in(app_client, stranger)
    for url in [*pages[:6], f"/console/jobs/{job['id']}", f"/console/jobs/{sl['id']}/result.csv"]:
        r = await app_client.get(url)
        assert r.status_code == 404 and "Nothing here" in r.text, url


async def test_layout_svg_separates_two_cliques_and_marks_the_seeds(app_client: httpx.AsyncClient) -> None:
    _, writer = make_key(app_client, "t1", ["read", "write"])
    auth = {"Authorization": f"Bearer {writer}"}
    gid = str((await app_client.post("/v1/graphs", json={"name": "two rooms", "directed": False},
                                     headers=auth)).json()["id"])
    # Two 6-cliques joined by one tie (NetworkX's barbell graph): a force-directed layout keeps each room together.
    G = nx.barbell_graph(6, 0)
    csv = "source,target\n" + "".join(f"p{u},p{v}\n" for u, v in G.edges())
    await app_client.post(f"/v1/graphs/{gid}/versions", params={"part": "edges"}, content=csv,
                          headers={**auth, "Content-Type": "text/csv"})
    r = await app_client.get(f"/v1/graphs/{gid}/versions/1/layout.svg", headers=auth)
    assert r.status_code == 422 and "no layout yet" in r.json()["detail"]
    await app_client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "layout", "params": {}}, headers=auth)
    fc = (await app_client.post(f"/v1/graphs/{gid}/jobs", headers=auth, json={"kind": "forecast", "params": {
        "seeds": ["p0"], "probability": {"scheme": "uniform", "p": 0.9}, "simulations": 300}})).json()
    worker = worker_for(app_client)
    await run_worker_once(worker)
    await run_worker_once(worker)
    r = await app_client.get(f"/v1/graphs/{gid}/versions/1/layout.svg", params={"forecast": fc["id"]}, headers=auth)
    assert r.status_code == 200 and r.headers["content-type"].startswith("image/svg+xml")
    root = ET.fromstring(r.text)
    ns = "{http://www.w3.org/2000/svg}"
    people = [c for c in root.iter(ns + "circle") if c.find(ns + "title") is not None]
    assert len(people) == G.number_of_nodes()
    where = {c.find(ns + "title").text: (float(c.get("cx")), float(c.get("cy"))) for c in people}  # type: ignore[union-attr]
    rooms = [sorted(c) for c in nx.connected_components(nx.barbell_graph(6, 0).subgraph(range(6)))] + [
        list(range(6, 12))]

    def spread(a: list[int], b: list[int]) -> float:
        return float(np.mean([np.hypot(where[f"p{i}"][0] - where[f"p{j}"][0], where[f"p{i}"][1] - where[f"p{j}"][1])
                              for i in a for j in b if i != j]))

    assert spread(rooms[0], rooms[1]) > 1.5 * max(spread(rooms[0], rooms[0]), spread(rooms[1], rooms[1]))
    seeds = [c for c in people if c.get("class") == "seed"]
    reached = [c for c in people if c.get("class") == "reached"]
    assert [c.get("data-id") for c in seeds] == ["p0"]
    # With p = 0.9 every member of p0's room is reached in most campaigns (closed form: 0.9 direct tie).
    assert {c.find(ns + "title").text for c in reached} >= {f"p{i}" for i in range(1, 6)}  # type: ignore[union-attr]
    r = await app_client.get(f"/v1/graphs/{gid}/versions/1/layout.svg", params={"size_by": "pagerank"}, headers=auth)
    assert r.status_code == 422 and "size_by must be one of degree" in r.json()["detail"]


async def test_a_large_network_is_drawn_as_the_seeds_neighbourhood_and_community_circles(
        app_client: httpx.AsyncClient, tmp_path: Path) -> None:
    from service.cli.scenario import generate, write_csv

    _, writer = make_key(app_client, "t1", ["read", "write"])
    auth = {"Authorization": f"Bearer {writer}"}
    edges, _ = write_csv(generate(400, seed=5), tmp_path / "files")
    gid = str((await app_client.post("/v1/graphs", json={"name": "coop", "directed": False}, headers=auth)).json()["id"])
    await app_client.post(f"/v1/graphs/{gid}/versions", params={"part": "edges"}, content=edges.read_bytes(),
                          headers={**auth, "Content-Type": "text/csv"})
    lay = (await app_client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "layout", "params": {}}, headers=auth)).json()
    seeds = ["m00001", "m00100", "m00200"]
    fc = (await app_client.post(f"/v1/graphs/{gid}/jobs", headers=auth, json={"kind": "forecast", "params": {
        "seeds": seeds, "simulations": 100}})).json()
    worker = worker_for(app_client)
    await run_worker_once(worker)
    await run_worker_once(worker)
    communities = (await app_client.get(f"/v1/jobs/{lay['id']}/result", headers=auth)).json()["communities"]
    r = await app_client.get(f"/v1/graphs/{gid}/versions/1/layout.svg", headers=auth,
                             params={"forecast": fc["id"], "max_people": 100})
    assert r.status_code == 200, r.text
    root = ET.fromstring(r.text)
    ns = "{http://www.w3.org/2000/svg}"
    circles = [c for c in root.iter(ns + "circle") if c.find(ns + "title") is not None]
    people = [c.find(ns + "title").text for c in circles if c.get("class") != "group"]  # type: ignore[union-attr]
    groups = [c for c in circles if c.get("class") == "group"]
    assert len(groups) == min(communities, 200)
    assert sorted(c.get("data-id") for c in circles if c.get("class") == "seed") == seeds
    # Source: NetworkX neighbours on the uploaded edge file: everyone drawn is a seed or a seed's contact
    # (or among the likely-reached people of the forecast, who are themselves marked).
    G = nx.read_edgelist(edges.read_text().splitlines()[1:], delimiter=",", data=(("weight", int),))
    near = set(seeds).union(*(set(G[s]) for s in seeds))
    reached = {c.find(ns + "title").text for c in circles if c.get("class") == "reached"}  # type: ignore[union-attr]
    assert set(people) == near | reached and len(people) <= 100
    assert "too many to draw one by one" in "".join(root.itertext())


async def test_with_keys_switched_off_the_console_opens_without_one(sqlite_url: str, tmp_path: Path) -> None:
    from service.app import create_app

    app = create_app(make_settings(sqlite_url, tmp_path, auth_disabled=True))
    async with app.router.lifespan_context(app):
        transport = httpx.ASGITransport(app=app)
        async with httpx.AsyncClient(transport=transport, base_url="http://testserver") as c:
            page = await c.get("/console/sign-in")
            assert "leave the field empty" in page.text
            r = await c.post("/console/sign-in", data={"key": "", "next": "/console/jobs"})
            assert r.status_code == 303 and r.headers["location"] == "/console/jobs"
            r = await c.get("/console/jobs")
            assert r.status_code == 200 and "default" in r.text
            # An open session is worth nothing once keys are required again (same secret, same cookie).
            cookie = c.cookies.get("bw_console") or ""
    app = create_app(make_settings(sqlite_url, tmp_path, auth_disabled=False))
    async with app.router.lifespan_context(app):
        transport = httpx.ASGITransport(app=app)
        async with httpx.AsyncClient(transport=transport, base_url="http://testserver") as c:
            c.cookies.set("bw_console", cookie, path="/console")
            assert (await c.get("/console/jobs")).status_code == 303


async def test_cancel_from_the_job_page_and_its_live_state(app_client: httpx.AsyncClient) -> None:
    _, writer = make_key(app_client, "t1", ["read", "write"])
    _, reader = make_key(app_client, "t1", ["read"])
    gid = await make_network(app_client, writer)
    auth = {"Authorization": f"Bearer {writer}"}
    job = (await app_client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "profile", "params": {}}, headers=auth)).json()
    await sign_in(app_client, reader)
    page = await app_client.get(f"/console/jobs/{job['id']}")
    assert page.status_code == 200 and "Cancel</button>" not in page.text  # a read key sees no cancel button
    r = await app_client.post(f"/console/jobs/{job['id']}/cancel", data={"csrf": csrf_of(page.text)})
    assert r.status_code == 403
    await sign_in(app_client, writer)
    page = await app_client.get(f"/console/jobs/{job['id']}")
    state = (await app_client.get(f"/console/jobs/{job['id']}/state")).json()
    assert state == {"id": job["id"], "status": "queued", "status_words": "Waiting", "progress": 0.0, "message": "",
                     "finished": False}
    r = await app_client.post(f"/console/jobs/{job['id']}/cancel", data={"csrf": csrf_of(page.text)})
    assert r.status_code == 303
    assert (await app_client.get(f"/v1/jobs/{job['id']}", headers=auth)).json()["status"] == "cancelled"
    assert (await app_client.get(f"/console/jobs/{job['id']}/state")).json()["finished"] is True

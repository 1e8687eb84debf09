"""Keys from the CLI, auth-off only on loopback, queued-job cap, job time limits, page limits, readiness."""

from __future__ import annotations

import asyncio
import dataclasses
import re
import time
from datetime import UTC, datetime
from pathlib import Path

import pytest

from service.api import auth
from service.cli.main import main
from service.cli.serve import serve
from service.jobs.worker import Worker, WorkerConfig
from service.settings import Settings
from storage.db import make_engine, make_sessionmaker
from storage.repo import jobs as jr
from storage.repo import keys as key_repo
from tests.ops.helpers import PROBLEM, bearer, make_key, secured_app

pytestmark = pytest.mark.anyio


# -- keys ---------------------------------------------------------------------------------


def test_keys_cli_create_list_revoke_expiry(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    monkeypatch.setenv("BELLWETHER_DATA_DIR", str(tmp_path / "data"))
    monkeypatch.delenv("BELLWETHER_DATABASE_URL", raising=False)
    assert main(["keys", "create", "--tenant", "acme", "--scopes", "read,write,admin", "--name", "crm"]) == 0
    out = capsys.readouterr().out.splitlines()
    key = out[-1]
    # The key alone on the last line: bw_<8 hex prefix>_<32 random bytes, base64url> (256 bits).
    assert re.fullmatch(r"bw_[0-9a-f]{8}_[A-Za-z0-9_-]{43}", key), out
    assert main(["keys", "create", "--tenant", "acme", "--scopes", "read", "--expires-days", "0.5"]) == 0
    short = capsys.readouterr().out.splitlines()[-1]
    assert short != key
    assert main(["keys", "create", "--tenant", "acme", "--scopes", "root"]) == 2
    capsys.readouterr()

    url = Settings().resolved_database_url()
    engine = make_engine(url)
    with make_sessionmaker(engine)() as db:
        rows = {k.prefix: k for k in key_repo.list_keys(db)}
        stored = rows[key.split("_")[1]]
        assert stored.key_hash == key_repo.hash_key(key) and key not in (stored.key_hash, stored.prefix)
        assert stored.scopes == "read,write,admin" and stored.tenant_id == "acme"
        expiring = rows[short.split("_")[1]]
        assert expiring.expires_at is not None
        hours = (expiring.expires_at - datetime.now(UTC)).total_seconds() / 3600
        assert 11.9 < hours <= 12.0

    assert main(["keys", "list"]) == 0
    listing = capsys.readouterr().out
    assert key.split("_")[1] in listing and key not in listing and short not in listing and "expires" in listing

    assert main(["keys", "revoke", key.split("_")[1]]) == 0
    capsys.readouterr()
    with make_sessionmaker(engine)() as db:
        assert key_repo.get_key_by_secret(db, key) is None
        assert key_repo.get_key_by_secret(db, short) is not None
    engine.dispose()


async def test_revoked_key_is_refused_once_the_auth_cache_lapses(sqlite_url: str, tmp_path: Path) -> None:
    key = make_key(sqlite_url, "t1", ["read"])
    async with secured_app(sqlite_url, tmp_path) as c:
        assert (await c.get("/v1/graphs", headers=bearer(key))).status_code == 200
        engine = make_engine(sqlite_url)
        with make_sessionmaker(engine)() as db:
            key_repo.revoke_key(db, key.split("_")[1])
            db.commit()
        engine.dispose()
        auth._cache.clear()  # the 5 s per-process cache; see README, Operations
        r = await c.get("/v1/graphs", headers=bearer(key))
        assert r.status_code == 401 and r.headers["content-type"] == PROBLEM


def test_serve_refuses_auth_off_unless_bound_to_loopback(tmp_path: Path) -> None:
    settings = Settings(data_dir=tmp_path / "d", auth_disabled=True, host="0.0.0.0")
    with pytest.raises(SystemExit, match="loopback"):
        serve(settings, workers=0)


# -- limits -------------------------------------------------------------------------------


async def test_queued_jobs_are_capped_per_tenant(sqlite_url: str, tmp_path: Path) -> None:
    k1 = make_key(sqlite_url, "t1", ["read", "write"])
    k2 = make_key(sqlite_url, "t2", ["read", "write"])
    async with secured_app(sqlite_url, tmp_path, job_max_queued_per_tenant=2) as c:
        gids = {}
        for k in (k1, k2):
            gid = (await c.post("/v1/graphs", json={"name": "g", "directed": False}, headers=bearer(k))).json()["id"]
            r = await c.post(f"/v1/graphs/{gid}/versions", content="source,target\na,b\nb,c\n",
                             headers={"Content-Type": "text/csv", **bearer(k)})
            assert r.status_code == 201
            gids[k] = gid
        job = {"kind": "profile", "params": {}}
        for _ in range(2):
            assert (await c.post(f"/v1/graphs/{gids[k1]}/jobs", json=job, headers=bearer(k1))).status_code == 202
        r = await c.post(f"/v1/graphs/{gids[k1]}/jobs", json=job, headers=bearer(k1))
        assert r.status_code == 429 and r.headers["content-type"] == PROBLEM
        assert r.json()["type"] == "/problems/too-many-jobs" and int(r.headers["retry-after"]) >= 1
        # The cap is per tenant: the other tenant still queues.
        assert (await c.post(f"/v1/graphs/{gids[k2]}/jobs", json=job, headers=bearer(k2))).status_code == 202


async def test_a_job_past_its_kind_time_limit_fails_with_job_timeout(sqlite_url: str, tmp_path: Path) -> None:
    async with secured_app(
        sqlite_url, tmp_path, auth_disabled=True, job_kind_modules=["tests.jobs.kinds"],
        job_kind_timeouts={"test_sleep": 0.4},
    ) as c:
        app = c.app  # type: ignore[attr-defined]
        with jr.write_session(app.state.sessionmaker) as db:
            slow, _ = jr.add_job(db, tenant_id="default", graph_id=None, version=None, kind="test_sleep",
                                 params={"seconds": 5.0, "steps": 100}, now=datetime.now(UTC))
            db.commit()
        cfg = dataclasses.replace(
            WorkerConfig.from_settings(app.state.settings), heartbeat_seconds=0.1, progress_interval_seconds=0.0
        )
        assert cfg.timeout_for("test_sleep") == 0.4 and cfg.timeout_for("profile") == 6 * 3600
        t = time.monotonic()
        outcome = await asyncio.to_thread(Worker(app.state.sessionmaker, cfg).run_once)
        took = time.monotonic() - t
        assert outcome is not None and outcome.status == "failed" and took < 2.5
        r = await c.get(f"/v1/jobs/{slow.id}")
        body = r.json()
        assert body["status"] == "failed" and body["attempts"] == 1
        assert body["error"] == {
            "type": "/problems/job-timeout",
            "title": "Job timed out",
            "detail": "the test_sleep job ran longer than its limit of 0.4 s and was stopped; "
            "it is not retried (raise the kind's limit or make the job smaller)",
            "limit_seconds": 0.4,
            "attempts": 1,
        }
        assert (await c.get(f"/v1/jobs/{slow.id}/result")).status_code == 404


async def test_list_pages_are_capped_at_page_limit_max(sqlite_url: str, tmp_path: Path) -> None:
    async with secured_app(sqlite_url, tmp_path, auth_disabled=True, page_limit_max=3) as c:
        for i in range(5):
            await c.post("/v1/graphs", json={"name": f"g{i}", "directed": False})
        page = (await c.get("/v1/graphs", params={"limit": 10_000})).json()
        assert len(page["items"]) == 3 and page["next_cursor"]
        rest = (await c.get("/v1/graphs", params={"limit": 10_000, "cursor": page["next_cursor"]})).json()
        assert len(rest["items"]) == 2 and rest["next_cursor"] is None
        for path in ("/v1/jobs", "/v1/schedules", "/v1/graphs"):
            r = await c.get(path, params={"limit": 0})
            assert r.status_code == 422 and r.headers["content-type"] == PROBLEM


# -- readiness ------------------------------------------------------------------------------


async def test_readyz_fails_when_migrations_are_behind(tmp_path: Path) -> None:
    url = f"sqlite:///{tmp_path / 'empty.sqlite3'}"  # never migrated
    async with secured_app(url, tmp_path) as c:
        r = await c.get("/readyz")
        assert r.status_code == 503 and r.json()["migrations"]["current"] is None
        assert r.json()["migrations"]["head"]
        assert (await c.get("/healthz")).status_code == 200  # alive, not ready
    from storage.migrate import upgrade

    upgrade(url)
    async with secured_app(url, tmp_path) as c:
        r = await c.get("/readyz")
        assert r.status_code == 200 and r.json()["status"] == "ready"


@pytest.mark.parametrize(
    "url",
    [
        "postgresql+psycopg://postgres@127.0.0.1:1/nothing?connect_timeout=2",  # loopback port with no server
        "sqlite:////nonexistent-folder/for/sure/db.sqlite3",
    ],
    ids=["postgres-port-closed", "sqlite-path-missing"],
)
async def test_readyz_fails_when_the_database_is_unreachable(url: str, tmp_path: Path) -> None:
    async with secured_app(url, tmp_path) as c:
        r = await c.get("/readyz")
        assert r.status_code == 503 and r.json()["database"] == "unreachable"

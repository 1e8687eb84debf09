"""Bearer keys, scopes and tenant isolation (RFC 6750 for the header form)."""

from __future__ import annotations

from datetime import timedelta
from pathlib import Path

import httpx
import pytest

from service.app import create_app
from storage.db import make_engine, make_sessionmaker
from storage.repo import keys as key_repo
from tests.conftest import make_settings

pytestmark = pytest.mark.anyio


def make_key(url: str, tenant: str, scopes: list[str], **kw) -> str:  # type: ignore[no-untyped-def]
    engine = make_engine(url)
    with make_sessionmaker(engine)() as db:
        _, plain = key_repo.add_key(db, tenant_id=tenant, scopes=scopes, **kw)
        db.commit()
    engine.dispose()
    return plain


@pytest.fixture
async def secured(sqlite_url: str, tmp_path: Path):  # type: ignore[no-untyped-def]
    app = create_app(make_settings(sqlite_url, tmp_path, auth_disabled=False))
    async with app.router.lifespan_context(app):
        async with httpx.AsyncClient(transport=httpx.ASGITransport(app=app), base_url="http://t") as c:
            yield c, sqlite_url


def bearer(key: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {key}"}


async def test_missing_wrong_and_expired_keys_are_401(secured) -> None:  # type: ignore[no-untyped-def]
    c, url = secured
    r = await c.get("/v1/graphs")
    assert r.status_code == 401 and r.headers["content-type"] == "application/problem+json"
    assert r.headers["www-authenticate"].startswith("Bearer")
    assert (await c.get("/v1/graphs", headers=bearer("bw_00000000_nope"))).status_code == 401
    assert (await c.get("/v1/graphs", headers={"Authorization": "Basic abc"})).status_code == 401
    expired = make_key(url, "t1", ["read"], expires_in=timedelta(seconds=-1))
    assert (await c.get("/v1/graphs", headers=bearer(expired))).status_code == 401
    # Health needs no key.
    assert (await c.get("/healthz")).status_code == 200


async def test_scopes_and_tenant_isolation(secured) -> None:  # type: ignore[no-untyped-def]
    c, url = secured
    reader = make_key(url, "t1", ["read"])
    writer = make_key(url, "t1", ["read", "write"])
    other = make_key(url, "t2", ["read", "write"])
    r = await c.post("/v1/graphs", json={"name": "x", "directed": False}, headers=bearer(reader))
    assert r.status_code == 403 and r.json()["type"] == "/problems/forbidden"
    r = await c.post("/v1/graphs", json={"name": "x", "directed": False}, headers=bearer(writer))
    assert r.status_code == 201
    gid = r.json()["id"]
    assert (await c.get(f"/v1/graphs/{gid}", headers=bearer(reader))).status_code == 200
    # Another tenant's key sees nothing: 404, not 403.
    assert (await c.get(f"/v1/graphs/{gid}", headers=bearer(other))).status_code == 404
    assert (await c.delete(f"/v1/graphs/{gid}", headers=bearer(other))).status_code == 404
    assert (await c.get("/v1/graphs", headers=bearer(other))).json()["items"] == []


def test_keys_are_random_hashed_and_revocable(sqlite_url: str) -> None:
    engine = make_engine(sqlite_url)
    with make_sessionmaker(engine)() as db:
        k1, p1 = key_repo.add_key(db, tenant_id="t", scopes=["read"])
        k2, p2 = key_repo.add_key(db, tenant_id="t", scopes=["admin"])
        assert p1 != p2 and len(p1.split("_", 2)[2]) >= 40  # 32 random bytes, base64url
        assert p1 not in (k1.key_hash, k1.prefix) and k1.key_hash == key_repo.hash_key(p1)
        assert key_repo.get_key_by_secret(db, p1).id == k1.id  # type: ignore[union-attr]
        key_repo.revoke_key(db, k1.prefix)
        assert key_repo.get_key_by_secret(db, p1) is None
        with pytest.raises(ValueError):
            key_repo.add_key(db, tenant_id="t", scopes=["superuser"])
    engine.dispose()

"""``bellwether keys create|list|revoke``."""

from __future__ import annotations

import argparse
import math
from datetime import timedelta

from service.settings import Settings
from storage.db import is_sqlite, make_engine, make_sessionmaker
from storage.errors import NotFound
from storage.migrate import upgrade
from storage.repo import keys as key_repo

from .errors import UserError

__all__ = ["run_keys", "key_ident"]

#: Longest expiry accepted (100 years): beyond it the date does not fit a timestamp.
MAX_EXPIRES_DAYS = 36_500
TENANT_MAX = 64  # the column's width
NAME_MAX = 200


def key_ident(given: str) -> str:
    """The key id or bare prefix named by ``given``.

    Accepts the id (``key_...``), the bare prefix, the prefix as ``keys list``
    prints it (``bw_<prefix>_…``, also with ``...`` or without the tail) and
    the whole key.
    """
    s = given.strip()
    if s.startswith("key_"):
        return s
    if s.startswith("bw_"):
        s = s[3:]
    s = s.split("_", 1)[0]
    for tail in ("…", "..."):
        s = s.removesuffix(tail)
    return s


def _check_create(args: argparse.Namespace) -> tuple[list[str], timedelta | None]:
    tenant = args.tenant.strip()
    if not tenant or len(tenant) > TENANT_MAX:
        raise UserError(f"--tenant must be 1 to {TENANT_MAX} characters; got {len(tenant)}")
    if args.name is not None and len(args.name) > NAME_MAX:
        raise UserError(f"--name must be at most {NAME_MAX} characters; got {len(args.name)}")
    scopes = [s.strip() for s in args.scopes.split(",") if s.strip()]
    bad = sorted(set(scopes) - set(key_repo.SCOPES))
    if bad or not scopes:
        raise UserError(
            f"--scopes must be a comma-separated list of {', '.join(key_repo.SCOPES)}; got {', '.join(bad) or 'none'}"
        )
    days = args.expires_days
    if days is None:
        return scopes, None
    if not math.isfinite(days) or not 0 < days <= MAX_EXPIRES_DAYS:
        raise UserError(f"--expires-days must be more than 0 and at most {MAX_EXPIRES_DAYS}; got {days:g}")
    return scopes, timedelta(days=days)


def run_keys(settings: Settings, args: argparse.Namespace) -> int:
    scopes, expires = _check_create(args) if args.keys_command == "create" else ([], None)
    if args.keys_command == "revoke" and not key_ident(args.key):
        raise UserError("name the key to revoke by its id or prefix, as `bellwether keys list` prints them")
    settings.data_dir.mkdir(parents=True, exist_ok=True)
    url = settings.resolved_database_url()
    if is_sqlite(url):  # the embedded default migrates itself, as `serve` does
        upgrade(url)
    engine = make_engine(url)
    try:
        with make_sessionmaker(engine)() as db:
            if args.keys_command == "create":
                key, plain = key_repo.add_key(
                    db, tenant_id=args.tenant.strip(), scopes=scopes, name=args.name, expires_in=expires
                )
                db.commit()
                print(f"created key {key.id} for tenant {key.tenant_id} with scopes {key.scopes}")
                # A key lives in one database: say which, so a server started elsewhere is no surprise.
                where = url.split("@")[-1] if not is_sqlite(url) else url.removeprefix("sqlite:///")
                print(f"stored in {where}; a server must use the same database (BELLWETHER_DATA_DIR or "
                      "BELLWETHER_DATABASE_URL) to accept it")
                print("store it now: it is shown only once")
                print(plain)
                return 0
            if args.keys_command == "list":
                for k in key_repo.list_keys(db):
                    state = "revoked" if k.revoked_at else ("expires " + k.expires_at.isoformat() if k.expires_at else "active")
                    print(f"{k.id}\tbw_{k.prefix}_…\t{k.tenant_id}\t{k.scopes}\t{state}")
                return 0
            if args.keys_command == "revoke":
                ident = key_ident(args.key)
                try:
                    key = key_repo.revoke_key(db, ident)
                except NotFound:
                    raise UserError(
                        f"no key has the id or prefix {args.key.strip()!r}; `bellwether keys list` shows them"
                    ) from None
                db.commit()
                print(f"revoked {key.id} (bw_{key.prefix}_…, tenant {key.tenant_id})")
                return 0
    finally:
        engine.dispose()
    raise UserError(f"unknown keys command {args.keys_command!r}")

"""``bellwether keys create|list|revoke``."""

from __future__ import annotations

import argparse
from datetime import timedelta

from service.settings import Settings
from storage.db import is_sqlite, make_engine, make_sessionmaker
from storage.migrate import upgrade
from storage.repo import keys as key_repo

__all__ = ["run_keys"]


def run_keys(settings: Settings, args: argparse.Namespace) -> int:
    settings.data_dir.mkdir(parents=True, exist_ok=True)
    url = settings.resolved_database_url()
    if is_sqlite(url):  # the embedded default migrates itself, as `serve` does
        upgrade(url)
    engine = make_engine(url)
    try:
        with make_sessionmaker(engine)() as db:
            if args.keys_command == "create":
                scopes = [s.strip() for s in args.scopes.split(",") if s.strip()]
                expires = timedelta(days=args.expires_days) if args.expires_days else None
                try:
                    key, plain = key_repo.add_key(
                        db, tenant_id=args.tenant, scopes=scopes, name=args.name, expires_in=expires
                    )
                except ValueError as exc:
                    print(f"error: {exc}")
                    return 2
                db.commit()
                print(f"created key {key.id} for tenant {key.tenant_id} with scopes {key.scopes}")
                print("store it now: it is shown only once")
                print(plain)
                return 0
            if args.keys_command == "list":
                for k in key_repo.list_keys(db):
                    state = "revoked" if k.revoked_at else ("expires " + k.expires_at.isoformat() if k.expires_at else "active")
                    print(f"{k.id}\tbw_{k.prefix}_…\t{k.tenant_id}\t{k.scopes}\t{state}")
                return 0
            if args.keys_command == "revoke":
                key = key_repo.revoke_key(db, args.key)
                db.commit()
                print(f"revoked {key.id}")
                return 0
    finally:
        engine.dispose()
    return 2

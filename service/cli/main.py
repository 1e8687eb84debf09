"""Entry point of the ``bellwether`` console script."""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from pathlib import Path

from service.settings import Settings
from storage.db import is_sqlite

__all__ = ["main", "build_parser"]


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="bellwether", description="Bellwether outreach-graph service.")
    sub = p.add_subparsers(dest="command", required=True)

    s = sub.add_parser("serve", help="run the API and worker processes")
    s.add_argument("--host", default=None, help="bind address (default 127.0.0.1)")
    s.add_argument("--port", type=int, default=None, help="port (default 8000)")
    s.add_argument("--workers", type=int, default=1, help="worker processes beside the API (default 1)")
    s.add_argument("--api-processes", type=int, default=1, help="uvicorn processes for the API")
    s.add_argument("--no-migrate", action="store_true", help="do not apply migrations at start")

    sub.add_parser("worker", help="run one worker process that claims and runs jobs")
    sub.add_parser("migrate", help="apply database migrations up to head")

    k = sub.add_parser("keys", help="manage API keys")
    ksub = k.add_subparsers(dest="keys_command", required=True)
    kc = ksub.add_parser("create", help="create a key; prints it alone on the last line")
    kc.add_argument("--tenant", required=True)
    kc.add_argument("--scopes", default="read,write")
    kc.add_argument("--name", default=None)
    kc.add_argument("--expires-days", type=float, default=None)
    ksub.add_parser("list", help="list keys (prefixes only)")
    kr = ksub.add_parser("revoke", help="revoke a key by id or prefix")
    kr.add_argument("key")

    d = sub.add_parser("demo", help="run the whole job end to end on an invented scenario")
    d.add_argument("--out", default="bellwether-demo", help="folder for the report and plots")
    d.add_argument("--members", type=int, default=None, help="scenario size (people)")
    d.add_argument("--url", default=None, help="use a running server instead of starting one")
    d.add_argument("--key", default=None, help="API key for --url")
    d.add_argument("--seed", type=int, default=7)
    d.add_argument("--files-only", action="store_true",
                   help="only write the scenario's edges.csv and members.csv into --out, then stop")
    return p


def main(argv: Sequence[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    settings = Settings()
    if args.command == "migrate":
        from storage.migrate import upgrade

        settings.data_dir.mkdir(parents=True, exist_ok=True)
        upgrade(settings.resolved_database_url())
        print("migrations applied:", settings.resolved_database_url().split("@")[-1])
        return 0
    if args.command == "serve":
        from .serve import serve

        if args.host:
            settings = settings.model_copy(update={"host": args.host})
        if args.port:
            settings = settings.model_copy(update={"port": args.port})
        migrate = not args.no_migrate and is_sqlite(settings.resolved_database_url())
        return serve(settings, workers=args.workers, api_processes=args.api_processes, migrate=migrate)
    if args.command == "worker":
        from .worker import run_worker

        run_worker(settings)
        return 0
    if args.command == "keys":
        from .keys import run_keys

        return run_keys(settings, args)
    if args.command == "demo" and args.files_only:
        from .scenario import generate, write_csv

        edges, nodes = write_csv(generate(args.members or 20_000, seed=args.seed), Path(args.out))
        print(f"wrote {edges} and {nodes}")
        return 0
    if args.command == "demo":
        from .demo import run_demo

        return run_demo(settings, args)
    return 2


if __name__ == "__main__":
    sys.exit(main())

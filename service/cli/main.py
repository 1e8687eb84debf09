"""Entry point of the ``bellwether`` console script."""

from __future__ import annotations

import argparse
import sys
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import NoReturn

from pydantic import ValidationError
from sqlalchemy.exc import ArgumentError, OperationalError

from service.settings import Settings
from storage.db import is_sqlite

from .errors import UserError

__all__ = ["main", "build_parser"]


class Parser(argparse.ArgumentParser):
    """argparse, but a usage mistake is one line on stderr (exit code 2), pointing at --help."""

    def error(self, message: str) -> NoReturn:
        self.exit(2, f"{self.prog}: error: {message} (see {self.prog} --help)\n")


def _whole(low: int, high: int | None = None) -> Callable[[str], int]:
    """An argparse type: a whole number from ``low`` to ``high``, refused in plain words otherwise."""

    def parse(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
        if value < low or (high is not None and value > high):
            raise argparse.ArgumentTypeError(
                f"{value} is out of range; use {low} to {high}" if high is not None else f"{value} is below {low}"
            )
        return value

    return parse


def build_parser() -> argparse.ArgumentParser:
    p = Parser(prog="bellwether", description="Bellwether outreach-graph service.")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")

    s = sub.add_parser("serve", help="run the API and worker processes")
    s.add_argument("--host", default=None, help="bind address (default 127.0.0.1)")
    s.add_argument("--port", type=_whole(1, 65535), default=None, help="port (default 8000)")
    s.add_argument("--workers", type=_whole(0, 256), default=1, help="worker processes beside the API (default 1)")
    s.add_argument("--api-processes", type=_whole(1, 256), default=1, help="uvicorn processes for the API")
    s.add_argument("--no-migrate", action="store_true", help="do not apply migrations at start")

    sub.add_parser("worker", help="run one worker process that claims and runs jobs")
    sub.add_parser("migrate", help="apply database migrations up to head")

    k = sub.add_parser("keys", help="manage API keys")
    ksub = k.add_subparsers(dest="keys_command", required=True, metavar="{create,list,revoke}")
    kc = ksub.add_parser("create", help="create a key; prints it alone on the last line")
    kc.add_argument("--tenant", required=True)
    kc.add_argument("--scopes", default="read,write")
    kc.add_argument("--name", default=None)
    kc.add_argument("--expires-days", type=float, default=None)
    ksub.add_parser("list", help="list keys (prefixes only)")
    kr = ksub.add_parser("revoke", help="revoke a key by id or prefix (bw_<prefix> as `keys list` prints it)")
    kr.add_argument("key")

    d = sub.add_parser("demo", help="run the whole job end to end on an invented scenario")
    d.add_argument("--out", default="bellwether-demo", help="folder for the report and plots")
    d.add_argument("--members", type=_whole(60, 1_000_000), default=None, help="scenario size (people, at least 60)")
    d.add_argument("--url", default=None, help="use a running server instead of starting one")
    d.add_argument("--key", default=None, help="API key for --url")
    d.add_argument("--seed", type=_whole(0), default=7)
    d.add_argument("--files-only", action="store_true",
                   help="only write the scenario's edges.csv and members.csv into --out, then stop")
    return p


def _fail(message: str, code: int = 2) -> int:
    print(f"bellwether: error: {message}", file=sys.stderr)
    return code


def _settings_problem(exc: ValidationError) -> str:
    parts = []
    for e in exc.errors():
        name = "BELLWETHER_" + "_".join(str(p) for p in e["loc"]).upper()
        parts.append(f"{name}: {e['msg']}")
    return "invalid setting " + "; ".join(parts)


def _first_line(exc: BaseException) -> str:
    text = str(getattr(exc, "orig", None) or exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__


def main(argv: Sequence[str] | None = None) -> int:
    """Run one command; a user error is one line on stderr and exit code 2, never a traceback."""
    args = build_parser().parse_args(argv)
    try:
        settings = Settings()
    except ValidationError as exc:
        return _fail(_settings_problem(exc))
    try:
        return _run(args, settings)
    except UserError as exc:
        return _fail(str(exc))
    except ArgumentError as exc:  # a malformed BELLWETHER_DATABASE_URL
        return _fail(f"BELLWETHER_DATABASE_URL cannot be used: {_first_line(exc)}")
    except OperationalError as exc:
        return _fail(f"the database cannot be reached: {_first_line(exc)}", 1)
    except KeyboardInterrupt:
        return 130


def _run(args: argparse.Namespace, settings: Settings) -> int:
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
        if settings.auth_disabled and settings.host not in ("127.0.0.1", "localhost", "::1"):
            raise UserError(
                f"BELLWETHER_AUTH_DISABLED is allowed only when binding to loopback (127.0.0.1, ::1), "
                f"not {settings.host}"
            )
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
        from .demo_events import write_tastings
        from .scenario import generate, write_csv

        sc = generate(args.members or 20_000, seed=args.seed)
        edges, nodes = write_csv(sc, Path(args.out))
        print(f"wrote {edges}, {nodes} and {write_tastings(sc, Path(args.out), seed=args.seed)}")
        return 0
    if args.command == "demo":
        import httpx

        from .demo import run_demo

        try:
            return run_demo(settings, args)
        except httpx.TransportError as exc:
            where = args.url or "the demo server"
            raise UserError(f"cannot reach {where}: {exc}") from None
    raise UserError(f"unknown command {args.command!r}")


if __name__ == "__main__":
    sys.exit(main())

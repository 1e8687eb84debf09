"""Logs as the README promises them: one JSON object per line, each line once.

``serve`` (with a supervised worker) and ``worker`` run as real processes
for a few seconds; everything they write to stdout and stderr must parse
as JSON, and no line may appear twice (a second handler, such as
``logging.basicConfig``'s, writes every record again).
"""

from __future__ import annotations

import json
import sys
from collections import Counter
from pathlib import Path
from typing import Any

import httpx
import pytest

from tests.ops.helpers import Proc, child_env, start_api, wait_healthy, wait_until

pytestmark = pytest.mark.slow


def read_lines(proc: Proc) -> list[str]:
    return [line for line in proc.log_path.read_text(errors="replace").splitlines() if line.strip()]


def assert_json_lines_once(lines: list[str]) -> list[dict[str, Any]]:
    docs = []
    for line in lines:
        try:
            doc = json.loads(line)
        except json.JSONDecodeError:
            raise AssertionError(f"a log line that is not JSON: {line!r}\nall lines:\n" + "\n".join(lines)) from None
        assert isinstance(doc, dict) and {"ts", "level", "logger", "msg"} <= doc.keys(), line
        docs.append(doc)
    twice = [line for line, n in Counter(lines).items() if n > 1]
    assert not twice, f"lines written more than once: {twice}"
    return docs


def logged(proc: Proc, logger: str, msg: str) -> bool:
    for line in read_lines(proc):
        try:
            doc = json.loads(line)
        except json.JSONDecodeError:
            continue
        if doc.get("logger") == logger and doc.get("msg") == msg:
            return True
    return False


def test_serve_with_a_worker_writes_only_json_lines_once(tmp_path: Path) -> None:
    data = tmp_path / "data"
    env = child_env(data, None, BELLWETHER_LOG_LEVEL="INFO", BELLWETHER_AUTH_DISABLED="true")
    proc, base = start_api(data, env, workers=1)
    try:
        wait_healthy(proc, base, timeout=120)
        r = httpx.post(base + "/v1/graphs", json={"name": "g", "directed": False}, headers={"X-Request-ID": "log-1"})
        assert r.status_code == 201, r.text
        assert httpx.get(base + "/v1/graphs/nope").status_code == 404
        # The supervised worker process logs its start once it is up.
        wait_until(lambda: logged(proc, "bellwether.worker", "worker started"), 120, "the worker's start line")
    finally:
        proc.stop()
    docs = assert_json_lines_once(read_lines(proc))
    loggers = Counter(d["logger"] for d in docs)
    # uvicorn's own messages come out as JSON too, not its plain-text default.
    assert loggers["uvicorn.error"] >= 1, loggers
    assert sum(1 for d in docs if d["msg"] == "worker started") == 1
    assert sum(1 for d in docs if d["msg"] == "worker process started") == 1
    requests = [d for d in docs if d["logger"] == "bellwether.access"]
    assert [d["status"] for d in requests if d["route"] != "/healthz"] == [201, 404]
    assert any(d.get("request_id") == "log-1" for d in requests)


@pytest.mark.parametrize(
    "command",
    [["-m", "service.cli.main", "worker"], ["-m", "service.cli.worker"]],
    ids=["bellwether worker", "python -m service.cli.worker"],
)
def test_worker_writes_only_json_lines_once(tmp_path: Path, command: list[str]) -> None:
    data = tmp_path / "data"
    data.mkdir()
    env = child_env(data, f"sqlite:///{data / 'bellwether.sqlite3'}", BELLWETHER_LOG_LEVEL="INFO")
    from storage.migrate import upgrade

    upgrade(env["BELLWETHER_DATABASE_URL"])
    proc = Proc([sys.executable, *command], env, tmp_path / "worker.log")
    try:
        wait_until(lambda: logged(proc, "bellwether.worker", "worker started"), 120, "the worker's start line")
    finally:
        proc.stop()
    docs = assert_json_lines_once(read_lines(proc))
    msgs = [d["msg"] for d in docs]
    assert msgs.count("worker started") == 1 and msgs.count("worker stopped") == 1, msgs

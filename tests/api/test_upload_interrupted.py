"""A streaming upload cut off half-way over a real socket leaves no version."""

from __future__ import annotations

import socket
import time
from pathlib import Path

import httpx

from tests.live import live_server


def test_cut_off_upload_leaves_no_trace(tmp_path: Path) -> None:
    data = tmp_path / "data"
    data.mkdir()
    with live_server(data) as base:
        gid = httpx.post(base + "/v1/graphs", json={"name": "cut", "directed": False}).json()["id"]
        rows = b"source,target\n" + b"".join(b"p%d,p%d\n" % (i, i + 1) for i in range(200_000))
        host, port = base.removeprefix("http://").split(":")
        with socket.create_connection((host, int(port))) as s:
            head = (
                f"POST /v1/graphs/{gid}/versions HTTP/1.1\r\nHost: {host}\r\n"
                f"Content-Type: text/csv\r\nContent-Length: {len(rows)}\r\n\r\n"
            ).encode()
            s.sendall(head + rows[: len(rows) // 2])
            time.sleep(0.5)
        # The half-sent body was abandoned: no version, no spool file left behind.
        deadline = time.monotonic() + 10
        while list((data / "spool").glob("*")) and time.monotonic() < deadline:
            time.sleep(0.2)
        assert httpx.get(f"{base}/v1/graphs/{gid}/versions").json()["items"] == []
        assert httpx.get(f"{base}/v1/graphs/{gid}").json()["latest_version"] is None
        assert list((data / "spool").glob("*")) == []
        # The server still takes a complete upload afterwards.
        r = httpx.post(f"{base}/v1/graphs/{gid}/versions", content=rows, headers={"Content-Type": "text/csv"})
        assert r.status_code == 201 and r.json()["edges"] == 200_000


def test_stale_spool_files_are_removed_at_start(tmp_path: Path) -> None:
    import os

    from service.api.spool import remove_stale_spool

    old, fresh = tmp_path / "upload-a.part", tmp_path / "upload-b.part"
    old.write_bytes(b"x")
    fresh.write_bytes(b"y")
    os.utime(old, (time.time() - 7 * 3600,) * 2)
    assert remove_stale_spool(tmp_path) == 1
    assert not old.exists() and fresh.exists()

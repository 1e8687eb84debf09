"""Upload bodies: what a body may be (media types, the OpenAPI request body) and spooling it to disk.

Memory stays bounded whatever the body's size: chunks go straight to disk,
and a body cut off half-way (client gone) leaves only a file that is removed.
"""

from __future__ import annotations

import hashlib
import os
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

from fastapi import Request
from starlette.requests import ClientDisconnect

from .errors import BadRequest, PayloadTooLarge

__all__ = ["Spooled", "spool_body", "remove_stale_spool", "STALE_SPOOL_SECONDS", "FORMATS", "UPLOAD_BODY", "media_type"]

# A spool file this old belongs to no live upload (a killed process left it).
STALE_SPOOL_SECONDS = 6 * 3600


@dataclass
class Spooled:
    path: Path
    size: int
    sha256: str

    def remove(self) -> None:
        try:
            os.unlink(self.path)
        except FileNotFoundError:
            pass


async def spool_body(request: Request, folder: Path, limit: int) -> Spooled:
    declared = request.headers.get("content-length")
    if declared is not None and declared.isdigit() and int(declared) > limit:
        raise PayloadTooLarge(
            f"body of {int(declared)} bytes exceeds the limit of {limit} bytes", limit=limit
        )
    folder.mkdir(parents=True, exist_ok=True)
    fd, name = tempfile.mkstemp(prefix="upload-", suffix=".part", dir=folder)
    size, digest = 0, hashlib.sha256()
    ok = False
    try:
        with os.fdopen(fd, "wb", buffering=1024 * 1024) as fh:
            async for chunk in request.stream():
                size += len(chunk)
                if size > limit:
                    raise PayloadTooLarge(f"body exceeds the limit of {limit} bytes", limit=limit)
                digest.update(chunk)
                fh.write(chunk)
        ok = True
    except ClientDisconnect as exc:
        raise BadRequest("the client closed the connection before the body was complete") from exc
    finally:
        if not ok:
            os.unlink(name)
    return Spooled(Path(name), size, digest.hexdigest())


def remove_stale_spool(folder: Path, *, older_than: float = STALE_SPOOL_SECONDS) -> int:
    """Delete upload spool files left by killed processes; return how many went.

    Only old files go: another API process sharing the data folder may be
    receiving an upload right now.
    """
    if not folder.is_dir():
        return 0
    cutoff = time.time() - older_than
    removed = 0
    for f in folder.glob("upload-*.part"):
        try:
            if f.stat().st_mtime < cutoff:
                f.unlink()
                removed += 1
        except FileNotFoundError:
            continue
    return removed


# -- what an upload body is ----------------------------------------------------------

FORMATS = {
    "text/csv": "csv",
    "application/csv": "csv",
    "application/x-ndjson": "ndjson",
    "application/ndjson": "ndjson",
    "application/jsonl": "ndjson",
    "application/json": "json",
    "application/graphml+xml": "graphml",
    "application/xml": "graphml",
    "text/xml": "graphml",
}


UPLOAD_BODY = {
    "requestBody": {
        "required": True,
        "description": "The file: CSV (RFC 4180, header row), NDJSON, JSON or GraphML. A JSON file is an "
        "array of records, or an object whose `edges` (or `nodes`) member is that array. (CSV is listed "
        "last so that clients generated from this document, which pick the last file type they know, "
        "send CSV.)",
        "content": {
            # Declared as the object form only: generated clients cannot tell an array body from a file.
            "application/json": {"schema": {"type": "object", "additionalProperties": True}},
            "application/graphml+xml": {"schema": {"type": "string", "format": "binary"}},
            "application/x-ndjson": {"schema": {"type": "string", "format": "binary"}},
            "text/csv": {"schema": {"type": "string", "format": "binary"}},
        },
    }
}


def media_type(header: str | None) -> tuple[str, str | None]:
    """``"text/csv; charset=windows-1252"`` -> ``("text/csv", "windows-1252")`` (RFC 9110 section 8.3.1)."""
    ctype, *params = (header or "").split(";")
    charset = None
    for param in params:
        name, _, value = param.partition("=")
        if name.strip().lower() == "charset":
            charset = value.strip().strip('"') or None
    return ctype.strip().lower(), charset

"""Log set-up shared by every process: one JSON object per line on stderr.

``bellwether serve`` (the parent, each API process and uvicorn's own
messages) and every worker call :func:`configure_logging`; uvicorn gets
:func:`uvicorn_log_config`, so its lines come out through the same kind of
handler rather than its plain-text default. Each process has exactly one
such handler on the root logger, so no line is written twice. With
``fmt="text"`` the lines are plain text instead (for reading in a terminal).

Each JSON line holds ``ts``, ``level``, ``logger``, ``msg``, the
``request_id`` of the request being served (when there is one), the
record's extras and, for an exception, ``exc``.
"""

from __future__ import annotations

import contextvars
import json
import logging
import sys
from datetime import UTC, datetime
from typing import Any

__all__ = [
    "request_id_var",
    "RequestIdFilter",
    "JsonFormatter",
    "LogHandler",
    "configure_logging",
    "uvicorn_log_config",
]

request_id_var: contextvars.ContextVar[str | None] = contextvars.ContextVar("bellwether_request_id", default=None)

_STANDARD_ATTRS = set(logging.LogRecord("", 0, "", 0, "", (), None).__dict__) | {
    "message",
    "asctime",
    "request_id",
    "color_message",  # uvicorn's copy of the message with terminal colours
}
TEXT_FORMAT = "%(asctime)s %(levelname)s %(name)s [%(request_id)s] %(message)s"


class RequestIdFilter(logging.Filter):
    """Puts the current request id (or None) on every record as ``request_id``."""

    def filter(self, record: logging.LogRecord) -> bool:
        if not hasattr(record, "request_id"):
            record.request_id = request_id_var.get()
        return True


class JsonFormatter(logging.Formatter):
    """One JSON object per line: ``ts``, ``level``, ``logger``, ``msg``, ``request_id`` and the extras."""

    def format(self, record: logging.LogRecord) -> str:
        doc: dict[str, Any] = {
            "ts": datetime.fromtimestamp(record.created, UTC).isoformat(timespec="milliseconds"),
            "level": record.levelname.lower(),
            "logger": record.name,
            "msg": record.getMessage(),
        }
        rid = getattr(record, "request_id", None) or request_id_var.get()
        if rid:
            doc["request_id"] = rid
        for key, value in record.__dict__.items():
            if key not in _STANDARD_ATTRS and not key.startswith("_") and key not in doc:
                doc[key] = value
        if record.exc_info:
            doc["exc"] = self.formatException(record.exc_info)
        if record.stack_info:
            doc["stack"] = self.formatStack(record.stack_info)
        return json.dumps(doc, default=str, ensure_ascii=False)


class LogHandler(logging.StreamHandler):  # type: ignore[type-arg]
    """The service's handler: stderr, request ids, JSON (or text) lines."""

    def __init__(self, fmt: str = "json") -> None:
        super().__init__(sys.stderr)
        self.addFilter(RequestIdFilter())
        self.setFormatter(JsonFormatter() if fmt == "json" else logging.Formatter(TEXT_FORMAT))


def configure_logging(level: str = "INFO", fmt: str = "json") -> None:
    """Install the one :class:`LogHandler` on the root logger (replacing any earlier one).

    Idempotent: handlers of other kinds (a test's capture, for one) are left
    alone. ``level`` applies to the ``bellwether`` loggers; other libraries
    log warnings and above. Python warnings become log records too.
    """
    root = logging.getLogger()
    for h in list(root.handlers):
        if isinstance(h, LogHandler):
            root.removeHandler(h)
    root.addHandler(LogHandler(fmt))
    if root.level == logging.NOTSET or root.level > logging.WARNING:
        root.setLevel(logging.WARNING)
    # Records propagate to the root's handlers whatever the root's own level.
    logging.getLogger("bellwether").setLevel(level.upper())
    logging.captureWarnings(True)


def uvicorn_log_config(level: str = "INFO", fmt: str = "json") -> dict[str, Any]:
    """uvicorn's ``log_config``: its loggers write through a :class:`LogHandler`, not plain text.

    uvicorn applies it in every API process it starts, before the app
    exists; the app's :func:`configure_logging` then finds that handler on
    the root logger and replaces it, so there is still one.
    """
    return {
        "version": 1,
        "disable_existing_loggers": False,
        "handlers": {"service": {"()": "service.telemetry.logs.LogHandler", "fmt": fmt}},
        "root": {"handlers": ["service"], "level": "WARNING"},
        "loggers": {
            "uvicorn": {"handlers": [], "level": level.upper(), "propagate": True},
            "uvicorn.error": {"handlers": [], "level": level.upper(), "propagate": True},
            # The service writes its own access line per request (service/api/middleware/access_log.py).
            "uvicorn.access": {"handlers": [], "level": "WARNING", "propagate": True},
            "bellwether": {"level": level.upper()},
        },
    }

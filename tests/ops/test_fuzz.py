"""Fuzz: schemathesis against the service's own OpenAPI document, on the embedded default.

Every operation gets generated requests (valid and invalid); the checks are
all of schemathesis's: no 5xx, the status code, content type, headers and
body of every answer as the document says, undeclared methods answered 405
with a true ``Allow``, requests the document calls valid accepted and those it
calls invalid refused. Bounded: ``BELLWETHER_FUZZ_EXAMPLES``
examples per operation (8 in CI; raise it by hand, e.g. 200, for the long form).
Auth is on, as in the embedded default, with a key holding every scope.
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest

schemathesis = pytest.importorskip(
    "schemathesis", reason="schemathesis is not installed (pip install schemathesis; it is in the test extras)"
)
from hypothesis import HealthCheck, settings  # noqa: E402 - after the importorskip

from service.app import create_app  # noqa: E402 - after the importorskip
from tests.conftest import make_settings  # noqa: E402 - after the importorskip
from tests.ops.helpers import make_key  # noqa: E402 - after the importorskip

EXAMPLES = int(os.environ.get("BELLWETHER_FUZZ_EXAMPLES", "8"))


@pytest.fixture(scope="module")
def fuzz_db(tmp_path_factory: pytest.TempPathFactory) -> tuple[str, Path]:
    from storage.migrate import upgrade

    folder = tmp_path_factory.mktemp("fuzz")
    url = f"sqlite:///{folder / 'fuzz.sqlite3'}"
    upgrade(url)
    return url, folder


@pytest.fixture(scope="module")
def fuzz_key(fuzz_db: tuple[str, Path]) -> str:
    return make_key(fuzz_db[0], "fuzz", ["read", "write", "admin"])


@pytest.fixture(scope="module", autouse=True)
def no_dns() -> Iterator[None]:
    """Webhook URLs are checked by resolving their host: answer locally, never with a real lookup."""
    from service.jobs import webhooks

    import ipaddress

    def resolve(host: str, port: int) -> list[str]:
        try:
            return [str(ipaddress.ip_address(host))]
        except ValueError:
            return ["127.0.0.1"]  # every name is this machine (and the app allows loopback hooks)

    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(webhooks, "_resolve", resolve)
        yield


@pytest.fixture(scope="module")
def fuzz_schema(fuzz_db: tuple[str, Path], fuzz_key: str) -> Any:
    url, folder = fuzz_db
    app = create_app(
        make_settings(url, folder, auth_disabled=False, rate_limit_per_second=0,
                      max_body_bytes=64 * 1024, max_upload_bytes=1024 * 1024, wait_max_seconds=0.5,
                      webhook_allow_loopback=True)
    )
    return schemathesis.openapi.from_asgi("/openapi.json", app)


def _cursors() -> Any:
    """Page cursors as the service makes them (the document's custom format ``cursor``)."""
    from datetime import UTC, datetime

    from hypothesis import strategies as st

    from storage.repo.graphs import encode_cursor

    when = st.datetimes(min_value=datetime(2000, 1, 1), max_value=datetime(2100, 1, 1), timezones=st.just(UTC))
    return st.builds(encode_cursor, when, st.text("abcdefghijklmnopqrstuvwxyz0123456789_", min_size=1, max_size=30))


schemathesis.openapi.format("cursor", _cursors())
schema = schemathesis.pytest.from_fixture("fuzz_schema")


@schema.parametrize()
@settings(
    max_examples=EXAMPLES,
    deadline=None,
    derandomize=True,
    suppress_health_check=list(HealthCheck),
)
def test_fuzz_operation(case: Any, fuzz_key: str) -> None:
    # Every check schemathesis has, including positive_data_acceptance (a request the document
    # calls valid is accepted) and negative_data_rejection (one it calls invalid is refused).
    case.call_and_validate(headers={"Authorization": f"Bearer {fuzz_key}"})

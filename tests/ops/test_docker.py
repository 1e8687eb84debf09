"""docker/: the compose file's services and commands, the proxy config, the Dockerfile's shape.

No container engine runs here, so the files are read, not run: every command
must parse with the real CLI, every BELLWETHER_* variable must be a setting,
and the topology must be the one the scale-out test runs as plain processes
(PostgreSQL, two API replicas behind one port, a worker service that scales).
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import pytest

from service.cli.main import build_parser
from service.settings import Settings

yaml = pytest.importorskip("yaml", reason="PyYAML is needed to read docker/compose.yaml")

DOCKER = Path(__file__).resolve().parents[2] / "docker"


@pytest.fixture(scope="module")
def compose() -> dict[str, Any]:
    return dict(yaml.safe_load((DOCKER / "compose.yaml").read_text()))


def bellwether_services(compose: dict[str, Any]) -> dict[str, dict[str, Any]]:
    return {n: s for n, s in compose["services"].items() if s.get("image", "").startswith("bellwether")}


def test_services_and_topology(compose: dict[str, Any]) -> None:
    services = compose["services"]
    assert {"postgres", "migrate", "api-1", "api-2", "proxy", "worker"} <= set(services)
    assert services["postgres"]["image"].startswith("postgres:")
    assert "healthcheck" in services["postgres"]
    # Only the proxy publishes a port: one port for both replicas.
    published = [n for n, s in services.items() if s.get("ports")]
    assert published == ["proxy"] and len(services["proxy"]["ports"]) == 1
    # The worker service scales: replicas, no fixed container name, no published port.
    worker = services["worker"]
    assert worker["deploy"]["replicas"] >= 2 and "container_name" not in worker and "ports" not in worker
    # Replicas and workers wait for the migration; the migration waits for a healthy database.
    for name in ("api-1", "api-2", "worker"):
        assert services[name]["depends_on"]["migrate"]["condition"] == "service_completed_successfully"
    assert services["migrate"]["depends_on"]["postgres"]["condition"] == "service_healthy"
    for name in ("api-1", "api-2"):
        assert services["proxy"]["depends_on"][name]["condition"] == "service_healthy"


def test_commands_parse_with_the_cli(compose: dict[str, Any]) -> None:
    parser = build_parser()
    roles = {}
    for name, svc in bellwether_services(compose).items():
        cmd = svc["command"]
        assert cmd[0] == "bellwether", name
        args = parser.parse_args(cmd[1:])
        roles[name] = args
    assert roles["migrate"].command == "migrate"
    assert roles["worker"].command == "worker"
    for name in ("api-1", "api-2"):
        api = roles[name]
        # API only (workers are their own service), on all interfaces, migrations left to `migrate`.
        assert (api.command, api.workers, api.host, api.port, api.no_migrate) == ("serve", 0, "0.0.0.0", 8000, True)


def test_environment_names_settings_and_points_at_postgres(compose: dict[str, Any]) -> None:
    fields = {"BELLWETHER_" + f.upper() for f in Settings.model_fields}
    for name, svc in bellwether_services(compose).items():
        env = svc["environment"]
        unknown = [k for k in env if k.startswith("BELLWETHER_") and k not in fields]
        assert not unknown, f"{name}: {unknown} are not settings"
        assert env["BELLWETHER_DATABASE_URL"].startswith("postgresql+psycopg://") and "@postgres:5432/" in env[
            "BELLWETHER_DATABASE_URL"
        ]
        assert env.get("BELLWETHER_AUTH_DISABLED", "false") in ("false", False)
    worker_env = compose["services"]["worker"]["environment"]
    port = worker_env["BELLWETHER_WORKER_METRICS_PORT"]
    assert port in " ".join(compose["services"]["worker"]["healthcheck"]["test"])


def test_proxy_config_balances_both_replicas() -> None:
    conf = (DOCKER / "nginx.conf").read_text()
    upstream = re.search(r"upstream\s+(\w+)\s*{([^}]*)}", conf)
    assert upstream is not None
    servers = re.findall(r"server\s+([\w.-]+:\d+)", upstream.group(2))
    assert servers == ["api-1:8000", "api-2:8000"]
    assert f"proxy_pass http://{upstream.group(1)};" in conf
    assert re.search(r"listen\s+8080;", conf)
    assert "client_max_body_size 0;" in conf and "proxy_request_buffering off;" in conf


def test_dockerfile_is_multi_stage_non_root_with_health_check() -> None:
    text = (DOCKER / "Dockerfile").read_text()
    stages = re.findall(r"^FROM\s+\S+(?:\s+AS\s+(\w+))?", text, flags=re.MULTILINE | re.IGNORECASE)
    assert len(stages) >= 2 and "runtime" in stages
    runtime = text.split("AS runtime", 1)[1]
    user = re.search(r"^USER\s+(\S+)", runtime, flags=re.MULTILINE)
    assert user is not None and user.group(1) not in ("root", "0")
    assert "COPY --from=build" in runtime and "build-essential" not in runtime  # no compiler at run time
    assert re.search(r"^HEALTHCHECK .*\n?.*/healthz", runtime, flags=re.MULTILINE)
    cmd = re.search(r"^CMD\s+(\[.*\])", runtime, flags=re.MULTILINE)
    assert cmd is not None
    args = yaml.safe_load(cmd.group(1))
    assert args[0] == "bellwether" and build_parser().parse_args(args[1:]).command == "serve"

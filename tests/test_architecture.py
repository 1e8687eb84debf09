"""Layer rules: each package imports only what its layer may (STYLE.md, DEVELOPERS.md)."""

from __future__ import annotations

import ast
import importlib
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent

# The floors, top down: doors (service/api, service/jobs, service/cli, service/app.py) -> use cases
# (service/usecases) -> engine (service/analytics, service/intake, storage). service/telemetry
# (logs, metrics) and service/settings.py sit beside every floor and import none of them.
WEB = {"fastapi", "starlette", "uvicorn"}
# package -> top-level modules it must never import
FORBIDDEN = {
    "service/analytics": WEB | {"sqlalchemy", "pydantic", "httpx", "storage", "alembic"},
    "service/intake": WEB | {"sqlalchemy", "pydantic", "httpx", "storage", "alembic"},
    "storage": WEB | {"service", "pydantic", "httpx"},
    "service/usecases": WEB | {"httpx"},
    "service/jobs": WEB,
    "service/telemetry": WEB | {"sqlalchemy", "pydantic", "storage"},
    # Pure ASGI middleware on Starlette's types: no routes, no database, no request models.
    "service/api/middleware": {"fastapi", "sqlalchemy", "pydantic", "storage", "uvicorn", "httpx"},
}
DOORS = ("service.api", "service.jobs", "service.cli", "service.app")
# inside service: package -> service modules it must not import
FORBIDDEN_SERVICE = {
    "service/analytics": {*DOORS, "service.intake", "service.usecases", "service.settings", "service.telemetry"},
    # intake builds the engine's value types (GraphArrays, NodeAttributes of analytics/graph.py) and
    # nothing else of analytics.
    "service/intake": {*DOORS, "service.usecases", "service.settings", "service.telemetry",
                       *(f"service.analytics.{m}" for m in ("structure", "diffusion", "seeding", "ties", "learning",
                                                             "events", "integrity", "errors"))},
    "service/usecases": {*DOORS},
    "service/telemetry": {*DOORS, "service.usecases", "service.analytics", "service.intake"},
    "service/jobs": {"service.api", "service.cli", "service.app"},
    "service/cli": {"service.api.middleware"},
    "service/api/middleware": {"service.jobs", "service.cli", "service.app", "service.usecases"},
    # The console is one more door: pages reach the engine through the use cases and storage.repo.
    "service/console": {"service.analytics.structure", "service.analytics.diffusion", "service.analytics.seeding",
                        "service.analytics.ties", "service.analytics.learning", "service.analytics.events",
                        "service.analytics.integrity", "service.analytics.graph", "service.jobs.tasks",
                        "service.jobs.worker", "service.cli"},
    # Routers reach the engine through the use cases: only the error classes may be named.
    "service/api": {"service.analytics.structure", "service.analytics.diffusion", "service.analytics.seeding",
                    "service.analytics.ties", "service.analytics.learning", "service.analytics.events",
                    "service.analytics.integrity", "service.analytics.graph", "service.intake.merge",
                    "service.jobs.tasks", "service.jobs.worker"},
}


def imports_of(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    names: set[str] = set()
    pkg = ".".join(path.relative_to(ROOT).with_suffix("").parts[:-1])
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names.update(a.name for a in node.names)
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = pkg.split(".")
                base = base[: len(base) - node.level + 1]
                mod = ".".join(base + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            names.add(mod)
    return names


def py_files(folder: str) -> list[Path]:
    return sorted((ROOT / folder).rglob("*.py"))


@pytest.mark.parametrize("folder", sorted(set(FORBIDDEN) | set(FORBIDDEN_SERVICE)))
def test_layers_import_only_what_they_may(folder: str) -> None:
    bad = []
    for f in py_files(folder):
        for name in imports_of(f):
            top = name.split(".")[0]
            if top in FORBIDDEN.get(folder, ()):
                bad.append(f"{f.relative_to(ROOT)} imports {name}")
            for sib in FORBIDDEN_SERVICE.get(folder, ()):
                if name == sib or name.startswith(sib + "."):
                    bad.append(f"{f.relative_to(ROOT)} imports {name}")
    assert not bad, "\n".join(bad)


def test_routers_run_no_sql() -> None:
    """Queries live in storage/repo; a router may name a Session type (sqlalchemy.orm) and nothing else."""
    bad = [f"{f.relative_to(ROOT)} imports {name}" for f in py_files("service/api") + py_files("service/console")
           for name in imports_of(f)
           if name.split(".")[0] == "sqlalchemy" and name != "sqlalchemy.orm"]
    assert not bad, "\n".join(bad)


def test_only_app_and_cli_build_settings() -> None:
    bad = []
    for f in py_files("service") + py_files("storage"):
        rel = f.relative_to(ROOT).as_posix()
        if rel.startswith(("service/cli/", "service/app.py", "service/settings.py")):
            continue
        if "Settings()" in f.read_text(encoding="utf-8"):
            bad.append(rel)
    assert not bad, bad


ANALYTICS_FAMILIES = ["structure", "diffusion", "seeding", "ties", "learning", "events", "integrity"]


def test_analytics_is_grouped_by_family() -> None:
    """No loose algorithm modules: the top of analytics holds only the shared types and helpers."""
    top = sorted(f.name for f in (ROOT / "service/analytics").glob("*.py"))
    # _grouping (the counting sort graph.csr and three families build rows with) is a shared
    # helper like _chunks and _rng.
    assert top == ["__init__.py", "_chunks.py", "_grouping.py", "_rng.py", "errors.py", "graph.py"], top
    folders = sorted(d.name for d in (ROOT / "service/analytics").iterdir() if d.is_dir() and d.name != "__pycache__")
    assert folders == sorted(ANALYTICS_FAMILIES)


def test_analytics_reexports_every_family() -> None:
    top = importlib.import_module("service.analytics")
    for family in ANALYTICS_FAMILIES:
        pkg = importlib.import_module(f"service.analytics.{family}")
        missing = set(pkg.__all__) - set(top.__all__)
        assert not missing, f"service.analytics does not re-export {sorted(missing)} from {family}"


@pytest.mark.parametrize(
    "package",
    [*(f"service.analytics.{f}" for f in ANALYTICS_FAMILIES), "service.intake", "storage.models", "service.api.middleware"],
)
def test_package_reexports_agree_with_modules(package: str) -> None:
    pkg = importlib.import_module(package)
    exported = set(getattr(pkg, "__all__", ()))
    folder = ROOT / package.replace(".", "/")
    for f in sorted(folder.glob("*.py")):
        if f.name.startswith("_"):
            continue
        mod = importlib.import_module(f"{package}.{f.stem}")
        names = set(getattr(mod, "__all__", ()))
        assert hasattr(mod, "__all__"), f"{package}.{f.stem} has no __all__"
        missing = names - exported
        assert not missing, f"{package} does not re-export {sorted(missing)} from {f.stem}"


def _string_constants(path: Path) -> list[str]:
    """String literals of a module, leaving out docstrings."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    docstrings = set()
    for node in ast.walk(tree):
        if isinstance(node, (ast.Module, ast.ClassDef, ast.FunctionDef, ast.AsyncFunctionDef)) and node.body:
            first = node.body[0]
            if isinstance(first, ast.Expr) and isinstance(first.value, ast.Constant):
                docstrings.add(id(first.value))
    return [
        n.value for n in ast.walk(tree)
        if isinstance(n, ast.Constant) and isinstance(n.value, str) and id(n) not in docstrings
    ]


def test_storage_writes_no_problem_documents() -> None:
    """Storage raises errors and stores the documents it is given; it never names a problem type."""
    bad = [f.relative_to(ROOT).as_posix() for f in py_files("storage") if "/problems/" in f.read_text(encoding="utf-8")]
    assert not bad, bad


def test_problem_types_are_built_in_one_place() -> None:
    """Only ``service/jobs/errors.py`` (``problem_document``) spells a problem type; errors carry slugs."""
    allowed = {"service/jobs/errors.py", "service/api/schemas/common.py"}  # the latter: an OpenAPI example
    bad = [
        f"{f.relative_to(ROOT).as_posix()}: {s!r}"
        for f in py_files("service")
        if f.relative_to(ROOT).as_posix() not in allowed
        for s in _string_constants(f)
        if "/problems/" in s
    ]
    assert not bad, "\n".join(bad)


def _runtime_imports(path: Path) -> set[str]:
    """Imports outside ``if TYPE_CHECKING:`` blocks and outside functions."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    names: set[str] = set()
    for node in tree.body:
        if isinstance(node, ast.Import):
            names.update(a.name for a in node.names)
        elif isinstance(node, ast.ImportFrom) and not node.level:
            names.add(node.module or "")
    return names


def test_the_cache_roof_imports_only_the_standard_library_and_numpy() -> None:
    # service/usecases/caches.py sits under loading, indexes, diffusion_inputs and the ranking tables: it must
    # import none of them (or the database, HTTP or settings) when it is loaded.
    allowed_top = {"__future__", "dataclasses", "threading", "collections", "concurrent", "typing", "numpy"}
    bad = sorted(n for n in _runtime_imports(ROOT / "service/usecases/caches.py") if n.split(".")[0] not in allowed_top)
    assert not bad, bad


@pytest.mark.parametrize("module", ["loading", "diffusion_inputs", "_ranking_tables", "indexes"])
def test_per_process_caches_live_under_the_one_roof(module: str) -> None:
    # A cache is a NamedCache of service.usecases.caches (one store, one byte bound), never a module's
    # own dictionary and lock.
    path = ROOT / f"service/usecases/{module}.py"
    names = imports_of(path)
    assert "service.usecases.caches" in names
    text = path.read_text(encoding="utf-8")
    assert "OrderedDict" not in text and "lru_cache" not in text
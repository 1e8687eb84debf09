"""Layer rules: each package imports only what its layer may (STYLE.md, DEVELOPERS.md)."""

from __future__ import annotations

import ast
import importlib
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent

# package -> top-level modules it must never import
FORBIDDEN = {
    "service/analytics": {"sqlalchemy", "fastapi", "starlette", "pydantic", "httpx", "storage", "uvicorn", "alembic"},
    "service/intake": {"sqlalchemy", "fastapi", "starlette", "pydantic", "httpx", "storage", "uvicorn", "alembic"},
    "storage": {"service", "fastapi", "starlette", "pydantic", "uvicorn", "httpx"},
    "service/jobs": {"fastapi", "starlette", "uvicorn"},
    # Pure ASGI middleware on Starlette's types: no routes, no database, no request models.
    "service/api/middleware": {"fastapi", "sqlalchemy", "pydantic", "storage", "uvicorn", "httpx"},
}
# inside service: package -> sibling service packages it must not import
FORBIDDEN_SERVICE = {
    "service/analytics": {"service.api", "service.jobs", "service.intake", "service.cli", "service.app", "service.settings", "service.loader", "service.ingest"},
    "service/intake": {"service.api", "service.jobs", "service.cli", "service.app", "service.settings", "service.loader", "service.ingest"},
    "service/jobs": {"service.api", "service.cli", "service.app"},
    "service/api/middleware": {"service.jobs", "service.cli", "service.app", "service.loader", "service.ingest"},
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


@pytest.mark.parametrize("folder", sorted(FORBIDDEN))
def test_layers_import_only_what_they_may(folder: str) -> None:
    bad = []
    for f in py_files(folder):
        for name in imports_of(f):
            top = name.split(".")[0]
            if top in FORBIDDEN[folder]:
                bad.append(f"{f.relative_to(ROOT)} imports {name}")
            for sib in FORBIDDEN_SERVICE.get(folder, ()):
                if name == sib or name.startswith(sib + "."):
                    bad.append(f"{f.relative_to(ROOT)} imports {name}")
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
    assert top == ["__init__.py", "_chunks.py", "_rng.py", "errors.py", "graph.py"], top
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
    # service/caches.py sits under loader, indexes, diffusion_cache and rankings: it must
    # import none of them (or the database, HTTP or settings) when it is loaded.
    allowed_top = {"__future__", "dataclasses", "threading", "collections", "concurrent", "typing", "numpy"}
    bad = sorted(n for n in _runtime_imports(ROOT / "service/caches.py") if n.split(".")[0] not in allowed_top)
    assert not bad, bad


@pytest.mark.parametrize("module", ["loader", "usecases/indexes", "diffusion_cache", "rankings"])
def test_per_process_caches_live_under_the_one_roof(module: str) -> None:
    # A cache is a NamedCache of service.caches (one store, one byte bound), never a module's
    # own dictionary and lock.
    names = imports_of(ROOT / f"service/{module}.py")
    assert "service.caches" in names
    text = (ROOT / f"service/{module}.py").read_text(encoding="utf-8")
    assert "OrderedDict" not in text and "lru_cache" not in text

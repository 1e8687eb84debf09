"""The package re-exports exactly its modules' public names, and imports no outer layers."""

from __future__ import annotations

import ast
import importlib
import pathlib

import service.intake as pkg

MODULES = ["errors", "limits", "interner", "tables", "csvfile", "jsonfile", "graphml", "events", "campaign_log", "merge", "dialect",
           "encoding", "hints"]
ALLOWED = {"__future__", "array", "collections", "csv", "dataclasses", "decimal", "io", "itertools",
           "datetime", "json", "math", "typing", "numpy", "defusedxml", "ijson", "service",
           "codecs", "re", "charset_normalizer", "pyarrow", "concurrent"}


def test_all_agrees_with_the_modules():
    names: set[str] = set()
    for mod in MODULES:
        m = importlib.import_module(f"service.intake.{mod}")
        names |= set(m.__all__)
        for name in m.__all__:
            assert getattr(pkg, name) is getattr(m, name)
    assert set(pkg.__all__) == names
    assert len(pkg.__all__) == len(set(pkg.__all__))


def test_imports_stay_inside_the_layer():
    root = pathlib.Path(pkg.__file__).parent
    for path in root.glob("*.py"):
        tree = ast.parse(path.read_text())
        for node in ast.walk(tree):
            if isinstance(node, ast.Import):
                tops = [a.name.split(".")[0] for a in node.names]
                full = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.level == 0:
                tops, full = [node.module.split(".")[0]], [node.module]
            else:
                continue
            assert set(tops) <= ALLOWED, (path.name, tops)
            for name in full:
                if name.startswith("service"):
                    assert name == "service.analytics.graph", (path.name, name)

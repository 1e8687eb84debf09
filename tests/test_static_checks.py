"""Static checks kept green in CI: mypy in strict mode and ruff, with the project's
settings in pyproject.toml (STYLE.md asks for both)."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent


def _run(*cmd: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(cmd, cwd=ROOT, capture_output=True, text=True, timeout=600)


def test_mypy_strict_is_clean() -> None:
    pytest.importorskip("mypy", reason="mypy is in the test extras")
    out = _run(sys.executable, "-m", "mypy", "--strict", "service", "storage")
    assert out.returncode == 0, out.stdout[-4000:] + out.stderr[-2000:]


def test_ruff_is_clean() -> None:
    pytest.importorskip("ruff", reason="ruff is in the test extras")
    out = _run(sys.executable, "-m", "ruff", "check", "service", "storage", "tests")
    assert out.returncode == 0, out.stdout[-4000:]

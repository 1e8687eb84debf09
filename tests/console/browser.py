"""Headless Debian chromium for the console tests and benchmark: a driver, a live server with keys."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import pytest

__all__ = ["chromium", "browser_or_skip", "make_key", "BROWSER_ENV"]

CHROMIUM = shutil.which("chromium") or "/usr/bin/chromium"
CHROMEDRIVER = shutil.which("chromedriver") or "/usr/bin/chromedriver"
BROWSER_ENV = {"BELLWETHER_AUTH_DISABLED": "false", "BELLWETHER_LOG_LEVEL": "WARNING"}


def browser_or_skip() -> None:
    """Skip without the system chromium and chromedriver; in CI (.ci/run installs them) fail instead."""
    missing = [p for p in (CHROMIUM, CHROMEDRIVER) if not Path(p).exists()]
    if missing:
        if os.environ.get("CI") == "true":
            pytest.fail(f"missing {', '.join(missing)}: .ci/run installs chromium and chromium-driver")
        pytest.skip(f"needs Debian's chromium and chromium-driver (apt-get install chromium chromium-driver); "
                    f"missing {', '.join(missing)}")


@contextmanager
def chromium(width: int = 1280, height: int = 800) -> Iterator[Any]:
    """A headless chromium driven by the system chromedriver, its console messages kept."""
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    options = webdriver.ChromeOptions()
    options.binary_location = CHROMIUM
    for arg in ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
                f"--window-size={width},{height}", "--hide-scrollbars", "--force-device-scale-factor=1"):
        options.add_argument(arg)
    options.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    driver = webdriver.Chrome(service=Service(executable_path=CHROMEDRIVER), options=options)
    try:
        yield driver
    finally:
        driver.quit()


def make_key(data_dir: Path, tenant: str, scopes: str) -> str:
    """A key made by ``bellwether keys create`` on the live server's database (its last line)."""
    env = {**os.environ, "BELLWETHER_DATA_DIR": str(data_dir)}
    out = subprocess.run([sys.executable, "-m", "service.cli.main", "keys", "create", "--tenant", tenant,
                          "--scopes", scopes], env=env, check=True, capture_output=True, text=True).stdout
    return out.strip().splitlines()[-1]

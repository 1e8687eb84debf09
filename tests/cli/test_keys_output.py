"""``bellwether keys create`` says which database holds the key, and prints the key alone last."""

from __future__ import annotations

from pathlib import Path

import pytest

from service.cli.main import main


def test_create_names_the_database_and_ends_with_the_key(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                                          capsys: pytest.CaptureFixture[str]) -> None:
    for name in ("BELLWETHER_DATABASE_URL", "BELLWETHER_AUTH_DISABLED"):
        monkeypatch.delenv(name, raising=False)
    monkeypatch.setenv("BELLWETHER_DATA_DIR", str(tmp_path / "data"))
    assert main(["keys", "create", "--tenant", "growth", "--scopes", "read,write"]) == 0
    lines = capsys.readouterr().out.strip().splitlines()
    assert lines[-1].startswith("bw_") and " " not in lines[-1]
    stored = next(line for line in lines if line.startswith("stored in "))
    # The embedded database under the data folder a server must share.
    assert str((tmp_path / "data" / "bellwether.sqlite3").resolve()) in stored

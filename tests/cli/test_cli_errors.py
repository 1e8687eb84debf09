"""The command line: user errors are one plain line on stderr with exit code 2, never a traceback;
``keys revoke`` takes a key as ``keys list`` prints it."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

from service.cli.keys import key_ident
from service.cli.main import main

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture(autouse=True)
def data_dir(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    monkeypatch.setenv("BELLWETHER_DATA_DIR", str(tmp_path / "data"))
    monkeypatch.delenv("BELLWETHER_DATABASE_URL", raising=False)
    return tmp_path / "data"


def run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    try:
        code = main(list(argv))
    except SystemExit as exc:  # argparse exits by itself
        code = exc.code if isinstance(exc.code, int) else 1
    out, err = capsys.readouterr()
    return code, out, err


def assert_user_error(code: int, out: str, err: str, says: str) -> None:
    assert code == 2, (code, out, err)
    assert out == "" and "Traceback" not in err
    lines = err.splitlines()
    assert len(lines) == 1 and "error:" in lines[0] and says in lines[0], err


BAD_INPUT = [
    # keys create
    (["keys", "create"], "--tenant"),
    (["keys", "create", "--tenant", ""], "--tenant must be 1 to 64 characters"),
    (["keys", "create", "--tenant", "t" * 65], "--tenant must be 1 to 64 characters; got 65"),
    (["keys", "create", "--tenant", "acme", "--scopes", "root"], "--scopes must be a comma-separated list"),
    (["keys", "create", "--tenant", "acme", "--scopes", ","], "got none"),
    (["keys", "create", "--tenant", "acme", "--expires-days", "soon"], "invalid float value: 'soon'"),
    (["keys", "create", "--tenant", "acme", "--expires-days", "0"], "--expires-days must be more than 0"),
    (["keys", "create", "--tenant", "acme", "--expires-days", "-3"], "--expires-days must be more than 0"),
    (["keys", "create", "--tenant", "acme", "--expires-days", "nan"], "--expires-days must be more than 0"),
    (["keys", "create", "--tenant", "acme", "--expires-days", "1e12"], "at most 36500"),
    (["keys", "create", "--tenant", "acme", "--name", "n" * 201], "--name must be at most 200"),
    (["keys", "create", "--tenant", "acme", "--colour", "red"], "unrecognized arguments: --colour red"),
    # keys list
    (["keys", "list", "extra"], "unrecognized arguments: extra"),
    # keys revoke
    (["keys", "revoke"], "required: key"),
    (["keys", "revoke", "bw_00000000_…"], "no key has the id or prefix 'bw_00000000_…'"),
    (["keys", "revoke", "key_nope"], "no key has the id or prefix 'key_nope'"),
    (["keys", "revoke", "  "], "name the key to revoke"),
    (["keys", "revoke", "bw_"], "name the key to revoke"),
    # the other commands' arguments
    (["serve", "--port", "0"], "argument --port: 0 is out of range; use 1 to 65535"),
    (["serve", "--port", "99999"], "use 1 to 65535"),
    (["serve", "--port", "http"], "'http' is not a whole number"),
    (["serve", "--workers", "-1"], "argument --workers: -1 is out of range"),
    (["serve", "--api-processes", "0"], "argument --api-processes: 0 is out of range"),
    (["demo", "--members", "5"], "argument --members: 5 is out of range; use 60 to 1000000"),
    # keys and the command itself
    (["keys"], "required: {create,list,revoke}"),
    (["keys", "rotate"], "invalid choice: 'rotate'"),
    ([], "required: COMMAND"),
    (["launch"], "invalid choice: 'launch'"),
]


@pytest.mark.parametrize("argv, says", BAD_INPUT, ids=[" ".join(a) or "(none)" for a, _ in BAD_INPUT])
def test_bad_input_is_one_plain_line_and_exit_2(capsys: pytest.CaptureFixture[str], argv: list[str], says: str) -> None:
    assert_user_error(*run(capsys, *argv), says)


def test_invalid_settings_and_database_urls_are_one_line(
    capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv("BELLWETHER_PORT", "eighty")
    assert_user_error(*run(capsys, "keys", "list"), "BELLWETHER_PORT: Input should be a valid integer")
    monkeypatch.delenv("BELLWETHER_PORT")
    monkeypatch.setenv("BELLWETHER_DATABASE_URL", "nonsense://")
    code, out, err = run(capsys, "keys", "list")
    assert code == 2 and "Traceback" not in err and len(err.splitlines()) == 1, err
    assert "BELLWETHER_DATABASE_URL" in err


def test_demo_against_an_unreachable_server_is_one_line(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    code, out, err = run(capsys, "demo", "--members", "60", "--url", "http://127.0.0.1:9", "--key", "k",
                         "--out", str(tmp_path / "demo"))
    assert code == 2 and "Traceback" not in err, err
    assert err.splitlines() == [err.splitlines()[0]] and "cannot reach http://127.0.0.1:9" in err
    assert "Bellwether demo" in out  # it had started telling the story


def test_serve_without_auth_off_loopback_is_a_user_error(
    capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv("BELLWETHER_AUTH_DISABLED", "true")
    assert_user_error(*run(capsys, "serve", "--host", "0.0.0.0", "--no-migrate"), "only when binding to loopback")


@pytest.mark.parametrize(
    "given, ident",
    [
        ("key_abc", "key_abc"),
        ("0a1b2c3d", "0a1b2c3d"),
        ("bw_0a1b2c3d", "0a1b2c3d"),
        ("bw_0a1b2c3d_…", "0a1b2c3d"),
        ("bw_0a1b2c3d_...", "0a1b2c3d"),
        ("bw_0a1b2c3d…", "0a1b2c3d"),
        ("bw_0a1b2c3d_Zm9vYmFyYmF6cXV4X-rest-of-the-secret", "0a1b2c3d"),
        (" bw_0a1b2c3d \n", "0a1b2c3d"),
    ],
)
def test_key_ident_reads_every_form_keys_list_and_create_print(given: str, ident: str) -> None:
    assert key_ident(given) == ident


@pytest.mark.parametrize("form", ["listed", "bare-bw", "prefix", "id", "whole-key"])
def test_revoke_takes_the_key_as_list_prints_it(capsys: pytest.CaptureFixture[str], form: str) -> None:
    assert main(["keys", "create", "--tenant", "acme", "--scopes", "read"]) == 0
    created = capsys.readouterr().out.splitlines()
    plain = created[-1]
    key_id = created[0].split()[2]
    assert main(["keys", "list"]) == 0
    (row,) = capsys.readouterr().out.splitlines()
    listed = row.split("\t")[1]  # exactly as `keys list` prints it: bw_<prefix>_…
    prefix = plain.split("_")[1]
    assert listed == f"bw_{prefix}_…"
    given = {"listed": listed, "bare-bw": f"bw_{prefix}", "prefix": prefix, "id": key_id, "whole-key": plain}[form]
    assert main(["keys", "revoke", given]) == 0
    out, err = capsys.readouterr()
    assert out.startswith(f"revoked {key_id}") and err == ""
    assert main(["keys", "list"]) == 0
    assert capsys.readouterr().out.rstrip().endswith("revoked")


def test_no_traceback_in_a_real_process(data_dir: Path) -> None:
    """The console script as a person runs it: the listed form of an unknown key."""
    env = {**os.environ, "BELLWETHER_DATA_DIR": str(data_dir)}
    r = subprocess.run(
        [sys.executable, "-m", "service.cli.main", "keys", "revoke", "bw_00000000_…"],
        cwd=ROOT, env=env, capture_output=True, text=True, timeout=120,
    )
    assert r.returncode == 2 and r.stdout == "", r
    assert r.stderr.splitlines() == [
        "bellwether: error: no key has the id or prefix 'bw_00000000_…'; `bellwether keys list` shows them"
    ]

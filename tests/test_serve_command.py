"""`rankrec serve` and `rankrec token add`: settings for the app factory, the demo layout, a real start."""

from __future__ import annotations

import json
import signal
import stat
import subprocess
import sys
from dataclasses import fields
from pathlib import Path

import httpx
import pytest

from api.settings import PREFIX, ServiceSettings
from rankrec.cli import main
from rankrec.tokens import check_token, load_tokens
from tests._serving import free_port, wait_healthy

PROJECT = Path(__file__).resolve().parent.parent


@pytest.fixture
def clean_environment(monkeypatch):
    """RANKREC_SERVE_* variables set by a test are removed afterwards."""
    for field in fields(ServiceSettings):
        monkeypatch.setenv(PREFIX + field.name.upper(), "")
    return monkeypatch


@pytest.fixture
def captured_run(monkeypatch):
    calls = []
    monkeypatch.setattr("uvicorn.run", lambda *args, **kwargs: calls.append((args, kwargs)))
    return calls


def test_token_add_prints_the_token_once_and_stores_its_hash(tmp_path, capsys):
    tokens = tmp_path / "tokens.json"
    assert main(["token", "add", "wiki-frontend", "--role", "reader", "--tokens", str(tokens)]) == 0
    out, err = capsys.readouterr()
    token = out.strip()
    assert len(out.splitlines()) == 1 and token not in err and token not in tokens.read_text()
    assert check_token(load_tokens(tokens), token) == ("wiki-frontend", "reader")
    assert stat.S_IMODE(tokens.stat().st_mode) == 0o600
    assert main(["token", "add", "wiki-frontend", "--role", "admin", "--tokens", str(tokens)]) == 2
    assert "already has a token" in capsys.readouterr().err
    with pytest.raises(SystemExit):  # argparse refuses other roles
        main(["token", "add", "x", "--role", "owner", "--tokens", str(tokens)])


def test_serve_hands_its_settings_to_the_factory(tmp_path, capsys, clean_environment, captured_run):
    tokens = tmp_path / "tokens.json"
    main(["token", "add", "ops", "--role", "admin", "--tokens", str(tokens)])
    argv = [
        "serve",
        "--index",
        str(tmp_path / "index"),
        "--wiki",
        str(tmp_path / "wiki.db"),
        "--tokens",
        str(tokens),
        "--port",
        "8123",
        "--retention-days",
        "30",
        "--watch-seconds",
        "0.5",
        "--max-k",
        "40",
    ]
    assert main(argv) == 0
    ((args, kwargs),) = captured_run
    assert args == ("api.app:app_from_environment",) and kwargs["factory"] is True
    assert kwargs["host"] == "127.0.0.1" and kwargs["port"] == 8123
    settings = ServiceSettings.from_environment()
    assert settings.index == tmp_path / "index" and settings.wiki == tmp_path / "wiki.db"
    assert settings.tokens == tokens and settings.retention_days == 30 and settings.watch_seconds == 0.5
    assert settings.max_k == 40 and settings.pseudonym_key is None


@pytest.mark.parametrize(
    "argv, message",
    [
        (["serve"], "--index and --tokens"),
        (["serve", "--index", "ix", "--tokens", "absent.json"], "no tokens file"),
    ],
    ids=["nothing", "no-tokens-file"],
)
def test_serve_refuses_incomplete_settings(tmp_path, capsys, clean_environment, captured_run, argv, message):
    clean_environment.chdir(tmp_path)
    assert main(argv) == 2
    assert message in capsys.readouterr().err and captured_run == []


def test_serve_workdir_builds_the_demo_and_makes_an_admin_token(
    tmp_path, capsys, clean_environment, captured_run
):
    workdir = tmp_path / "demo"
    assert main(["serve", "--workdir", str(workdir), "--pseudonym-key", str(tmp_path / "key")]) == 0
    out = capsys.readouterr().out
    token = out.strip().splitlines()[-1]
    assert check_token(load_tokens(workdir / "tokens.json"), token) == ("demo-admin", "admin")
    assert json.loads((workdir / "index" / "manifest.json").read_text())["counts"]["pages"] == 300
    settings = ServiceSettings.from_environment()
    assert settings.index == workdir / "index" and settings.index.is_symlink()  # the link, so swaps show
    assert settings.pseudonym_key == tmp_path / "key" and (tmp_path / "key").is_file()
    # a second start reuses the index and the tokens and prints no token
    assert main(["serve", "--workdir", str(workdir)]) == 0
    assert capsys.readouterr().out == ""


def test_the_cli_never_imports_the_service():
    code = (
        "import sys; from rankrec.cli import build_parser; build_parser(); "
        "print(sorted(m for m in sys.modules if m == 'api' or m.startswith('api.')))"
    )
    found = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, cwd=PROJECT, check=True
    )
    assert found.stdout.strip() == "[]"


def test_serve_starts_a_server_that_answers(tmp_path):
    workdir = tmp_path / "demo"
    port = free_port()
    command = [
        sys.executable,
        "-c",
        "from rankrec.cli import main; raise SystemExit(main())",
        "serve",
        "--workdir",
        str(workdir),
        "--port",
        str(port),
    ]
    server = subprocess.Popen(
        command, cwd=PROJECT, stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True
    )
    try:
        wait_healthy(server, f"http://127.0.0.1:{port}")
        health = httpx.get(f"http://127.0.0.1:{port}/v1/health", timeout=2)
        assert health.status_code == 200 and health.json()["pages"] == 300
        token = load_tokens(workdir / "tokens.json")[0]
        assert token.name == "demo-admin"
    finally:
        server.terminate()
        server.wait(timeout=20)
        server.stdout.close()
    # uvicorn stops gracefully, then the process ends by SIGTERM itself, which systemd counts as a clean
    # stop (systemd.service: SIGTERM is a clean exit signal by default); an exit status of 143 would not be
    assert server.returncode == -signal.SIGTERM

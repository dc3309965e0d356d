"""What the service writes to its logs names no reader and no page: who read what stays in the store,
under pseudonymisation, retention and erasure (issue finding: uvicorn's access log wrote
``GET /v1/pages/...?viewer=u00017`` in plain text; OWASP API Security Top 10 2023, API3, and the
OWASP Logging Cheat Sheet: no personal data in logs unless needed)."""

from __future__ import annotations

import logging
from urllib.parse import quote

import pytest

import api.lists
from api.app import create_app
from rankrec.cli import main
from rankrec.store import Store

from .conftest import TestClient, settings_for


@pytest.fixture(scope="module")
def reading(demo) -> dict:
    """A reader and a page of the demo wiki that are easy to spot in a log line."""
    with Store(demo["wiki"], create=False) as store:
        user, page = store.connection.execute(
            "SELECT user, page FROM views JOIN users ON users.id = user_id JOIN pages ON pages.id = page_id "
            "WHERE page_id NOT IN (SELECT page_id FROM page_groups) ORDER BY user, page LIMIT 1"
        ).fetchone()
    return {"user": user, "page": page, "path": f"/v1/pages/{quote(page, safe='')}/related"}


def _lines(caplog) -> list[str]:
    """Every log line written on the service side (the test's own HTTP client, httpx, logs its URLs)."""
    return [
        f"{record.name} {record.getMessage()} {record.exc_text or ''}"
        for record in caplog.records
        if not record.name.startswith(("httpx", "httpcore"))
    ]


def test_the_access_log_names_routes_not_readers_or_pages(client, as_viewer, reading, caplog):
    caplog.set_level(logging.DEBUG)
    assert client.get(reading["path"], headers=as_viewer(reading["user"])).status_code == 200
    client.get(f"/v1/users/{reading['user']}/recommendations", headers=as_viewer(reading["user"]))
    lines = _lines(caplog)
    access = [line for line in lines if line.startswith("rankrec.api.access ")]
    assert any("GET /v1/pages/{page:path}/related 200" in line for line in access), lines
    assert any("/v1/users/{user}/recommendations" in line for line in access), lines
    assert not [line for line in lines if reading["user"] in line or reading["page"] in line]


def test_an_unexpected_failure_is_logged_without_the_path(demo, as_viewer, reading, caplog, monkeypatch):
    def broken(*args, **kwargs):
        raise RuntimeError("simulated failure")

    monkeypatch.setattr(api.lists, "related", broken)
    client = TestClient(create_app(settings_for(demo)), raise_server_exceptions=False)
    caplog.set_level(logging.DEBUG)
    answer = client.get(reading["path"], headers=as_viewer(reading["user"]))
    assert answer.status_code == 500 and answer.json()["error"]["code"] == "internal"
    lines = _lines(caplog)
    assert any("unexpected error on GET /v1/pages/{page:path}/related" in line for line in lines), lines
    assert not [line for line in lines if reading["user"] in line or reading["page"] in line]


def test_serve_turns_uvicorns_access_log_off(demo, monkeypatch):
    import uvicorn

    handed = {}
    monkeypatch.setattr(uvicorn, "run", lambda target, **options: handed.update(options, target=target))
    command = ["serve", "--index", str(demo["index"]), "--tokens", str(demo["tokens"]), "--port", "8765"]
    assert main(command) == 0
    assert handed["target"] == "api.app:app_from_environment" and handed["factory"] is True
    assert handed["access_log"] is False  # uvicorn's access log writes the raw request line
    assert handed["log_config"]["loggers"]["rankrec.api"]["handlers"] == ["default"]
    assert (handed["host"], handed["port"]) == ("127.0.0.1", 8765)

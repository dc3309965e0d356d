"""Store errors answer 503 with a stable code, never 500 (issue finding 8: on a full disk the first store
connection failed with 500 ``internal``). Errors are injected as SQLite raises them
(``sqlite3.OperationalError: database or disk is full``) and as the kernel does (``OSError`` ENOSPC).

RFC 9110 section 15.6.4: 503 is for a temporary overload or maintenance, and may carry Retry-After
(section 10.2.3).
"""

from __future__ import annotations

import errno
import sqlite3
from urllib.parse import quote

import pytest

import api.lists
from api.app import create_app
from rankrec.store import Store

from .conftest import TestClient, settings_for


@pytest.fixture
def world(demo, tmp_path):
    wiki = tmp_path / "wiki.db"
    with Store(demo["wiki"], create=False) as source, Store(wiki) as copy:
        source.connection.backup(copy.connection)
        page = copy.scalar(
            "SELECT page FROM pages WHERE present = 1 AND id NOT IN (SELECT page_id FROM page_groups) "
            "ORDER BY page LIMIT 1"
        )
    app = create_app(settings_for(demo, wiki=wiki))
    yield {**demo, "wiki": wiki, "page": page, "client": TestClient(app, raise_server_exceptions=False)}
    app.state.service.close()


def _raises(error: BaseException):
    def raising(*args, **kwargs):
        raise error

    return raising


def _unavailable(answer, code: str) -> None:
    assert answer.status_code == 503, answer.text
    assert answer.json()["error"]["code"] == code
    assert int(answer.headers["retry-after"]) >= 1
    assert "wiki.db" not in answer.text and "/tmp" not in answer.text  # no server paths


def _views(world, user="disk-full-reader"):
    body = {"views": [{"user": user, "page": world["page"], "timestamp": 1_000_000}]}
    return world["client"].post(
        "/v1/views", json=body, headers={"Authorization": f"Bearer {world['reader']}"}
    )


def _count(world) -> int:
    with Store(world["wiki"], create=False) as store:
        return store.scalar("SELECT count(*) FROM views")


def test_a_full_disk_on_post_views_is_no_space_and_stores_nothing(world, monkeypatch):
    before = _count(world)
    monkeypatch.setattr(Store, "put_views", _raises(sqlite3.OperationalError("database or disk is full")))
    monkeypatch.setattr(Store, "append_views", _raises(sqlite3.OperationalError("database or disk is full")))
    _unavailable(_views(world), "no_space")
    monkeypatch.undo()
    assert _count(world) == before


def test_a_full_disk_inside_the_write_transaction_is_no_space(world, monkeypatch):
    # raised inside Store.transaction: rolled back, then answered as no space
    before = _count(world)
    monkeypatch.setattr(Store, "user_id", _raises(sqlite3.OperationalError("database or disk is full")))
    _unavailable(_views(world), "no_space")
    monkeypatch.undo()
    assert _count(world) == before


def test_a_full_disk_when_a_read_store_opens_is_no_space(world, as_viewer, monkeypatch):
    # a fresh thread of the pool opens its own read connection: that open fails on a full disk
    monkeypatch.setattr(
        "rankrec.store.sqlite3.connect", _raises(sqlite3.OperationalError("database or disk is full"))
    )
    world["client"].app.state.service.close()  # forget the read connections opened so far
    answer = world["client"].get(
        f"/v1/pages/{quote(world['page'], safe='')}/related", headers=as_viewer("u00003")
    )
    _unavailable(answer, "no_space")


@pytest.mark.parametrize(
    ("error", "code"),
    [
        (sqlite3.OperationalError("database or disk is full"), "no_space"),
        (OSError(errno.ENOSPC, "No space left on device"), "no_space"),
        (sqlite3.OperationalError("database is locked"), "store_unavailable"),
    ],
    ids=["sqlite-full", "enospc", "locked"],
)
def test_store_errors_met_by_a_list_route_answer_503(world, as_viewer, monkeypatch, error, code):
    monkeypatch.setattr(api.lists, "related", _raises(error))
    answer = world["client"].get(
        f"/v1/pages/{quote(world['page'], safe='')}/related", headers=as_viewer("u00003")
    )
    _unavailable(answer, code)


def test_other_failures_still_answer_500(world, as_viewer, monkeypatch):
    monkeypatch.setattr(api.lists, "related", _raises(OSError(errno.EACCES, "Permission denied")))
    answer = world["client"].get(
        f"/v1/pages/{quote(world['page'], safe='')}/related", headers=as_viewer("u00003")
    )
    assert answer.status_code == 500 and answer.json()["error"]["code"] == "internal"

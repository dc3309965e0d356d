"""The store: present vs referred-to pages, idempotent writes, all-or-nothing transactions."""

from __future__ import annotations

import sqlite3

import pytest

from rankrec.errors import InputError
from rankrec.sources.records import Origin, PageRecord
from rankrec.store import Store

ORIGIN = Origin("pages.csv", 2)


def _page(page: str, title: str | None = None, **fields) -> PageRecord:
    return PageRecord(page=page, title=title or page, origin=ORIGIN, **fields)


@pytest.fixture
def store(tmp_path):
    with Store(tmp_path / "wiki.db") as opened:
        yield opened


def test_wal_mode_is_on(store):
    # SQLite documentation, "Write-Ahead Logging": PRAGMA journal_mode returns "wal" once enabled.
    assert store.scalar("PRAGMA journal_mode") == "wal"


def test_link_to_a_missing_page_is_kept_and_counted(store):
    with store.transaction():
        store.put_page(_page("a"))
        store.put_page(_page("b"))
        store.put_links([("a", "b", 1.0), ("a", "ghost", 1.0)])
    counts = store.counts()
    assert (counts["pages"], counts["links"], counts["unresolved_links"]) == (2, 1, 1)
    with store.transaction():  # the missing page arrives later: the link resolves
        store.put_page(_page("ghost"))
    counts = store.counts()
    assert (counts["pages"], counts["links"], counts["unresolved_links"]) == (3, 2, 0)


def test_repeated_writes_change_nothing(store):
    rows = [("u1", "a", 100.0, None), ("u1", "a", 100.0, 5.0), ("u2", "a", 100.0, None)]
    for _ in range(2):
        with store.transaction():
            store.put_page(_page("a", tags=("x", "y"), groups=("g",)))
            store.put_views(rows)
            store.put_memberships([("team", "core", "u1")] * 2)
    assert store.counts()["views"] == 2  # (user, page, timestamp) is the identity of a view
    assert store.scalar("SELECT count(*) FROM page_tags") == 2
    assert store.scalar("SELECT count(*) FROM memberships") == 1


def test_failed_transaction_leaves_no_trace(store):
    with store.transaction():
        store.put_page(_page("a"))
    before = store.connection.execute("SELECT * FROM pages").fetchall()
    with pytest.raises(RuntimeError), store.transaction():
        store.put_page(_page("b"))
        store.put_views([("u", "b", 1.0, None)])
        raise RuntimeError("crash in the middle")
    assert store.connection.execute("SELECT * FROM pages").fetchall() == before
    assert store.counts()["views"] == 0
    with store.transaction():  # caches were reset with the rollback: ids are valid again
        store.put_views([("u", "b", 1.0, None)])
    assert store.counts()["views"] == 1


def test_describing_a_page_replaces_its_tags_and_groups(store):
    with store.transaction():
        store.put_page(_page("a", tags=("old",), groups=("g1",)))
    with store.transaction():
        store.put_page(_page("a", "A", tags=("new",), archived=True))
    assert store.connection.execute("SELECT tag FROM page_tags").fetchall() == [("new",)]
    assert store.scalar("SELECT count(*) FROM page_groups") == 0
    assert store.connection.execute("SELECT title, archived FROM pages").fetchone() == ("A", 1)


def test_not_a_store_is_an_input_error(tmp_path):
    junk = tmp_path / "junk.db"
    junk.write_bytes(b"this is not sqlite" * 100)
    with pytest.raises(InputError, match="not a usable wiki store"):
        Store(junk)
    with pytest.raises(InputError, match="no wiki store here"):
        Store(tmp_path / "absent.db", create=False)


def test_other_schema_version_is_refused(tmp_path):
    path = tmp_path / "wiki.db"
    Store(path).close()
    with sqlite3.connect(path) as connection:
        connection.execute("UPDATE meta SET value = '99' WHERE key = 'schema_version'")
    with pytest.raises(InputError, match="schema version 99"):
        Store(path)

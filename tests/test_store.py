"""The store: present vs referred-to pages, idempotent writes, all-or-nothing transactions, named reads."""

from __future__ import annotations

import re
import sqlite3
from pathlib import Path
from types import SimpleNamespace

import numpy as np
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


# -- one snapshot --------------------------------------------------------------------------------
def _view(user: str, page: str, timestamp: float, dwell: float | None = None) -> SimpleNamespace:
    return SimpleNamespace(user=user, page=page, timestamp=timestamp, dwell=dwell)


def test_a_reading_block_sees_one_snapshot(tmp_path):
    # SQLite documentation, "Write-Ahead Logging" (section "Concurrency"): a read transaction keeps
    # seeing the database as it was when it started, whatever writers commit meanwhile.
    path = tmp_path / "wiki.db"
    with Store(path) as reader, Store(path) as writer:
        writer.append_views([_view("ines", "ops/db", 10.0)])
        with reader.reading():
            # a user and a view committed through the other connection before the block's first
            # read: the snapshot was taken on entry, so the block sees neither
            writer.append_views([_view("omar", "ops/db", 20.0)])
            assert writer.users()[1] == ["ines", "omar"]
            inside = (reader.users()[1], reader.view_arrays()[0].size, reader.latest_view_time())
            writer.append_views([_view("omar", "ops/db", 30.0)])
            assert reader.user_row("omar") is None and reader.counts()["users"] == 1
            assert reader.view_arrays()[2].tolist() == [10.0]
        after = (reader.users()[1], reader.view_arrays()[0].size, reader.latest_view_time())
    assert inside == (["ines"], 1, 10.0)
    assert after == (["ines", "omar"], 3, 30.0)


def test_reading_blocks_nest_and_end_their_transaction(store):
    with store.reading():
        with store.reading():  # inside a block: adds nothing, ends nothing
            assert store.connection.in_transaction
        assert store.connection.in_transaction
    assert not store.connection.in_transaction
    with pytest.raises(RuntimeError), store.reading():
        raise RuntimeError("a failed read")
    assert not store.connection.in_transaction
    with store.transaction():  # inside a write transaction the transaction is the snapshot
        store.put_page(_page("a"))
        with store.reading():
            assert store.page_table() == [("a", None, False)]
        assert store.connection.in_transaction
    assert store.page_table() == [("a", None, False)]


# -- named reads ---------------------------------------------------------------------------------
@pytest.fixture
def filled(store):
    with store.transaction():
        store.put_page(_page("b", "B", space="ops", groups=("staff",), tags=("db", "backup")))
        store.put_page(_page("a", None, space=None, archived=True))
        store.put_page(_page("c", "C", space="lab", tags=("scope",)))
        store.put_links([("b", "a", 1.0), ("b", "ghost", 1.0), ("c", "ghost", 2.0), ("c", "void", 1.0)])
        store.put_views(
            [
                ("ove", "c", 30.0, None),
                ("ida", "b", 20.0, 60.0),
                ("ida", "c", 10.0, None),
                ("ida", "c", 40.0, 5.0),
                ("ida", "ghost", 5.0, None),
            ]
        )
        store.put_memberships(
            [
                ("team", "sre", "ove"),
                ("team", "sre", "ida"),
                ("team", "lab", "ove"),
                ("group", "staff", "ida"),
            ]
        )
        store.log_import("pages.csv", "pages", 3, 0)
    return store


def test_page_reads_follow_row_id_order(filled):
    row_ids, pages = filled.present_pages()
    assert pages == ["b", "a", "c"] and row_ids.tolist() == sorted(row_ids.tolist())
    assert filled.page_table() == [("B", "ops", False), ("a", None, True), ("C", "lab", False)]
    assert filled.page_group_pairs() == [(int(row_ids[0]), "staff")]
    assert sorted(filled.topic_pairs("spaces")) == [("lab", row_ids[2]), ("ops", row_ids[0])]  # not archived
    assert sorted(filled.topic_pairs("tags")) == [
        ("backup", row_ids[0]),
        ("db", row_ids[0]),
        ("scope", row_ids[2]),
    ]
    with pytest.raises(ValueError, match="kind"):
        filled.topic_pairs("words")
    texts = filled.page_texts()
    assert [row[:3] for row in texts] == [(row_ids[0], "B", "ops"), (row_ids[2], "C", "lab")]
    assert sorted(texts[0][3].split()) == ["backup", "db"]


def test_unresolved_link_reads_rank_by_count_then_page(filled):
    assert filled.unresolved_targets(5) == [("ghost", 2), ("void", 1)]
    assert filled.unresolved_targets(1) == [("ghost", 2)]
    assert filled.pages_with_unresolved_links(5) == [("c", 2), ("b", 1)]


def test_user_and_membership_reads(filled):
    rows, users = filled.users()
    assert users == ["ove", "ida"] and rows.tolist() == sorted(rows.tolist())
    ove, ida = rows.tolist()
    assert (filled.user_row("ida"), filled.user_row("nobody")) == (ida, None)
    assert filled.memberships("team") == [(ove, "lab"), (ove, "sre"), (ida, "sre")]  # by name, then row
    assert filled.memberships("group") == [(ida, "staff")]
    assert filled.names_of("team") == ["lab", "sre"] and filled.names_of("group") == ["staff"]
    assert filled.members_of("team", "sre") == ("ida", "ove") and filled.members_of("team", "none") == ()
    assert filled.groups_of_users([ove, ida]) == {ove: frozenset(), ida: frozenset({"staff"})}
    assert filled.most_active_user() == "ida"
    assert filled.most_viewed_public_pages() == [("c", "lab"), ("ghost", None)]  # b is in a group


def test_view_reads(filled):
    (ove, ida), _ = filled.users()
    users, pages, times = filled.view_arrays()
    assert users.tolist() == [ove, ida, ida, ida, ida] and times.tolist() == [30.0, 5.0, 10.0, 20.0, 40.0]
    users, pages, times, dwell = filled.view_arrays(with_dwell=True)  # by user, page, then time
    assert users.tolist() == [ove, ida, ida, ida, ida] and times.tolist() == [30.0, 20.0, 10.0, 40.0, 5.0]
    assert np.isnan(dwell[[0, 2, 4]]).all() and dwell[[1, 3]].tolist() == [60.0, 5.0]  # NULL dwell is NaN
    page_rows, counts = filled.view_counts()
    assert page_rows.tolist() == sorted(page_rows.tolist()) and counts.tolist() == [1, 3, 1]
    picked = filled.views_of_users([ove])
    assert picked[0].tolist() == [ove] and picked[2].tolist() == [30.0]
    assert filled.latest_view_time() == 40.0 and filled.latest_import() == 1


def test_reads_of_an_empty_store(store):
    assert store.latest_import() is None and store.latest_view_time() is None
    assert store.most_active_user() is None and store.page_table() == []
    page_rows, counts = store.view_counts()
    assert page_rows.shape == counts.shape == (0,)
    users, pages, times, dwell = store.view_arrays(with_dwell=True)
    assert users.dtype == np.int64 and dwell.shape == (0,)
    assert [array.size for array in store.views_of_users([])] == [0, 0, 0]


def test_reads_by_many_users_go_in_chunks(store):
    # Past SQLite's default limit of bound parameters per statement (999 before 3.32, "Limits In
    # SQLite"), so one IN (...) list of every user would fail on older builds.
    users = [f"user{number:04d}" for number in range(1200)]
    store.append_views([_view(user, "p", float(number)) for number, user in enumerate(users)])
    with store.transaction():
        store.put_memberships([("group", "even", user) for user in users[::2]])
    rows = store.users()[0].tolist()
    viewers, _, times = store.views_of_users(rows)
    assert sorted(viewers.tolist()) == rows and sorted(times.tolist()) == [float(n) for n in range(1200)]
    groups = store.groups_of_users(rows)
    assert len(groups) == 1200 and sum(name == frozenset({"even"}) for name in groups.values()) == 600


def test_no_sql_outside_the_store():
    # The project's own wall (ARCHITECTURE.md, "Walls"): only the store module family holds SQL.
    root = Path(__file__).resolve().parent.parent
    allowed = {
        root / "rankrec" / name
        for name in (
            "store.py",
            "_store_reads.py",
            "_store_text.py",
            "_store_writes.py",
            "_store_schema.py",
            "_store_links.py",
        )
    }
    pattern = re.compile(r"\.(execute|executemany|executescript|scalar)\(|\.connection\b")
    offenders = [
        f"{path.relative_to(root)}:{number}"
        for folder in ("rankrec", "api", "tools")
        for path in sorted((root / folder).rglob("*.py"))
        if path not in allowed
        for number, line in enumerate(path.read_text(encoding="utf-8").splitlines(), 1)
        if pattern.search(line)
    ]
    assert offenders == []


def _page_rows(store: Store) -> list[tuple]:
    return store.connection.execute(
        "SELECT id, page, title, present, origin FROM pages ORDER BY id"
    ).fetchall()


def _seeded(path: Path) -> Store:
    """A store holding a described page, a page only linked to (no title, not present) and one more."""
    store = Store(path)
    with store.transaction():
        store.put_page(PageRecord("ops/db", "Database", Origin("pages.csv", 2)))
        store.put_links([("ops/db", "ops/backup", 1.0)])
        store.put_page(PageRecord("ops/dns", "DNS", Origin("pages.csv", 3)))
    return store


def test_named_pages_in_bulk_are_what_put_page_without_description_makes(tmp_path):
    # put_named_pages (two statements for a run of an edge list's endpoints) against put_page(describe=
    # False) one page at a time, the path it replaces: same ids (SQLite's own max + 1), titles and
    # origins kept where set, pages only linked to made present.
    names = ["ops/backup", "ops/new", "ops/db", "ops/other"]
    origins = [f"links.csv:{line}" for line in range(2, 6)]
    with _seeded(tmp_path / "bulk.db") as bulk, _seeded(tmp_path / "one.db") as one:
        with bulk.transaction():
            bulk.put_named_pages(names, origins)
            bulk.put_links([("ops/new", "ops/other", 1.0)])
        with one.transaction():
            for page, origin in zip(names, origins, strict=True):
                file, line = origin.split(":")
                one.put_page(PageRecord(page, page, Origin(file, int(line))), describe=False)
            one.put_links([("ops/new", "ops/other", 1.0)])
        assert _page_rows(bulk) == _page_rows(one)
        assert _page_rows(bulk)[1] == (2, "ops/backup", "ops/backup", 1, "links.csv:2")
        assert bulk.stored_link_count() == 2

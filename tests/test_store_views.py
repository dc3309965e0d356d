"""Store upkeep of the event log: durable batch appends, retention deletes, erasing one reader."""

from __future__ import annotations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rankrec.errors import UnknownPage
from rankrec.sources.records import Origin, PageRecord, ViewRecord
from rankrec.store import Store

ORIGIN = Origin("POST /v1/views", 1)


def _view(user: str, page: str, timestamp: float, dwell: float | None = None) -> ViewRecord:
    return ViewRecord(user, page, timestamp, ORIGIN, dwell)


@pytest.fixture
def store(tmp_path):
    with Store(tmp_path / "wiki.db") as opened:
        with opened.transaction():
            for page in ("ops/db", "ops/backup", "sales/pricing"):
                opened.put_page(PageRecord(page=page, title=page, origin=ORIGIN))
            opened.put_memberships([("team", "ops", "member")])
        yield opened


def _stored(store: Store) -> set[tuple[str, str, float]]:
    return set(
        store.connection.execute(
            "SELECT user, page, timestamp FROM views JOIN users ON users.id = user_id "
            "JOIN pages ON pages.id = page_id"
        ).fetchall()
    )


def test_append_counts_new_views_and_ignores_duplicates(store):
    batch = [_view("ines", "ops/db", 100.0), _view("ines", "ops/db", 100.0), _view("ines", "ops/db", 101.0)]
    assert store.append_views(batch) == 2  # the repeat inside the batch is a duplicate
    assert store.append_views(batch) == 0  # and so is the whole batch a second time
    assert store.append_views([_view("tomas", "ops/db", 100.0)]) == 1  # another reader, same moment
    assert _stored(store) == {
        ("ines", "ops/db", 100.0),
        ("ines", "ops/db", 101.0),
        ("tomas", "ops/db", 100.0),
    }


def test_append_keeps_dwell_and_accepts_any_object_with_the_fields(store):
    class Bare:
        user, page, timestamp = "ines", "sales/pricing", 5

    assert store.append_views([_view("ines", "ops/db", 7.0, dwell=12.5), Bare()]) == 2
    rows = store.connection.execute("SELECT timestamp, dwell FROM views ORDER BY timestamp").fetchall()
    assert rows == [(5.0, None), (7.0, 12.5)]


def test_append_of_nothing_stores_nothing(store):
    assert store.append_views([]) == 0
    assert store.append_views([], known_pages_only=True) == 0


def test_append_runs_with_synchronous_full(store):
    # SQLite documentation, "PRAGMA synchronous": 0 OFF, 1 NORMAL, 2 FULL, 3 EXTRA.
    assert store.scalar("PRAGMA synchronous") == 1  # the store opens with NORMAL
    store.append_views([_view("ines", "ops/db", 1.0)])
    assert store.scalar("PRAGMA synchronous") == 2


def test_appended_views_are_visible_to_another_connection_at_once(store):
    store.append_views([_view("ines", "ops/db", 1.0), _view("ines", "ops/backup", 2.0)])
    with Store(store.path, create=False) as other:  # a second process would see the same (WAL)
        assert other.counts()["views"] == 2


def test_unknown_page_rejects_the_whole_batch(store):
    batch = [_view("newcomer", "ops/db", 1.0), _view("newcomer", "ops/nowhere", 2.0)]
    with pytest.raises(UnknownPage) as raised:
        store.append_views(batch, known_pages_only=True)
    assert raised.value.name == "ops/nowhere"
    assert store.counts()["views"] == 0
    # nothing of the refused batch stays behind: no user row, no referred-to page row
    assert store.scalar("SELECT count(*) FROM users WHERE user = 'newcomer'") == 0
    assert store.scalar("SELECT count(*) FROM pages WHERE page = 'ops/nowhere'") == 0
    assert store.append_views(batch[:1], known_pages_only=True) == 1  # the user id cache was reset


def test_unknown_page_named_is_the_first_in_batch_order(store):
    batch = [_view("ines", "ops/db", 1.0), _view("ines", "zz/late", 2.0), _view("ines", "aa/early", 3.0)]
    with pytest.raises(UnknownPage) as raised:
        store.append_views(batch, known_pages_only=True)
    assert raised.value.name == "zz/late"


def test_a_page_only_referred_to_is_unknown(store):
    with store.transaction():
        store.put_links([("ops/db", "ops/planned", 1.0)])  # a link target no source described
    with pytest.raises(UnknownPage):
        store.append_views([_view("ines", "ops/planned", 1.0)], known_pages_only=True)
    assert store.append_views([_view("ines", "ops/planned", 1.0)]) == 1  # without the check it goes in


@settings(max_examples=60, deadline=None)
@given(
    batches=st.lists(
        st.lists(
            st.tuples(
                st.sampled_from(["ines", "tomas", "aud"]),
                st.sampled_from(["ops/db", "ops/backup", "sales/pricing"]),
                st.integers(0, 5).map(float),
            ),
            max_size=8,
        ),
        max_size=4,
    )
)
def test_append_agrees_with_a_set_of_view_identities(tmp_path_factory, batches):
    # SQLite documentation, "The ON CONFLICT clause": INSERT OR IGNORE skips a row that would break the
    # primary key (user, page, timestamp); a Python set of those triples is the model.
    with Store(tmp_path_factory.mktemp("views") / "wiki.db") as store:
        seen: set[tuple[str, str, float]] = set()
        for batch in batches:
            stored = store.append_views([_view(*row) for row in batch], known_pages_only=False)
            assert stored == len(set(batch) - seen)
            seen |= set(batch)
        assert _stored(store) == seen


def test_delete_views_before_is_strict_and_counts(store):
    store.append_views([_view("ines", "ops/db", t) for t in (10.0, 20.0, 30.0)])
    assert store.delete_views_before(20.0) == 1  # the view at exactly 20 is not older than 20
    assert {row[2] for row in _stored(store)} == {20.0, 30.0}
    assert store.delete_views_before(20.0) == 0
    assert store.delete_views_before(1e12) == 2
    assert store.counts()["views"] == 0


@pytest.mark.parametrize("bad", ["yesterday", None, True, float("nan")])
def test_delete_views_before_refuses_a_non_number(store, bad):
    with pytest.raises(TypeError, match="timestamp must be Unix seconds"):
        store.delete_views_before(bad)


def test_erase_user_removes_only_that_reader(store):
    store.append_views(
        [_view("ines", "ops/db", 1.0), _view("ines", "ops/backup", 2.0), _view("tomas", "ops/db", 1.0)]
    )
    assert store.erase_user("ines") == 2
    assert _stored(store) == {("tomas", "ops/db", 1.0)}
    assert store.scalar("SELECT count(*) FROM users WHERE user = 'ines'") == 0
    assert store.erase_user("ines") == 0  # erasing twice is harmless
    assert store.erase_user("never-seen") == 0
    store.append_views([_view("ines", "ops/db", 3.0)])  # a returning reader starts afresh
    assert store.counts()["views"] == 2


def test_erase_user_keeps_a_user_row_that_a_membership_names(store):
    store.append_views([_view("member", "ops/db", 1.0)])
    assert store.erase_user("member") == 1
    assert store.scalar("SELECT count(*) FROM views") == 0
    # the team membership still refers to the row (foreign key), so the row stays
    assert store.scalar("SELECT count(*) FROM users WHERE user = 'member'") == 1


def test_erase_user_refuses_a_non_string(store):
    with pytest.raises(TypeError, match="user must be a string"):
        store.erase_user(42)


@settings(max_examples=40, deadline=None)
@given(
    rows=st.lists(
        st.tuples(
            st.sampled_from(["member", "ines", "tor", "ines"]),
            st.sampled_from(["ops/db", "ops/new", "sales/pricing", "hr/leave"]),
            st.sampled_from([100.0, 101.0]),
            st.sampled_from([None, 3.0, 7.5]),
        ),
        max_size=20,
    )
)
def test_put_views_equals_a_row_at_a_time(tmp_path_factory, rows):
    # put_views resolves its users and pages a few statements for all of them and inserts its rows in
    # key order. Model: the row-at-a-time insert it replaced (user_id and page_id per row, then
    # INSERT OR IGNORE in file order). Both stores must dump to the same SQL text (SQLite's own dump):
    # the same new ids for new users and pages, and the first dwell of a repeated view kept.
    dumps = []
    for bulk in (True, False):
        with Store(tmp_path_factory.mktemp("views") / "wiki.db") as store:
            with store.transaction():
                for page in ("ops/db", "sales/pricing"):
                    store.put_page(PageRecord(page=page, title=page, origin=ORIGIN))
                store.put_memberships([("team", "ops", "member")])
                if bulk:
                    store.put_views(iter(rows))  # any iterable, a generator too
                else:
                    for user, page, timestamp, dwell in rows:
                        row = (store.user_id(user), store.page_id(page), timestamp, dwell)
                        store.connection.execute("INSERT OR IGNORE INTO views VALUES (?, ?, ?, ?)", row)
            dumps.append([line for line in store.connection.iterdump() if "store_id" not in line])
    assert dumps[0] == dumps[1]

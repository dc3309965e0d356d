"""The store's link blocks (rankrec._store_links) against SQLite itself: a row per link, written with
the statements the store used before blocks (``DELETE ... WHERE source_id = ?`` for a cleared page,
``INSERT ... ON CONFLICT DO UPDATE`` for a put link), must end with the same links, weights, files and
lines, whatever the order of puts and clears, the transactions they come in, the block size and how
often held writes are merged."""

from __future__ import annotations

import sqlite3

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import rankrec._store_links as store_links
import rankrec._store_writes as store_writes
from rankrec.errors import InputError
from rankrec.store import Store

_PAGES = [f"ops/p{number}" for number in range(7)]
_put = st.tuples(
    st.sampled_from(_PAGES),
    st.sampled_from(_PAGES),
    st.sampled_from([0.5, 1.0, 2.0]),
    st.sampled_from([None, "a.md", "b.md"]),
    st.integers(1, 50),
)
_operation = st.one_of(
    st.tuples(st.just("put"), st.lists(_put, max_size=6)),
    st.tuples(st.just("clear"), st.lists(st.sampled_from(_PAGES), max_size=3)),
)


def _reference(transactions) -> list[tuple]:
    """The links as a row-per-link table ends up holding them (plain sqlite3)."""
    connection = sqlite3.connect(":memory:")
    connection.execute(
        "CREATE TABLE links (source TEXT, target TEXT, weight REAL, file TEXT, line INTEGER, "
        "PRIMARY KEY (source, target)) WITHOUT ROWID"
    )
    for operations in transactions:
        for kind, rows in operations:
            if kind == "clear":
                connection.executemany("DELETE FROM links WHERE source = ?", [(page,) for page in rows])
            else:
                connection.executemany(
                    "INSERT INTO links VALUES (?, ?, ?, ?, ?) ON CONFLICT (source, target) DO UPDATE SET "
                    "weight = excluded.weight, file = excluded.file, line = excluded.line",
                    [row for row in rows if row[0] != row[1]],
                )
    return sorted(connection.execute("SELECT source, target, weight FROM links").fetchall())


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    transactions=st.lists(st.lists(_operation, max_size=6), min_size=1, max_size=3),
    block=st.sampled_from([1, 2, 1024]),
    pending=st.sampled_from([1, 3, 4_000_000]),
)
def test_blocks_hold_what_a_row_per_link_table_holds(monkeypatch, transactions, block, pending):
    monkeypatch.setattr(store_links, "BLOCK_SOURCES", block)
    monkeypatch.setattr(store_writes, "PENDING_LINKS", pending)
    with Store(":memory:") as store:
        for operations in transactions:
            with store.transaction():
                for kind, rows in operations:
                    if kind == "clear":
                        store.clear_links_from(rows)
                    else:
                        store.put_links([row for row in rows if row[0] != row[1]])
        assert sorted(store.link_rows()) == _reference(transactions)
        links = store._links(("sources", "targets", "files", "lines"))
        pairs = list(zip(links.sources.tolist(), links.targets.tolist(), strict=True))
        assert pairs == sorted(set(pairs))  # by source then target, each pair once
        blocks = store.connection.execute("SELECT block, links FROM link_blocks").fetchall()
        assert all(count > 0 for _, count in blocks) and sum(count for _, count in blocks) == links.size


def test_a_link_keeps_the_file_and_line_of_its_last_put():
    with Store(":memory:") as store:
        with store.transaction():
            store.put_links([("ops/a", "ops/gone", 1.0, "a.md", 3), ("ops/a", "ops/gone", 1.0, "b.md", 9)])
        assert store.unresolved_link_origins() == ([("b.md", 9)], 1)


def test_a_rolled_back_transaction_leaves_neither_blocks_nor_held_links():
    with Store(":memory:") as store:
        with store.transaction():
            store.put_links([("ops/a", "ops/b", 1.0)])
        with pytest.raises(RuntimeError), store.transaction():
            store.put_links([("ops/a", "ops/c", 1.0)])
            store.clear_links_from(["ops/a"])
            raise RuntimeError("stop")
        assert not store._pending_links
        assert store.link_rows() == [("ops/a", "ops/b", 1.0)]


def test_a_damaged_block_is_an_input_error_naming_the_store(tmp_path):
    wiki = tmp_path / "wiki.db"
    with Store(wiki) as store, store.transaction():
        store.put_links([("ops/a", "ops/b", 1.0), ("ops/a", "ops/c", 1.0)])
    with sqlite3.connect(wiki) as connection:
        connection.execute("UPDATE link_blocks SET targets = ?", (np.zeros(1, "<i4").tobytes(),))
    with Store(wiki, create=False) as store, pytest.raises(InputError, match="damaged wiki store") as caught:
        store.link_arrays()
    assert caught.value.file == str(wiki)


def test_a_page_row_id_past_int32_is_refused_not_wrapped():
    # The blocks keep row ids as int32: a store whose page ids grew past 2**31 - 1 (SQLite allows 2**63)
    # must stop the write, not store a wrapped id, and the transaction leaves nothing behind.
    with Store(":memory:") as store:
        with store.transaction():
            far = "INSERT INTO pages (id, page, present) VALUES (?, 'ops/far', 1)"
            store.connection.execute(far, (2**31,))
        with pytest.raises(OverflowError, match="int32"), store.transaction():
            store.put_links([("ops/a", "ops/far", 1.0)])
        assert store.link_rows() == []
        assert store.scalar("SELECT count(*) FROM pages WHERE page = 'ops/a'") == 0


def test_a_reading_block_decodes_each_link_column_once(monkeypatch):
    # `rankrec stats` asks for the links once for every worst target and page besides its counts (each a
    # whole decode of the blocks): inside one reading block the snapshot cannot change, so each column is
    # decoded once, and the figures are those read outside a block.
    import rankrec._store_reads as reads
    from rankrec.stats import wiki_stats

    with Store(":memory:") as store:
        with store.transaction():
            store.put_named_pages(["ops/a", "ops/b"], ["links.csv:1", "links.csv:2"])
            store.put_links([("ops/a", f"ops/gone{n % 3}", 1.0, "a.md", n + 1) for n in range(6)])
            store.put_links([("ops/b", "ops/gone0", 1.0, "b.md", 7), ("ops/a", "ops/b", 1.0)])
        outside = (store.counts(), store.unresolved_link_origins(target="ops/gone0"), store.link_rows())
        asked: list[str] = []
        real = reads.stored_links
        monkeypatch.setattr(reads, "stored_links", lambda *a: asked.extend(a[1]) or real(*a))
        summary = wiki_stats(store)
        decoded = list(asked)
        with store.reading():
            inside = (store.counts(), store.unresolved_link_origins(target="ops/gone0"), store.link_rows())
    assert len(summary["worst_unresolved_targets"]) == 3 and len(summary["pages_with_most_unresolved"]) == 2
    assert sorted(decoded) == sorted(set(decoded))  # stats: every column decoded once
    assert inside == outside

"""The store's page text and link places: compressed text with its hash, places, stores made before them."""

from __future__ import annotations

import hashlib
import sqlite3
import zlib

import numpy as np
import pytest

from rankrec.build import build_index
from rankrec.configuration import Configuration
from rankrec.errors import InputError
from rankrec.sources.records import Origin, PageRecord
from rankrec.stats import wiki_stats
from rankrec.store import Store

ORIGIN = Origin("pages.jsonl", 1)
NEW_TABLES = ("page_text", "link_places", "link_occurrences")


def _page(page: str, text: str = "", headings: str = "") -> PageRecord:
    return PageRecord(page=page, title=page.upper(), origin=ORIGIN, text=text, headings=headings)


@pytest.fixture
def store(tmp_path):
    with Store(tmp_path / "wiki.db") as opened:
        yield opened


def test_text_is_stored_compressed_with_its_sha256_and_length(store):
    # The hash is SHA-256 (FIPS 180-4) of the stored UTF-8, as Python's hashlib computes it; the
    # compression is zlib's format (RFC 1950), which zlib.decompress reads back.
    text = "Backups run nightly — at 02:00 UTC. " * 50
    with store.transaction():
        store.put_page(_page("ops/backup", text, "OPS/BACKUP\nSchedule"))
        store.put_page(_page("ops/empty"))
    blob, headings, digest, size = store.connection.execute(
        "SELECT text, headings, sha256, text_bytes FROM page_text"
    ).fetchone()
    data = text.encode("utf-8")
    assert zlib.decompress(blob) == data and len(blob) < len(data)
    assert digest == hashlib.sha256(data).hexdigest() and size == len(data)
    assert headings == "OPS/BACKUP\nSchedule"
    rows, heading_list, texts = store.page_texts_by_row()
    assert rows.tolist() == [store.page_id("ops/backup")] and texts == [text]
    assert heading_list == ["OPS/BACKUP\nSchedule"]
    hash_rows, hashes = store.page_text_hashes()
    assert hash_rows.tolist() == rows.tolist() and hashes == [digest]
    assert store.text_counts() == (1, len(data))


def test_the_store_caps_text_at_a_character_boundary(store):
    # RFC 3629: a UTF-8 character is one to four bytes. "ab" and 40,000 four-byte characters
    # (U+1F600) cut to 64 KiB = 65,536 bytes keep "ab" and 16,383 of them (65,534 bytes).
    text = "ab" + "\U0001f600" * 40_000
    with store.transaction():
        store.put_page(_page("long", text))
    (stored,) = store.page_texts_by_row()[2]
    assert stored == "ab" + "\U0001f600" * 16_383
    digest, size = store.connection.execute("SELECT sha256, text_bytes FROM page_text").fetchone()
    assert size == 65_534 and digest == hashlib.sha256(stored.encode("utf-8")).hexdigest()


def test_a_page_described_again_replaces_its_text(store):
    with store.transaction():
        store.put_page(_page("a", "first"))
        store.put_page(_page("b", "kept"))
    with store.transaction():
        store.put_page(_page("a", "second"))
    assert store.page_texts_by_row()[2] == ["second", "kept"]
    with store.transaction():
        store.put_page(_page("a"))  # described without text: no text
        store.put_page(_page("b"), describe=False)  # only "exists": the text stays
    assert store.page_texts_by_row()[2] == ["kept"]


def test_text_reads_by_row_come_in_row_order_and_skip_missing_pages(store):
    with store.transaction():
        for name in "dcba":
            store.put_page(_page(name, f"text of {name}"))
        store.put_links([("a", "ghost", 1.0)])  # a row that is not present, and has no text
    rows = [store.page_id(name) for name in "abcd"]
    found, _, texts = store.page_texts_by_row([rows[3], rows[1], rows[1], store.page_id("ghost")])
    assert found.tolist() == [rows[3], rows[1]]  # d was put first: the lower row id
    assert texts == ["text of d", "text of b"]
    assert store.page_texts_by_row(range(1, 1_200))[0].tolist() == sorted(rows)  # read in chunks


def test_text_batches_come_in_row_order_and_match_the_reads_by_row(store):
    with store.transaction():
        for name in "edcba":
            store.put_page(_page(name, f"text of {name}" if name != "c" else "", f"{name} heading"))
        store.put_links([("a", "ghost", 1.0)])
    rows, headings, texts = store.page_texts_by_row()
    for batch in (1, 2, 10):
        parts = list(store.page_text_batches("text", batch=batch))
        assert [len(ids) for ids, _ in parts][:-1] == [batch] * (len(parts) - 1)
        assert np.concatenate([ids for ids, _ in parts]).tolist() == rows.tolist()
        assert [text for _, found in parts for text in found] == texts
    assert [text for _, found in store.page_text_batches("headings") for text in found] == headings
    assert len(texts) == 4  # c has no text, and the ghost is not present
    # the stored digests are hashlib's SHA-256 of each text's UTF-8
    digests = [digest for _, found in store.page_text_batches("sha256", batch=2) for digest in found]
    assert digests == [hashlib.sha256(text.encode("utf-8")).hexdigest() for text in texts]
    with pytest.raises(ValueError, match="field must be 'text', 'headings' or 'sha256'"):
        next(store.page_text_batches("title"))
    with pytest.raises(ValueError, match="batch must be a positive integer"):
        next(store.page_text_batches(batch=0))


def test_damaged_stored_text_is_an_input_error(store):
    with store.transaction():
        store.put_page(_page("a", "fine"))
        store.connection.execute("UPDATE page_text SET text = ?", (b"not zlib",))
    with pytest.raises(InputError, match="stored text of page row"):
        store.page_texts_by_row()
    with pytest.raises(InputError, match="stored text of page row"):
        list(store.page_text_batches())
    with store.transaction():  # a compressed bomb is not inflated past what a page text may hold
        store.connection.execute("UPDATE page_text SET text = ?", (zlib.compress(b"x" * 70_000),))
    with pytest.raises(InputError, match="longer than a page text"):
        store.page_texts_by_row()


def test_link_places_come_as_arrays_ordered_by_source_then_target(store):
    # Worked by hand: three places, sorted; codes index them; occurrences as put.
    with store.transaction():
        for name in ("a", "b", "c"):
            store.put_page(_page(name))
        store.put_links([("b", "a", 1.0), ("a", "c", 1.0), ("a", "b", 1.0), ("a", "ghost", 1.0)])
        store.put_link_places(
            [
                ("b", "a", "div.footer>p", 1),
                ("a", "c", "section>p", 2),
                ("a", "b", "div.related>ul>li", 1),
                ("a", "b", "div.footer>p", 1),
                ("a", "ghost", "section>p", 1),  # to a missing page: left out, as link_arrays does
            ]
        )
    sources, targets, codes, counts, places = store.link_place_arrays()
    row = {name: store.page_id(name) for name in "abc"}
    assert places == ["div.footer>p", "div.related>ul>li", "section>p"]
    assert list(zip(sources.tolist(), targets.tolist(), codes.tolist(), counts.tolist(), strict=True)) == [
        (row["a"], row["b"], 0, 1),
        (row["a"], row["b"], 1, 1),
        (row["a"], row["c"], 2, 2),
        (row["b"], row["a"], 0, 1),
    ]
    assert all(array.dtype == np.int64 for array in (sources, targets, codes, counts))
    with store.transaction():
        store.clear_links_from(["a"])  # a page's new snapshot replaces where its links sat
    sources, _, codes, _, places = store.link_place_arrays()
    assert sources.tolist() == [row["b"]] and [places[code] for code in codes] == ["div.footer>p"]


def test_reads_of_a_store_without_text_or_places(store):
    assert store.text_counts() == (0, 0) and store.page_texts_by_row()[0].size == 0
    assert store.page_text_hashes()[0].size == 0
    sources, targets, codes, counts, places = store.link_place_arrays()
    assert [array.size for array in (sources, targets, codes, counts)] == [0, 0, 0, 0] and places == []


def test_a_store_made_before_the_text_tables_opens_reads_and_builds(tmp_path):
    # A store of the earlier layout: the same schema version, without the three new tables.
    path = tmp_path / "old.db"
    with Store(path) as store, store.transaction():
        for name in "abc":
            store.put_page(_page(name, f"text {name}"))
        store.put_links([("a", "b", 1.0), ("b", "c", 1.0), ("c", "a", 1.0)])
        store.log_import("old", "generated", 3, 0)
    with sqlite3.connect(path) as raw:
        for table in NEW_TABLES:
            raw.execute(f"DROP TABLE {table}")
    with Store(path, create=False) as store:
        assert store.text_counts() == (0, 0) and store.link_place_arrays()[4] == []
        assert store.page_texts_by_row()[1] == [] and store.page_text_hashes()[1] == []
        assert wiki_stats(store)["text"] == {"pages": 0, "share": 0.0, "bytes": 0}
        index = build_index(store, tmp_path / "index", Configuration(), hubs=0)
        assert index is not None and store.counts()["links"] == 3
        tables = {row[0] for row in store.connection.execute("SELECT name FROM sqlite_master")}
        assert not set(NEW_TABLES) & tables  # reading never wrote to the old store
        with store.transaction():  # the first write adds the tables
            store.put_page(_page("d", "text d"))
        assert store.text_counts() == (1, 6)


def test_a_failed_transaction_that_added_the_tables_takes_them_back(tmp_path):
    path = tmp_path / "old.db"
    Store(path).close()
    with sqlite3.connect(path) as raw:
        for table in NEW_TABLES:
            raw.execute(f"DROP TABLE {table}")
    with Store(path) as store:
        with pytest.raises(RuntimeError), store.transaction():
            store.put_page(_page("a", "text"))
            raise RuntimeError("interrupted")
        assert store.text_counts() == (0, 0)
        with store.transaction():  # they are added again by the next write
            store.put_page(_page("a", "text"))
        assert store.text_counts() == (1, 4)

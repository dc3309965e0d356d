"""Page text in the evidence: read from the store on demand (StoredText), the same as read all at once."""

from __future__ import annotations

import numpy as np
import pytest

from rankrec.errors import InputError
from rankrec.evidence import StoredText, read_evidence
from rankrec.sources.records import Origin, PageRecord
from rankrec.store import Store

ORIGIN = Origin("pages.jsonl", 1)
PAGES = {  # page: (text, headings); "" text is a page without text
    "a/printers": ("install the printer driver then add the queue", "Printers\nDrivers"),
    "a/queues": ("each floor has a printer queue", "Queues"),
    "b/empty": ("", "Empty"),
    "b/vpn": ("connect with the vpn client and your token", "VPN"),
    "c/leave": ("request leave in the portal", "Leave"),
}


def _fill(store: Store, pages: dict, source: str = "pages.jsonl") -> None:
    with store.transaction():
        for page, (text, headings) in pages.items():
            store.put_page(PageRecord(page=page, title=page, origin=ORIGIN, text=text, headings=headings))
        names = list(pages)
        store.put_links([(names[i], names[(i + 1) % len(names)], 1.0) for i in range(len(names))])
        store.log_import(source, "pages", len(pages), 0)


@pytest.fixture
def wiki(tmp_path):
    path = tmp_path / "wiki.db"
    with Store(path) as store:
        _fill(store, PAGES)
    return path


def test_stored_text_reads_every_page_in_graph_order(wiki):
    with Store(wiki, create=False) as store:
        evidence = read_evidence(store)
        rows, headings, texts = store.page_texts_by_row()
    assert isinstance(evidence.bodies, StoredText) and isinstance(evidence.headings, StoredText)
    by_row = dict(zip(rows.tolist(), texts, strict=True))
    heading_by_row = dict(zip(rows.tolist(), headings, strict=True))
    expected = [by_row.get(row, "") for row in evidence.graph.row_ids.tolist()]
    assert list(evidence.bodies) == expected == list(evidence.bodies)  # read again each time
    assert list(evidence.headings) == [heading_by_row.get(row, "") for row in evidence.graph.row_ids.tolist()]
    assert len(evidence.bodies) == evidence.size == 5
    assert evidence.has_text and evidence.pages_with_text == 4 == sum(map(bool, evidence.bodies))
    assert evidence.bodies[1] == expected[1] and evidence.bodies[-1] == expected[-1]
    assert evidence.bodies[1:4] == expected[1:4]
    with pytest.raises(IndexError):
        evidence.bodies[5]


def test_stored_text_reads_in_batches_the_same(wiki):
    with Store(wiki, create=False) as store:
        evidence = read_evidence(store)
    small = StoredText(**{**vars(evidence.bodies), "batch": 1})
    assert list(small) == list(evidence.bodies)


def test_text_neighbours_from_the_store_equal_those_from_lists(wiki):
    from dataclasses import replace

    with Store(wiki, create=False) as store:
        evidence = read_evidence(store)
    in_memory = replace(evidence, headings=list(evidence.headings), bodies=list(evidence.bodies), _text={})
    streamed, listed = evidence.text_neighbours(0.4), in_memory.text_neighbours(0.4)
    for part in ("indptr", "indices", "data"):
        np.testing.assert_array_equal(getattr(streamed.similar, part), getattr(listed.similar, part))


def test_stored_text_refuses_a_store_imported_into_since(wiki):
    with Store(wiki, create=False) as store:
        evidence = read_evidence(store)
        _fill(store, {"d/new": ("a page added later", "New")}, source="more.jsonl")
    with pytest.raises(InputError, match="has had an import since its evidence was read"):
        list(evidence.bodies)
    with pytest.raises(InputError, match="read it again"):
        evidence.headings[0]


def test_a_store_without_text_and_a_store_in_memory(tmp_path):
    with Store(tmp_path / "bare.db") as store:
        _fill(store, {page: ("", headings) for page, (_, headings) in PAGES.items()})
        evidence = read_evidence(store)
    assert evidence.bodies is None and not evidence.has_text and evidence.pages_with_text == 0
    with Store(":memory:") as store:
        _fill(store, PAGES)
        evidence = read_evidence(store)
    assert isinstance(evidence.bodies, list) and evidence.pages_with_text == 4

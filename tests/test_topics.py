"""Text-derived topics (TF-IDF + NMF over titles, spaces and tags) and their use in an index."""

from __future__ import annotations

import numpy as np
import pytest

from rankrec.build import build_index
from rankrec.graph import load_graph
from rankrec.index import load_index
from rankrec.sources.records import Origin, PageRecord
from rankrec.store import Store
from rankrec.topics import text_topics

PUMPS = ["pump", "valve", "impeller", "flow", "pressure", "seal"]
LEDGER = ["invoice", "ledger", "payment", "audit", "budget", "expense"]


def _planted(path, pages=40, seed=0, archived=()):
    """Pages whose titles use one of two disjoint vocabularies: a planted two-topic partition."""
    rng = np.random.default_rng(seed)
    truth = {}
    with Store(path) as store, store.transaction():
        for i in range(pages):
            words = PUMPS if i % 2 == 0 else LEDGER
            title = " ".join(rng.choice(words, size=3, replace=False))
            store.put_page(
                PageRecord(f"p{i:03d}", title.title(), Origin("t"), space="docs", archived=i in archived)
            )
            truth[f"p{i:03d}"] = i % 2
        store.put_links([(f"p{i:03d}", f"p{(i + 1) % pages:03d}", 1.0) for i in range(pages)])
        store.log_import("t", "generated", pages, 0)
    return truth


def test_nmf_recovers_a_planted_partition(tmp_path):
    # Known answer by construction: two disjoint vocabularies make two topics (the factorisation of a
    # block-diagonal TF-IDF matrix, scikit-learn NMF).
    truth = _planted(tmp_path / "wiki.db", archived={4, 7})
    with Store(tmp_path / "wiki.db") as store:
        graph = load_graph(store)
        topics = text_topics(store, graph, 2)
    assert len(topics) == 2
    groups = []
    for name, members in topics.items():
        labels = {truth[graph.pages[m]] for m in members}
        assert len(labels) == 1  # a topic never mixes the vocabularies
        words = name.split(":", 2)[2].split("+")
        assert set(words) <= set(PUMPS if labels == {0} else LEDGER)
        groups.append(set(members.tolist()))
    everyone = set(range(graph.size)) - {graph.page_number("p004"), graph.page_number("p007")}
    assert groups[0] | groups[1] == everyone and not groups[0] & groups[1]  # archived pages left out


def test_no_text_gives_no_topics(tmp_path):
    with Store(tmp_path / "wiki.db") as store:
        with store.transaction():
            for i in range(5):
                store.put_page(PageRecord(f"p{i}", "", Origin("t")))
        assert text_topics(store, load_graph(store), 3) == {}
        with pytest.raises(ValueError, match="count"):
            text_topics(store, load_graph(store), 0)


def test_index_built_with_text_topics(tmp_path):
    _planted(tmp_path / "wiki.db")
    with Store(tmp_path / "wiki.db") as store:
        index = load_index(build_index(store, tmp_path / "index", topics="text:2", hubs=0))
        with pytest.raises(ValueError, match="topics"):
            build_index(store, tmp_path / "other", topics="words")
    assert index.manifest.topics == "text:2" and index.manifest.counts["topics"] == 2
    assert all(name.startswith("text:") for name in index.basis.names)

"""The graph of a store: numbering, CSR, dangling pages, navigation blend, fingerprint."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp

from rankrec.errors import UnknownPage
from rankrec.graph import blend_navigation, load_graph, navigation_counts
from rankrec.sources.records import Origin, PageRecord
from rankrec.store import Store


def _store(tmp_path, pages, links, views=()):
    store = Store(tmp_path / "wiki.db")
    with store.transaction():
        for page in pages:
            store.put_page(PageRecord(page=page, title=page.title(), origin=Origin("t")))
        store.put_links([(a, b, w) for a, b, w in links])
        store.put_views(list(views))
    return store


def test_graph_matches_a_networkx_digraph_of_the_same_links(tmp_path):
    # Reference: networkx.to_scipy_sparse_array on the same weighted directed graph.
    pages = ["a", "b", "c", "d"]
    links = [("a", "b", 1.0), ("a", "c", 2.0), ("b", "c", 1.0), ("c", "a", 0.5), ("a", "ghost", 1.0)]
    with _store(tmp_path, pages, links) as store:
        graph = load_graph(store)
    reference = nx.DiGraph()
    reference.add_nodes_from(pages)
    reference.add_weighted_edges_from([link for link in links if link[1] != "ghost"])
    expected = nx.to_scipy_sparse_array(reference, nodelist=list(graph.pages), format="csr")
    assert (graph.adjacency != expected).nnz == 0
    assert graph.dangling.tolist() == [False, False, False, True]  # d has no out-links
    assert graph.size == 4  # the missing link target is not a page of the graph


def test_unknown_page_suggests_close_ids(tmp_path):
    with _store(tmp_path, ["ops/backup", "ops/restore"], []) as store:
        graph = load_graph(store)
    assert graph.page_number("ops/restore") == 1
    with pytest.raises(UnknownPage) as caught:
        graph.page_number("ops/backups")
    assert caught.value.suggestions[0] == "ops/backup"


def test_navigation_counts_only_consecutive_views_within_a_session():
    # Sessions split at an inactivity gap (30 min, common practice in web analytics).
    users = np.array([1, 1, 1, 1, 2, 2])
    pages = np.array([0, 1, 1, 2, 2, 0])
    times = np.array([0.0, 100, 200, 5000, 0, 10])
    counts = navigation_counts(users, pages, times, 3, gap=1800)
    # 0->1 (user 1), 1->1 is a reload, 1->2 crosses the gap, 2->0 (user 2)
    assert counts.toarray().tolist() == [[0, 1, 0], [0, 0, 0], [1, 0, 0]]


def test_blend_mixes_rows_and_keeps_rows_without_navigation():
    adjacency = sp.csr_matrix(np.array([[0, 2, 0], [0, 0, 0], [1, 1, 0]], dtype=float))
    counts = sp.csr_matrix(np.array([[0, 0, 3], [1, 0, 0], [0, 0, 0]], dtype=float))
    blended = blend_navigation(adjacency, counts, 0.25).toarray()
    np.testing.assert_allclose(blended[0], [0, 0.75, 0.25])  # 3/4 links, 1/4 navigation
    np.testing.assert_allclose(blended[1], [1, 0, 0])  # no links: navigation only
    np.testing.assert_allclose(blended[2], [1, 1, 0])  # no navigation: links as they were

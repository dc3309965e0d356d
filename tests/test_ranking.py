"""`rank_pages`: global and personalised PageRank of a store's pages, against networkx."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rankrec.errors import UnknownPage, UnknownTopic
from rankrec.ranking import rank_pages, top_k
from rankrec.recommend.select import select_pages
from rankrec.sources.records import Origin, PageRecord
from rankrec.store import Store


@pytest.fixture
def store(tmp_path):
    rng = np.random.default_rng(5)
    pages = [f"{'ops' if i < 15 else 'eng'}/p{i:02d}" for i in range(30)]
    links = {(pages[a], pages[b]) for a, b in rng.integers(0, 30, (90, 2)) if a != b and a not in (3, 17)}
    with Store(tmp_path / "wiki.db") as opened:
        with opened.transaction():
            for page in pages:
                record = PageRecord(page=page, title=page, origin=Origin("t"), space=page.split("/")[0])
                opened.put_page(record)
            opened.put_links([(a, b, 1.0) for a, b in sorted(links)])
        yield opened, pages, sorted(links)


def _networkx(pages, links, personalization=None):
    # Reference: networkx.pagerank; its dangling nodes follow `dangling` (default: the personalization
    # vector), which is the strongly-preferential policy rankrec uses.
    graph = nx.DiGraph()
    graph.add_nodes_from(pages)
    graph.add_edges_from(links)
    return nx.pagerank(graph, alpha=0.85, personalization=personalization, tol=1e-12, max_iter=10_000)


def test_global_ranking_matches_networkx(store):
    opened, pages, links = store
    ranking = rank_pages(opened, k=30)
    reference = _networkx(pages, links)
    expected = sorted(pages, key=lambda page: (-reference[page], pages.index(page)))
    assert list(ranking.pages[:10]) == expected[:10]
    np.testing.assert_allclose(ranking.scores, [reference[p] for p in ranking.pages], atol=1e-8)


def test_space_ranking_matches_networkx_personalization(store):
    opened, pages, links = store
    ranking = rank_pages(opened, spaces=["ops"], k=10)
    reference = _networkx(pages, links, {p: float(p.startswith("ops/")) for p in pages})
    np.testing.assert_allclose(ranking.scores, [reference[p] for p in ranking.pages], atol=1e-8)
    assert ranking.restart_pages == 15


def test_unknown_names_suggest_close_ones(store):
    opened, _, _ = store
    with pytest.raises(UnknownTopic, match="space:ops"):
        rank_pages(opened, spaces=["opz"])
    with pytest.raises(UnknownPage, match="ops/p01"):
        rank_pages(opened, pages=["ops/p01-draft"])


def test_top_k_breaks_ties_by_index_and_skips_excluded():
    scores = np.array([0.2, 0.5, 0.5, 0.1, 0.5])
    assert top_k(scores, 3).tolist() == [1, 2, 4]
    assert top_k(scores, 3, exclude=np.array([2])).tolist() == [1, 4, 0]
    assert top_k(scores, 10).tolist() == [1, 2, 4, 0, 3]


@settings(max_examples=80, deadline=None)
@given(
    n=st.integers(1, 40),
    k=st.integers(1, 12),
    lift=st.sampled_from([0.0, 0.5, 1.0, -1.0]),
    seed=st.integers(0, 10_000),
)
def test_one_pass_choice_equals_the_block_choice(n, k, lift, seed):
    # A single list with a precomputed divisor (global ** lift) is chosen by one pass keeping a heap of
    # the k best; it must give exactly the list of the block path (argpartition and lexsort in numpy),
    # ties to the lower page included: scores are drawn from few values so that ties are common, and
    # some lists are short of positive scores so that the fill by global PageRank runs too.
    rng = np.random.default_rng(seed)
    scores = rng.choice([0.0, 0.1, 0.2, 0.2, 0.5], size=n) * (rng.random(n) < 0.8)
    overall = rng.choice([0.01, 0.02, 0.05], size=n)
    eligible = rng.random(n) < 0.8
    divisor = np.power(overall, lift) if lift else np.ones(n)
    block = select_pages(scores, overall, eligible, k, lift=lift)
    one_pass = select_pages(scores, overall, eligible, k, lift=lift, divisor=divisor)
    assert one_pass.tolist() == block.tolist()

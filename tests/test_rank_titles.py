"""`rank` with titles, a lift and a space's pages first or alone, against networkx.pagerank."""

from __future__ import annotations

import csv
import io
import json

import networkx as nx
import numpy as np
import pytest

from rankrec.cli import main
from rankrec.ranking import rank_pages
from rankrec.sources.records import Origin, PageRecord
from rankrec.store import Store

PAGES = [f"{'ops' if i < 15 else 'eng'}/p{i:02d}" for i in range(30)]


def _title(page: str) -> str:
    return "" if page == "eng/p29" else f"Title of {page.split('/')[1].upper()}"  # one page without a title


@pytest.fixture
def store(tmp_path):
    rng = np.random.default_rng(11)
    # page 0 is a hub: a third of the pages link to it, so a lift has something to push down
    links = {(PAGES[a], PAGES[b]) for a, b in rng.integers(0, 30, (90, 2)) if a != b and a not in (3, 17)}
    links |= {(PAGES[a], PAGES[0]) for a in range(1, 30, 3)}
    with Store(tmp_path / "wiki.db") as opened:
        with opened.transaction():
            for page in PAGES:
                space = page.split("/")[0]
                opened.put_page(PageRecord(page=page, title=_title(page), origin=Origin("t"), space=space))
            opened.put_links([(a, b, 1.0) for a, b in sorted(links)])
            opened.log_import("test", "generated", len(PAGES), 0)
        yield opened, sorted(links)


def _networkx(links, restart=None):
    # Reference: networkx.pagerank (alpha = damping). Its dangling nodes follow the personalization
    # vector by default, the strongly-preferential policy rankrec uses.
    graph = nx.DiGraph()
    graph.add_nodes_from(PAGES)
    graph.add_edges_from(links)
    personalization = None if restart is None else {page: float(page in restart) for page in PAGES}
    return nx.pagerank(graph, alpha=0.85, personalization=personalization, tol=1e-13, max_iter=10_000)


def _lifted(personal, overall, lift, pages):
    """page -> personal / global^lift (the lift of rankrec.configuration.Configuration) from networkx."""
    return {page: personal[page] / overall[page] ** lift for page in pages}


def test_titles_come_with_every_page(store):
    opened, _ = store
    ranking = rank_pages(opened, k=30)
    assert len(ranking.titles) == 30
    for page, title, space in zip(ranking.pages, ranking.titles, ranking.spaces, strict=True):
        assert title == (_title(page) or page)  # no title: the page id, as the index keeps it
        assert space == page.split("/")[0]


def test_lifted_ranking_matches_networkx(store):
    opened, links = store
    restart = [page for page in PAGES if page.startswith("ops/")]
    personal, overall = _networkx(links, restart), _networkx(links)
    expected = _lifted(personal, overall, 0.5, PAGES)
    ranking = rank_pages(opened, spaces=["ops"], k=12, lift=0.5)
    np.testing.assert_allclose(ranking.scores, [personal[p] for p in ranking.pages], rtol=1e-6)
    np.testing.assert_allclose(ranking.global_scores, [overall[p] for p in ranking.pages], rtol=1e-6)
    np.testing.assert_allclose(ranking.ranked, [expected[p] for p in ranking.pages], rtol=1e-6)
    # the list holds the 12 best lifted scores, best first
    np.testing.assert_allclose(ranking.ranked, sorted(expected.values(), reverse=True)[:12], rtol=1e-6)
    # the lift changes the order: eng/p25, high in global PageRank, moves down (2nd plain, 6th lifted)
    plain = rank_pages(opened, spaces=["ops"], k=12)
    assert plain.pages.index("eng/p25") < ranking.pages.index("eng/p25")
    assert plain.global_scores is None and np.array_equal(plain.ranked, plain.scores)


def test_space_pages_only_and_first(store):
    opened, links = store
    restart = {"eng/p20"} | {page for page in PAGES if page.startswith("ops/")}
    personal = _networkx(links, restart)
    only = rank_pages(opened, pages=["eng/p20"], spaces=["ops"], k=20, space_pages="only")
    assert len(only.pages) == 15 and all(page.startswith("ops/") for page in only.pages)
    assert only.in_space == 15
    np.testing.assert_allclose(
        only.scores, sorted((personal[p] for p in PAGES if p.startswith("ops/")), reverse=True), rtol=1e-6
    )
    first = rank_pages(opened, pages=["eng/p20"], spaces=["ops"], k=20, space_pages="first")
    assert first.pages[:15] == only.pages and first.in_space == 15
    assert all(page.startswith("eng/") for page in first.pages[15:])
    others = sorted((personal[p] for p in PAGES if p.startswith("eng/")), reverse=True)[:5]
    np.testing.assert_allclose(first.scores[15:], others, rtol=1e-6)
    mixed = rank_pages(opened, pages=["eng/p20"], spaces=["ops"], k=20)
    assert mixed.pages[:15] != first.pages[:15]  # eng/p20, the restart page, ranks among them otherwise
    assert mixed.in_space == 0


def test_bad_combinations_are_refused(store):
    opened, _ = store
    with pytest.raises(ValueError, match="lift"):
        rank_pages(opened, lift=0.5)  # global PageRank lifted by itself says nothing
    with pytest.raises(ValueError, match="space_pages"):
        rank_pages(opened, pages=["ops/p01"], space_pages="first")
    with pytest.raises(ValueError, match="lift must be at least -2"):
        rank_pages(opened, spaces=["ops"], lift=-3)


def test_cli_prints_titles_in_every_format(store, capsys):
    opened, _ = store
    wiki = opened.path
    assert main(["rank", "--wiki", wiki, "-k", "3", "--format", "json"]) == 0
    rows = json.loads(capsys.readouterr().out)
    assert [set(row) for row in rows] == [{"page", "title", "space", "score"}] * 3
    assert all(row["title"] == (_title(row["page"]) or row["page"]) for row in rows)
    assert (
        main(["rank", "--wiki", wiki, "-k", "3", "--space", "ops", "--lift", "0.5", "--format", "csv"]) == 0
    )
    table = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    assert list(table[0]) == ["page", "title", "space", "score", "global", "lifted"]
    assert float(table[0]["lifted"]) == pytest.approx(
        float(table[0]["score"]) / float(table[0]["global"]) ** 0.5, rel=1e-9
    )
    assert main(["rank", "--wiki", wiki, "-k", "2", "--space", "ops", "--space-pages", "only"]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert lines[0].split() == ["page", "title", "space", "score"]
    assert all("Title of P" in line and " ops " in line for line in lines[1:]) and len(lines) == 3


@pytest.mark.parametrize(
    ("extra", "message"),
    [
        (["--lift", "0.5"], "--lift weighs personalised against global PageRank"),
        (["--space-pages", "first"], "--space-pages first needs --space"),
        (["--space", "ops", "--lift", "-3"], "lift must be at least -2"),
        (["-k", "0"], "k must be at least 1"),
    ],
    ids=["lift-without-restart", "space-pages-without-space", "negative-lift", "zero-k"],
)
def test_cli_usage_errors_exit_2(store, capsys, extra, message):
    opened, _ = store
    assert main(["rank", "--wiki", opened.path, *extra]) == 2
    assert message in capsys.readouterr().err

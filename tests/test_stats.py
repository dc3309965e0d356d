"""`rankrec stats`: sizes, graph shape, reading history and the worst unresolved links of a store."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest

from rankrec.sources.records import Origin, PageRecord
from rankrec.stats import wiki_stats
from rankrec.store import Store

DAY = 86_400.0


@pytest.fixture
def store(tmp_path):
    with Store(tmp_path / "wiki.db") as opened:
        with opened.transaction():
            for page, archived, groups in [
                ("a", False, ()),
                ("b", True, ("staff",)),
                ("c", False, ("staff", "hr")),
            ]:
                opened.put_page(
                    PageRecord(page=page, title=page, origin=Origin("t"), archived=archived, groups=groups)
                )
            opened.put_page(PageRecord(page="d", title="d", origin=Origin("t")))
            opened.put_links(
                [("a", "b", 1.0), ("b", "a", 1.0), ("b", "c", 1.0), ("a", "ghost", 1.0), ("c", "ghost", 1.0)]
                + [("c", "void", 1.0), ("d", "void", 1.0), ("d", "nowhere", 1.0)]
            )
            opened.put_views(
                [("ida", "a", 0.0, None), ("ida", "b", DAY, None), ("ida", "ghost", 2 * DAY, None)]
                + [("ove", "a", 3 * DAY, None)]
            )
        yield opened


def test_stats_of_a_small_wiki_counted_by_hand(store):
    # Worked by hand from the fixture: 4 pages, 3 links between them, 5 to missing pages.
    summary = wiki_stats(store, worst=2)
    assert (summary["pages"], summary["links"], summary["unresolved_links"]) == (4, 3, 5)
    assert (summary["archived"], summary["restricted"]) == (1, 2)  # c is in two groups: counted once
    assert (summary["dangling"], summary["largest_scc"]) == (2, 2)  # c, d link only to missing pages; a <-> b
    assert summary["views_of_missing_pages"] == 1
    assert summary["views_per_user"] == {"mean": 2.0, "median": 2.0, "max": 3}
    assert summary["time_span"] == {
        "first": "1970-01-01T00:00:00Z",
        "last": "1970-01-04T00:00:00Z",
        "days": 3.0,
    }
    # put without file and line, the links are named by their source pages' origin ("t")
    assert summary["worst_unresolved_targets"] == [
        {"target": "ghost", "links": 2, "at": "t"},
        {"target": "void", "links": 2, "at": "t"},
    ]
    assert summary["pages_with_most_unresolved"] == [
        {"page": "c", "links": 2, "at": "t"},
        {"page": "d", "links": 2, "at": "t"},
    ]
    assert (summary["links_total"], summary["same_page_links"]) == (8, 0)  # 3 + 5, and none put


def test_largest_strong_component_agrees_with_networkx(tmp_path):
    # Reference library: networkx.strongly_connected_components on the same random graph.
    rng = np.random.default_rng(3)
    edges = {(f"p{s}", f"p{t}") for s, t in rng.integers(0, 60, (150, 2)) if s != t}
    with Store(tmp_path / "random.db") as store:
        with store.transaction():
            for number in range(60):
                store.put_page(PageRecord(page=f"p{number}", title=None, origin=Origin("t")))
            store.put_links([(source, target, 1.0) for source, target in edges])
        summary = wiki_stats(store)
    graph = nx.DiGraph(edges)
    graph.add_nodes_from(f"p{number}" for number in range(60))
    assert summary["largest_scc"] == max(len(part) for part in nx.strongly_connected_components(graph))
    assert summary["dangling"] == sum(1 for node in graph if graph.out_degree(node) == 0)


def test_stats_of_an_empty_store_are_zero(tmp_path):
    with Store(tmp_path / "empty.db") as store:
        summary = wiki_stats(store)
    assert summary["largest_scc"] == summary["archived"] == summary["views_of_missing_pages"] == 0
    assert summary["time_span"] == {"first": None, "last": None, "days": 0.0}
    assert summary["worst_unresolved_targets"] == summary["pages_with_most_unresolved"] == []


def test_text_coverage_counted_by_hand(tmp_path):
    # Worked by hand: 4 present pages, 3 with text of 5 + 6 + 4 UTF-8 bytes ("é" is two, RFC 3629);
    # the missing page "ghost" has no text and is not counted among the present pages.
    with Store(tmp_path / "text.db") as store:
        with store.transaction():
            for page, text in [("a", "alpha"), ("b", "bravo!"), ("c", ""), ("d", "éé")]:
                store.put_page(PageRecord(page=page, title=page, origin=Origin("t"), text=text))
            store.put_links([("a", "ghost", 1.0)])
        summary = wiki_stats(store)
    assert summary["text"] == {"pages": 3, "share": 0.75, "bytes": 15}


def test_chrome_in_stats_names_a_footer_repeated_on_every_page(tmp_path):
    # A generated site with known chrome (common practice for template detection, Bar-Yossef and
    # Rajagopalan 2002: a block repeated at one place on most pages): every page but "home" has a footer
    # link to "home" and content links to two random pages. Stats must find exactly the footer links.
    from rankrec.importer import import_sources

    rng = np.random.default_rng(4)
    folder = tmp_path / "site"
    folder.mkdir()
    names = [f"p{number}" for number in range(30)]
    for name in ["home", *names]:
        content = " ".join(
            f'<a href="{target}.html">{target}</a>' for target in rng.choice(names, 2, replace=False)
        )
        footer = "" if name == "home" else '<div class="foot"><a href="home.html">Home</a></div>'
        (folder / f"{name}.html").write_text(
            f"<html><body><div class='body'><p>Text {content}</p></div>{footer}</body></html>"
        )
    with Store(tmp_path / "site.db") as store:
        import_sources(store, [(folder, "html")])
        summary = wiki_stats(store)
    assert summary["chrome"]["judged"] is True
    assert summary["chrome"]["chrome_occurrences"] == 30  # the 30 footers, no content link
    assert summary["chrome_top_targets"][0] == {"target": "home", "links": 30}
    assert summary["chrome_places"] == [{"place": "div.foot"}]

"""Generated source listings: measured at import (the share of a page's text in code blocks), kept out of
every list by the build unless asked to keep them."""

from __future__ import annotations

from dataclasses import replace

import networkx as nx
import numpy as np
import pytest
from lxml import etree

from rankrec.build import build_from_evidence
from rankrec.configuration import Configuration
from rankrec.derive import LISTING_CODE_SHARE, source_listings
from rankrec.evidence import Evidence
from rankrec.index import load_index
from rankrec.recommend import related
from rankrec.sources import read_source
from rankrec.sources._html_walk import walk
from rankrec.sources.records import PageRecord
from rankrec.stats import wiki_stats
from rankrec.store import Store

_CODE = "\n".join(f"    int value{line} = compute(state, {line});  // step {line}" for line in range(60))
# Shapes of real generated pages (their markup written afresh here): a Javadoc source page (a <pre> in a
# source container), a Doxygen source page (div.fragment of div.line rows), Pygments' div.highlight, and
# a prose page with one short example.
PAGES = {
    "javadoc": f'<html><body class="source-page"><main><div class="source-container"><pre>{_CODE}</pre>'
    "</div></main></body></html>",
    "doxygen": '<html><body><div class="header"><div class="headertitle">session.h</div></div>'
    '<div class="contents"><div class="fragment">'
    + "".join(
        f'<div class="line"><span class="lineno">{n}</span>{row}</div>'
        for n, row in enumerate(_CODE.split("\n"))
    )
    + "</div></div></body></html>",
    "pygments": "<html><body><h1>Source of widgets</h1>"
    f'<div class="highlight"><pre>{_CODE}</pre></div></body></html>',
    "prose": "<html><body><h1>Configuring the widget</h1>"
    + "<p>The widget reads its settings from the service folder when it starts and again on reload.</p>" * 12
    + "<pre>widget --reload</pre><p>Afterwards the status page shows the new values.</p></body></html>",
}


def _share(markup: str) -> float:
    return walk(etree.fromstring(markup, etree.HTMLParser()), set())[3]


def test_code_share_is_the_share_of_visible_characters_inside_code_blocks():
    shares = {name: _share(markup) for name, markup in PAGES.items()}
    assert min(shares["javadoc"], shares["doxygen"], shares["pygments"]) >= LISTING_CODE_SHARE
    assert shares["javadoc"] == 1.0
    assert shares["prose"] < 0.05
    assert _share("<html><body></body></html>") == 0.0
    # counted by hand: "abc d" outside (4 characters), "xyz" in code (3); blanks never count
    assert _share("<html><body><p>abc d</p><pre> x y\nz </pre></body></html>") == pytest.approx(3 / 7)


def test_the_share_is_read_stored_and_counted(tmp_path):
    site = tmp_path / "site"
    site.mkdir()
    for name, markup in PAGES.items():
        (site / f"{name}.html").write_text(markup)
    records = {r.page: r for r in read_source(site, "html") if isinstance(r, PageRecord)}
    assert records["javadoc"].code_share == pytest.approx(_share(PAGES["javadoc"]), abs=1e-4)
    with Store(tmp_path / "wiki.db") as store:
        with store.transaction():
            store.put_pages(list(records.values()))
        shares = store.code_shares()
        counted = wiki_stats(store)["source_listings"]
        order = [
            row[0] for row in store.connection.execute("SELECT page FROM pages WHERE present = 1 ORDER BY id")
        ]
    assert shares.tolist() == pytest.approx([records[page].code_share for page in order])
    assert counted == sum(record.code_share >= LISTING_CODE_SHARE for record in records.values()) == 3


def test_listings_are_kept_out_of_every_list_unless_asked_for(tmp_path):
    # A scale-free graph (networkx's Barabási–Albert model) whose best-linked pages are marked listings.
    graph = nx.barabasi_albert_graph(80, 3, seed=4)
    evidence = Evidence.from_links(nx.to_scipy_sparse_array(graph, format="csr"))
    shares = np.zeros(80)
    listed = np.argsort(-np.bincount(np.asarray(graph.edges()).ravel(), minlength=80))[:5]
    shares[listed] = 0.97
    below = next(page for page in range(80) if page not in set(listed.tolist()))
    shares[below] = LISTING_CODE_SHARE - 0.01  # just below: still a page
    evidence = replace(evidence, code_share=shares)
    assert set(np.flatnonzero(source_listings(evidence)).tolist()) == set(listed.tolist())
    names = {f"p{page}" for page in listed.tolist()}
    kept_out = load_index(build_from_evidence(evidence, tmp_path / "a", Configuration(ranker="none")))
    assert kept_out.manifest.counts["source_listings"] == 5
    let_in = load_index(
        build_from_evidence(evidence, tmp_path / "b", Configuration(ranker="none", skip_listings=False))
    )
    assert let_in.manifest.counts["source_listings"] == 0
    seen_out, seen_in = set(), set()
    for page in range(80):
        if page in set(listed.tolist()):
            continue
        seen_out |= {item.page for item in related(kept_out, f"p{page}", k=10).items}
        seen_in |= {item.page for item in related(let_in, f"p{page}", k=10).items}
    assert not seen_out & names
    assert seen_in & names  # the best-linked pages do come up once allowed: only the rule keeps them out

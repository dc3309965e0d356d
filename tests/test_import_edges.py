"""Rough edges of importing real documentation sites: bad base URLs, links of a page to itself,
root-relative links, broken links named by file and line, folders of both kinds, link counts.

Each test here failed before the edge was smoothed (the behaviour it asserts was then different).
The invented sites belong to the Halvard laboratories (``*.halvard.example``, RFC 2606 names).
"""

from __future__ import annotations

import json
import re
import sqlite3
from pathlib import Path

import pytest

from rankrec.cli import main
from rankrec.errors import InputError, UsageError
from rankrec.evidence import read_evidence
from rankrec.importer import import_sources
from rankrec.sources import check_base_url, detect_format
from rankrec.sources.html import read_html_folder
from rankrec.sources.markdown import read_markdown_folder
from rankrec.sources.records import LinkRecord, PageRecord
from rankrec.stats import wiki_stats
from rankrec.store import Store
from tests.conftest import write_files as write


def stats_json(wiki: Path, capsys) -> dict:
    capsys.readouterr()
    assert main(["stats", "--wiki", str(wiki), "--format", "json"]) == 0
    return json.loads(capsys.readouterr().out)


SITE = {
    "index.html": "<title>Lab handbook</title>\n<a href='ops/db.html'>db</a>\n",
    "ops/db.html": "<title>Database</title>\n<a href='../index.html'>home</a>\n",
}


# ------------------------------------------------------------------ 1. bad base URLs


@pytest.mark.parametrize(
    ("base_url", "why"),
    [
        ("file:///x/", "is a file: URL"),  # RFC 8089: a file URI names a file, not a served address
        ("docs.halvard.example/x", "has no scheme"),  # RFC 3986 section 4.3: absolute-URI = scheme ":" ...
        ("docs.halvard.example:8080/x", "has no scheme"),  # a host and port, not the scheme "docs..."
        ("http:///x", "has no host"),  # RFC 3986 section 3.2: the authority is empty
        ("https://docs.halvard.example/x/?v=2", "must not hold a query"),
    ],
)
def test_bad_base_url_is_a_usage_error_and_no_store_is_made(tmp_path, capsys, base_url, why):
    site = write(tmp_path / "site", SITE)
    wiki = tmp_path / "wiki.db"
    assert main(["import", str(site), "--wiki", str(wiki), "--base-url", base_url]) == 2
    error = capsys.readouterr().err
    assert "--base-url" in error and why in error and "unexpected error" not in error
    assert not wiki.exists()  # checked before the store was opened: no empty store file left behind
    with pytest.raises(UsageError, match="base_url"):  # the library says the same, naming its parameter
        check_base_url(base_url)


def test_bad_base_url_leaves_an_existing_store_as_it_was(tmp_path, capsys):
    site = write(tmp_path / "site", SITE)
    wiki = tmp_path / "wiki.db"
    assert main(["import", str(site), "--wiki", str(wiki)]) == 0
    before = wiki.read_bytes()
    assert main(["import", str(site), "--wiki", str(wiki), "--base-url", "file:///srv/site/"]) == 2
    assert wiki.read_bytes() == before
    with pytest.raises(ValueError):  # UsageError is a ValueError: older callers still catch it
        read_html_folder(site, base_url="file:///srv/site/")


# ------------------------------------------------------------------ 2. same-page links

SAME_PAGE_SITE = {
    # HTML spec, "Navigating to a fragment": "#part" scrolls within the document itself; the page's own
    # file (with a fragment or a query) is the page itself too (RFC 3986 section 4.4: same-document
    # reference when the target equals the base URI apart from the fragment).
    "a.html": "<h2 id='top'>A</h2>\n<a href='#top'>top</a>\n<a href='a.html#part'>part</a>\n"
    "<a href='?print=1'>print</a>\n<a href='b.html'>b</a>\n",
    "b.html": "<a href='b.html'>me</a><a href='a.html'>a</a>\n",
}


def test_same_page_links_are_counted_not_bad_records(tmp_path):
    records = list(read_html_folder(write(tmp_path, SAME_PAGE_SITE)))
    assert not [r for r in records if isinstance(r, InputError)]
    pages = {r.page: r.same_page_links for r in records if isinstance(r, PageRecord)}
    assert pages == {"a": 3, "b": 1}
    assert {(r.source, r.target) for r in records if isinstance(r, LinkRecord)} == {("a", "b"), ("b", "a")}


def test_markdown_same_page_links(tmp_path):
    # CommonMark 0.31.2 section 6.3: "[t](#part)" is a link whose destination is a fragment of this page
    files = {
        "ops/db.md": "# Database\n[top](#top) [self](db.md#x) [[#Backups]] [[Database]] [[ops/db]]\n"
        "[net](net.md)\n",
        "ops/net.md": "# Network\n",
    }
    records = list(read_markdown_folder(write(tmp_path, files)))
    assert not [r for r in records if isinstance(r, InputError)]
    same = {r.page: r.same_page_links for r in records if isinstance(r, PageRecord)}
    assert same == {"ops/db": 5, "ops/net": 0}
    assert [(r.source, r.target) for r in records if isinstance(r, LinkRecord)] == [("ops/db", "ops/net")]


def test_strict_accepts_a_site_whose_only_oddity_is_same_page_links(tmp_path, capsys):
    site = write(tmp_path / "site", SAME_PAGE_SITE)
    wiki = tmp_path / "wiki.db"
    assert main(["import", str(site), "--wiki", str(wiki), "--strict"]) == 0
    captured = capsys.readouterr()
    assert "4 same-page links" in captured.out and "bad record" not in captured.out + captured.err
    summary = stats_json(wiki, capsys)
    assert (summary["same_page_links"], summary["links"]) == (4, 2)


# ------------------------------------------------------------------ 3. root-relative links

ROOTED = {
    "wiki/index.html": "<a href='/wiki/ops/db.html'>db</a>\n<a href='/elsewhere/x.html'>away</a>\n"
    "<a href='/wiki/ops/'>ops</a>\n",
    "wiki/ops/db.html": "<a href='/wiki/index.html'>home</a>\n",
    "wiki/ops/index.html": "<title>Ops</title>\n",
}


def test_root_relative_links_resolve_against_the_base_url(tmp_path):
    # RFC 3986 section 5.2.2: a reference starting "/" keeps the base's scheme and authority and
    # replaces its whole path; section 5.4.1: "/g" against "http://a/b/c/d;p?q" is "http://a/g".
    folder = write(tmp_path, ROOTED) / "wiki"
    records = list(read_html_folder(folder, base_url="http://intranet.halvard.example/wiki/"))
    links = {(r.source, r.target) for r in records if isinstance(r, LinkRecord)}
    assert links == {("index", "ops/db"), ("index", "ops/index"), ("ops/db", "index")}
    pages = {r.page: r for r in records if isinstance(r, PageRecord)}
    assert pages["index"].external_links == 1  # /elsewhere/x.html lies outside the site


def test_root_relative_links_without_base_url_are_summed_up_once(tmp_path, capsys):
    folder = write(tmp_path, ROOTED) / "wiki"
    wiki = tmp_path / "wiki.db"
    assert main(["import", str(folder), "--wiki", str(wiki), "--strict"]) == 0
    captured = capsys.readouterr()
    notes = [line for line in captured.out.splitlines() if "root-relative" in line]
    assert len(notes) == 1 and "4 root-relative links" in notes[0] and "--base-url" in notes[0]
    assert "/wiki/" not in captured.err  # no link reported one by one
    summary = stats_json(wiki, capsys)
    assert (summary["links"], summary["unresolved_links"]) == (0, 0)  # not guessed to be pages


# ------------------------------------------------------------------ 4. broken links by file:line


def test_stats_names_the_file_and_line_of_each_broken_link(tmp_path, capsys):
    folder = write(
        tmp_path / "wiki",
        {
            "ops/db.md": "# Database\n\nSee [the plan](plan.md).\n\n[again](plan.md) and [old](gone.md).\n",
            "ops/net.md": "# Network\n\n\n[plan](plan.md)\n",
        },
    )
    wiki = tmp_path / "wiki.db"
    assert main(["import", str(folder), "--wiki", str(wiki)]) == 0
    summary = stats_json(wiki, capsys)
    db, net = folder / "ops" / "db.md", folder / "ops" / "net.md"
    assert summary["worst_unresolved_targets"] == [
        {"target": "ops/plan", "links": 2, "at": f"{db}:3, {net}:4"},  # a page's first link to it
        {"target": "ops/gone", "links": 1, "at": f"{db}:5"},
    ]
    assert summary["pages_with_most_unresolved"][0] == {"page": "ops/db", "links": 2, "at": f"{db}:3, {db}:5"}
    assert main(["stats", "--wiki", str(wiki)]) == 0
    assert f"ops/plan  2  {db}:3, {net}:4" in capsys.readouterr().out


# The tables of a version 1 store as that version made them (a row per link, before files and lines
# were kept; the text tables came later still).
_VERSION_1 = """
CREATE TABLE meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE pages (id INTEGER PRIMARY KEY, page TEXT NOT NULL UNIQUE, title TEXT, space TEXT, url TEXT,
    archived INTEGER NOT NULL DEFAULT 0, present INTEGER NOT NULL DEFAULT 0,
    external_links INTEGER NOT NULL DEFAULT 0, origin TEXT);
CREATE TABLE page_tags (page_id INTEGER NOT NULL REFERENCES pages(id), tag TEXT NOT NULL,
    PRIMARY KEY (page_id, tag)) WITHOUT ROWID;
CREATE TABLE page_groups (page_id INTEGER NOT NULL REFERENCES pages(id), name TEXT NOT NULL,
    PRIMARY KEY (page_id, name)) WITHOUT ROWID;
CREATE TABLE links (source_id INTEGER NOT NULL REFERENCES pages(id),
    target_id INTEGER NOT NULL REFERENCES pages(id), weight REAL NOT NULL DEFAULT 1.0,
    PRIMARY KEY (source_id, target_id)) WITHOUT ROWID;
CREATE INDEX links_by_target ON links (target_id);
CREATE TABLE users (id INTEGER PRIMARY KEY, user TEXT NOT NULL UNIQUE);
CREATE TABLE views (user_id INTEGER NOT NULL REFERENCES users(id),
    page_id INTEGER NOT NULL REFERENCES pages(id), timestamp REAL NOT NULL, dwell REAL,
    PRIMARY KEY (user_id, page_id, timestamp)) WITHOUT ROWID;
CREATE INDEX views_by_time ON views (timestamp);
CREATE TABLE memberships (kind TEXT NOT NULL CHECK (kind IN ('team', 'group')), name TEXT NOT NULL,
    user_id INTEGER NOT NULL REFERENCES users(id), PRIMARY KEY (kind, name, user_id)) WITHOUT ROWID;
CREATE TABLE imports (id INTEGER PRIMARY KEY, source TEXT NOT NULL, format TEXT NOT NULL,
    records INTEGER NOT NULL, errors INTEGER NOT NULL,
    imported_at TEXT NOT NULL DEFAULT '2026-01-01T00:00:00Z');
INSERT INTO meta (key, value) VALUES ('schema_version', '1');
INSERT INTO pages (id, page, title, present, origin) VALUES (1, 'a', 'A', 1, 'a.md');
INSERT INTO pages (id, page, present) VALUES (2, 'ghost', 0);
INSERT INTO pages (id, page, title, present, origin) VALUES (3, 'c', 'C', 1, 'c.md');
INSERT INTO links (source_id, target_id, weight) VALUES (1, 2, 1.0), (3, 1, 2.5), (1, 3, 1.0);
"""


def _old_store(path: Path) -> None:
    """A store of version 1 (see _VERSION_1), never written by this rankrec."""
    with sqlite3.connect(path) as connection:
        connection.executescript(_VERSION_1)


def test_a_version_1_store_still_reads_and_is_converted_by_its_first_write(tmp_path):
    # A store of schema version 1 (a row per link, before files and lines) is read as it is, and its first
    # write transaction moves its links into blocks (version 2): the same links, weights and all.
    wiki = tmp_path / "old.db"
    _old_store(wiki)
    with Store(wiki, create=False) as store:
        summary = wiki_stats(store)
        before = store.link_rows()
    assert before == [("a", "ghost", 1.0), ("a", "c", 1.0), ("c", "a", 2.5)]  # source, then target row order
    with Store(wiki, create=False) as store:
        assert store.stored_link_count() == 3 and store.counts()["links"] == 2  # one link to a missing page
    assert summary["worst_unresolved_targets"] == [{"target": "ghost", "links": 1, "at": "a.md"}]
    assert summary["same_page_links"] == 0
    folder = write(tmp_path / "wiki", {"b.md": "# B\n\n[ghost](ghost.md) [me](#b)\n"})
    with Store(wiki) as store:
        import_sources(store, [(folder, "markdown")])
        summary = wiki_stats(store)
        assert store.scalar("SELECT value FROM meta WHERE key = 'schema_version'") == "2"
        assert store.scalar("SELECT count(*) FROM sqlite_master WHERE name = 'links'") == 0
        assert [row for row in store.link_rows() if row[0] != "b"] == before
    assert summary["worst_unresolved_targets"] == [
        {
            "target": "ghost",
            "links": 2,
            "at": f"{folder / 'b.md'}:3, a.md",  # by file: the new link's file and line, the old one's page
        }
    ]
    assert summary["same_page_links"] == 1


# ------------------------------------------------------------------ 5. folders of both kinds


def test_auto_format_refuses_a_folder_of_both_kinds(tmp_path, capsys):
    folder = write(tmp_path / "site", {"guide.md": "# Guide\n", "api/index.html": "<title>API</title>\n"})
    wiki = tmp_path / "wiki.db"
    assert main(["import", str(folder), "--wiki", str(wiki)]) == 2
    error = capsys.readouterr().err
    assert "--format markdown" in error and "--format html" in error and "guide.md" in error
    assert not wiki.exists()
    with pytest.raises(UsageError):
        detect_format(folder)
    assert main(["import", str(folder), "--wiki", str(wiki), "--format", "html"]) == 0
    assert stats_json(wiki, capsys)["pages"] == 1


def test_hidden_files_do_not_make_a_folder_mixed(tmp_path):
    # the readers skip hidden files and folders (formats contract), so detection does too
    folder = write(tmp_path, {"index.html": "<title>x</title>", ".github/README.md": "# hidden\n"})
    assert detect_format(folder) == "html"


# ------------------------------------------------------------------ 6. one link count, explained


def test_import_summary_and_stats_agree_on_the_link_counts(tmp_path, capsys):
    folder = write(
        tmp_path / "wiki",
        {
            "a.md": "# A\n[b](b.md) [b again](b.md#x) [me](a.md) [missing](nowhere.md)\n",
            "b.md": "# B\n[a](a.md)\n",
        },
    )
    wiki = tmp_path / "wiki.db"
    assert main(["import", str(folder), "--wiki", str(wiki)]) == 0
    out = capsys.readouterr().out
    read = int(re.search(r"\): ([\d,]+) links", out).group(1))
    held = re.search(r"holds 2 pages and (\d+) links: (\d+) between its pages .* and (\d+) to pages", out)
    summary = stats_json(wiki, capsys)
    # a -> b (twice: one link), a -> nowhere, b -> a; a -> a is a same-page link, not counted
    assert read == summary["links_total"] == 3
    assert tuple(map(int, held.groups())) == (
        summary["links_total"],
        summary["links"],
        summary["unresolved_links"],
    )
    assert (summary["links"], summary["unresolved_links"], summary["same_page_links"]) == (2, 1, 1)


# ------------------------------------------------------------------ --exclude adds to the defaults


def test_exclude_adds_to_the_default_chrome_selector(tmp_path, capsys):
    # CSS Selectors Level 3 (W3C): "nav" is a type selector and ".side" a class selector; the default
    # selector keeps its elements out, and a selector given on the command line leaves out more
    site = write(
        tmp_path / "site",
        {
            "a.html": "<title>A</title><nav><a href='b.html'>b</a></nav>"
            "<div class='side'><a href='c.html'>c</a></div><p><a href='d.html'>d</a></p>",
            "b.html": "<title>B</title>",
            "c.html": "<title>C</title>",
            "d.html": "<title>D</title>",
        },
    )
    targets = {}
    for name, extra in (("plain", []), ("more", ["--exclude", ".side"])):
        wiki = tmp_path / f"{name}.db"
        assert main(["import", str(site), "--wiki", str(wiki), "--format", "html", *extra]) == 0
        with Store(wiki, create=False) as store:
            graph = read_evidence(store).graph
        pages = graph.pages.tolist()
        targets[name] = sorted(pages[column] for column in graph.adjacency[[pages.index("a")]].indices)
    assert targets == {"plain": ["c", "d"], "more": ["d"]}

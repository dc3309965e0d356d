"""URL and path resolution shared by the folder readers."""

from __future__ import annotations

import os
import threading
from collections import Counter
from urllib.parse import urljoin

import pytest

from rankrec.errors import InputError
from rankrec.sources import ALIASES, read_source
from rankrec.sources._links import (
    EXTERNAL,
    JUMP,
    NOT_A_PAGE,
    OUTSIDE,
    PAGE,
    folder_pages,
    page_id_for_path,
    relative_link_target,
    remove_dot_segments,
    resolve_reference,
    url_link_target,
    walk_folder,
)
from rankrec.sources.records import LinkRecord, PageRecord

RFC3986_BASE = "http://a/b/c/d;p?q"

# RFC 3986 section 5.4.1 "Normal Examples", every row, base "http://a/b/c/d;p?q".
RFC3986_NORMAL = [
    ("g:h", "g:h"),
    ("g", "http://a/b/c/g"),
    ("./g", "http://a/b/c/g"),
    ("g/", "http://a/b/c/g/"),
    ("/g", "http://a/g"),
    ("//g", "http://g"),
    ("?y", "http://a/b/c/d;p?y"),
    ("g?y", "http://a/b/c/g?y"),
    ("#s", "http://a/b/c/d;p?q#s"),
    ("g#s", "http://a/b/c/g#s"),
    ("g?y#s", "http://a/b/c/g?y#s"),
    (";x", "http://a/b/c/;x"),
    ("g;x", "http://a/b/c/g;x"),
    ("g;x?y#s", "http://a/b/c/g;x?y#s"),
    ("", "http://a/b/c/d;p?q"),
    (".", "http://a/b/c/"),
    ("./", "http://a/b/c/"),
    ("..", "http://a/b/"),
    ("../", "http://a/b/"),
    ("../g", "http://a/b/g"),
    ("../..", "http://a/"),
    ("../../", "http://a/"),
    ("../../g", "http://a/g"),
]

# RFC 3986 section 5.4.2 "Abnormal Examples", every row (strict parser for "http:g").
RFC3986_ABNORMAL = [
    ("../../../g", "http://a/g"),
    ("../../../../g", "http://a/g"),
    ("/./g", "http://a/g"),
    ("/../g", "http://a/g"),
    ("g.", "http://a/b/c/g."),
    (".g", "http://a/b/c/.g"),
    ("g..", "http://a/b/c/g.."),
    ("..g", "http://a/b/c/..g"),
    ("./../g", "http://a/b/g"),
    ("./g/.", "http://a/b/c/g/"),
    ("g/./h", "http://a/b/c/g/h"),
    ("g/../h", "http://a/b/c/h"),
    ("g;x=1/./y", "http://a/b/c/g;x=1/y"),
    ("g;x=1/../y", "http://a/b/c/y"),
    ("g?y/./x", "http://a/b/c/g?y/./x"),
    ("g?y/../x", "http://a/b/c/g?y/../x"),
    ("g#s/./x", "http://a/b/c/g#s/./x"),
    ("g#s/../x", "http://a/b/c/g#s/../x"),
    ("http:g", "http:g"),
]


@pytest.mark.parametrize(("reference", "expected"), RFC3986_NORMAL + RFC3986_ABNORMAL)
def test_resolve_reference_matches_rfc3986_section_5_4(reference, expected):
    # RFC 3986 section 5.4 (normal and abnormal examples)
    assert resolve_reference(RFC3986_BASE, reference) == expected


def test_urljoin_deviates_from_rfc3986_only_on_http_g():
    # RFC 3986 section 5.4.2: "http:g" is "http:g" for strict parsers; urljoin takes the
    # backward-compatible reading. This is the one row resolve_reference fixes.
    wrong = [
        ref for ref, expected in RFC3986_NORMAL + RFC3986_ABNORMAL if urljoin(RFC3986_BASE, ref) != expected
    ]
    assert wrong == ["http:g"]


@pytest.mark.parametrize(
    ("path", "expected"),
    [
        ("/a/b/c/./../../g", "/a/g"),  # RFC 3986 section 5.2.4, first worked example
        ("mid/content=5/../6", "mid/6"),  # RFC 3986 section 5.2.4, second worked example
        ("/../../x", "/x"),  # RFC 3986 section 5.2.4 step 2C: ".." at the root stays at the root
    ],
)
def test_remove_dot_segments_rfc3986_examples(path, expected):
    assert remove_dot_segments(path) == expected


@pytest.mark.parametrize(
    ("page", "href", "expected"),
    [
        # formats.md section 1 (project contract): relative to the linking page's folder
        ("ops/runbooks/db", "../x.md", (PAGE, "ops/x")),
        ("ops/runbooks/db", "./y", (PAGE, "ops/runbooks/y")),
        ("ops/runbooks/db", "/root/z.md", (PAGE, "root/z")),  # "/x" against the wiki root
        ("ops/runbooks/db", "dir/", (PAGE, "ops/runbooks/dir/index")),  # "<path>index"
        ("ops/runbooks/db", "./", (PAGE, "ops/runbooks/index")),
        ("ops/runbooks/db", "..", (PAGE, "ops/index")),  # RFC 3986 5.4.1: ".." names a folder
        ("ops/db", "caf%C3%A9%20menu.md", (PAGE, "ops/café menu")),  # RFC 3986 2.1 percent-decoding
        ("ops/db", "x.md?rev=3#part", (PAGE, "ops/x")),  # query and fragment dropped
        ("ops/db", "x.markdown", (PAGE, "ops/x")),
        ("ops/db", "x.HTML", (PAGE, "ops/x")),
        ("ops/db", "notes.v2", (PAGE, "ops/notes.v2")),  # only page extensions are removed
        ("ops/db", "?rev=2", (PAGE, "ops/db")),  # RFC 3986 5.4.1 "?y": the same document
        ("ops/db", "#top", (JUMP, "#top")),  # a bare fragment is an in-page jump
        ("ops/db", "", (JUMP, "")),
        ("ops/db", "javascript:void(0)", (JUMP, "javascript:void(0)")),
        ("ops/db", "https://halvard.example/x", (EXTERNAL, "https://halvard.example/x")),
        ("ops/db", "mailto:lab@halvard.example", (EXTERNAL, "mailto:lab@halvard.example")),
        ("ops/db", "//cdn.halvard.example/x.md", (EXTERNAL, "//cdn.halvard.example/x.md")),  # RFC 3986 4.2
        ("ops/db", "../../x.md", (OUTSIDE, "../../x.md")),
        ("ops/db", "%2E%2E/%2E%2E/x.md", (OUTSIDE, "%2E%2E/%2E%2E/x.md")),  # RFC 3986 6.2.2.2
        ("top", "../x.md", (OUTSIDE, "../x.md")),
    ],
)
def test_relative_link_target(page, href, expected):
    assert relative_link_target(page, href) == expected


def test_relative_link_to_another_file_of_the_folder_is_not_a_page():
    assert relative_link_target("ops/db", "img/plot.png", {"ops/img/plot.png"}) == (
        NOT_A_PAGE,
        "ops/img/plot.png",
    )
    assert relative_link_target("ops/db", "img/plot.png", set()) == (PAGE, "ops/img/plot.png")


@pytest.mark.parametrize(
    ("url", "base", "expected"),
    [
        ("http://wiki.invalid/ops/db.html", "http://wiki.invalid/", (PAGE, "ops/db")),
        ("HTTP://Wiki.Invalid:80/ops/db.htm", "http://wiki.invalid/", (PAGE, "ops/db")),  # RFC 3986 6.2.3
        ("http://wiki.invalid/a%20b.html?x#y", "http://wiki.invalid/", (PAGE, "a b")),
        ("http://wiki.invalid/ops/", "http://wiki.invalid/", (PAGE, "ops/index")),
        ("http://wiki.invalid", "http://wiki.invalid/", (PAGE, "index")),
        (
            "http://other.invalid/ops/db.html",
            "http://wiki.invalid/",
            (EXTERNAL, "http://other.invalid/ops/db.html"),
        ),
        (
            "http://h.invalid/static/x.html",
            "http://h.invalid/wiki/",
            (EXTERNAL, "http://h.invalid/static/x.html"),
        ),
        ("http://h.invalid/wiki/x.html", "http://h.invalid/wiki/", (PAGE, "x")),
        ("ftp://wiki.invalid/x.html", "http://wiki.invalid/", (EXTERNAL, "ftp://wiki.invalid/x.html")),
    ],
)
def test_url_link_target(url, base, expected):
    assert url_link_target(url, base) == expected


def test_page_id_for_path():
    # formats.md sections 1 and 2 (project contract): relative path without the extension
    assert page_id_for_path("ops/runbooks/db.md") == "ops/runbooks/db"
    assert page_id_for_path("a.b.markdown") == "a.b"
    assert page_id_for_path("") == "index"
    assert page_id_for_path("x/.md") == "x/.md"  # a bare extension is a name, not a suffix


# ------------------------------------------------------------------- walking a wiki folder
# What a crafted folder may hold (POSIX file types; symbolic links resolved as realpath(3)
# does): a link to a file outside the folder (CWE-59, "link following"), a link to a device,
# a FIFO, a link loop. Only regular files inside the folder are pages.


def pages_and_errors(folder):
    _files, entries = folder_pages(folder, (".md",), "Markdown")
    done: list = []
    thread = threading.Thread(target=lambda: done.append(list(entries)), daemon=True)
    thread.start()
    thread.join(10)
    assert done, "walking the folder blocked"
    pages = [entry[0] for entry in done[0] if not isinstance(entry, InputError)]
    errors = {os.path.basename(e.file): e.reason for e in done[0] if isinstance(e, InputError)}
    return pages, errors


def wiki_with_outside(tmp_path):
    outside = tmp_path / "outside"
    outside.mkdir()
    (outside / "secret.md").write_text("root:x:0:0:root:/root:/bin/sh\n")
    wiki = tmp_path / "wiki"
    (wiki / "sub").mkdir(parents=True)
    (wiki / "a.md").write_text("# A\n")
    (wiki / "sub" / "b.md").write_text("# B\n")
    return wiki, outside


posix_only = pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="FIFOs and symbolic links are POSIX")


@posix_only
def test_a_link_leaving_the_folder_is_refused_with_its_reason(tmp_path):
    wiki, outside = wiki_with_outside(tmp_path)
    (wiki / "leak.md").symlink_to(outside / "secret.md")
    (wiki / "relative.md").symlink_to("../outside/secret.md")
    (wiki / "chain.md").symlink_to(wiki / "sub" / "hop.md")  # a link inside to a link outside
    (wiki / "sub" / "hop.md").symlink_to(outside / "secret.md")
    pages, errors = pages_and_errors(wiki)
    assert pages == ["a.md", "sub/b.md"]
    for name in ("leak.md", "relative.md", "chain.md", "hop.md"):
        assert errors[name].startswith("symbolic link leads outside the wiki folder"), name
        assert errors[name].endswith("; file skipped")


@posix_only
@pytest.mark.skipif(not os.path.exists("/etc/passwd"), reason="needs /etc/passwd")
def test_a_link_to_a_system_file_is_refused(tmp_path):
    # The probe's case: a page that is a link to the system's password file was imported.
    wiki, _outside = wiki_with_outside(tmp_path)
    (wiki / "passwd.md").symlink_to("/etc/passwd")
    pages, errors = pages_and_errors(wiki)
    assert "passwd.md" not in pages
    assert errors["passwd.md"] == "symbolic link leads outside the wiki folder (to /etc/passwd); file skipped"


@posix_only
def test_links_inside_the_folder_are_followed_and_folder_links_cannot_loop(tmp_path):
    wiki, outside = wiki_with_outside(tmp_path)
    (wiki / "alias.md").symlink_to("sub/b.md")
    (wiki / "sub" / "loop").symlink_to(wiki, target_is_directory=True)  # a loop back to the root
    (wiki / "away").symlink_to(outside, target_is_directory=True)  # a folder outside
    pages, errors = pages_and_errors(wiki)
    assert pages == ["a.md", "sub/b.md"]  # neither folder link is walked into; alias.md is sub/b's alias
    assert errors == {}
    assert walk_folder(wiki, (".md",)).aliases == {"alias": "sub/b"}


@posix_only
def test_a_link_to_a_page_file_is_an_alias_and_links_to_it_reach_that_page(tmp_path):
    # Generated HTML sites link index.html to their contents page (Debian's git-doc: index.html ->
    # git.html); read as two pages of one text, each would top the other's related list.
    site = tmp_path / "site"
    (site / ".hidden").mkdir(parents=True)
    (site / "main.html").write_text('<html><title>Main</title><a href="guide.html">guide</a></html>')
    (site / "guide.html").write_text('<html><title>Guide</title><a href="index.html">home</a></html>')
    (site / "index.html").symlink_to("main.html")
    (site / ".hidden" / "note.html").write_text("<html><title>Note</title></html>")
    (site / "note.html").symlink_to(".hidden/note.html")  # leads to no listed page file: a page of its own
    tally = Counter()
    records = [r for r in read_source(site, "html", tally=tally) if not isinstance(r, InputError)]
    pages = sorted(r.page for r in records if isinstance(r, PageRecord))
    links = sorted((r.source, r.target) for r in records if isinstance(r, LinkRecord))
    assert pages == ["guide", "main", "note"]
    assert links == [("guide", "main"), ("main", "guide")]
    assert tally[ALIASES] == 1


@posix_only
def test_a_fifo_a_device_link_and_a_broken_link_are_refused_and_the_rest_is_read(tmp_path):
    wiki, _outside = wiki_with_outside(tmp_path)
    os.mkfifo(wiki / "p.md")
    (wiki / "broken.md").symlink_to(wiki / "nowhere.md")
    (wiki / "self.md").symlink_to(wiki / "self.md")  # a link to itself: ELOOP
    if os.path.exists("/dev/zero"):
        (wiki / "zero.md").symlink_to("/dev/zero")
    pages, errors = pages_and_errors(wiki)
    assert pages == ["a.md", "sub/b.md"]
    assert errors["p.md"] == (
        "not a regular file but a FIFO (named pipe); only regular files are read; file skipped"
    )
    assert errors["broken.md"].startswith("cannot open: No such file")
    assert errors["self.md"].startswith("cannot open:")
    if os.path.exists("/dev/zero"):
        assert "leads outside the wiki folder (to /dev/zero)" in errors["zero.md"]


def test_only_page_files_are_checked(tmp_path):
    # A FIFO that is not a page file is only a name of the folder (a link may point at it).
    (tmp_path / "a.md").write_text("# A\n")
    if hasattr(os, "mkfifo"):
        os.mkfifo(tmp_path / "pipe.bin")
    files, entries = folder_pages(tmp_path, (".md",), "Markdown")
    assert [entry[0] for entry in entries] == ["a.md"]
    assert files.refused == [] and files.others == ({"pipe.bin"} if hasattr(os, "mkfifo") else set())

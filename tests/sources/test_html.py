"""Reader for an HTML folder: titles, <base href>, the exclude selector, RFC 3986 resolution."""

from __future__ import annotations

import random
import tempfile
from html.parser import HTMLParser
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rankrec.errors import InputError
from rankrec.sources.html import read_html_folder
from rankrec.sources.records import LinkRecord, PageRecord
from tests.conftest import write_files

from .test_links import RFC3986_ABNORMAL, RFC3986_NORMAL


def read(folder: Path, files: dict[str, str | bytes], **options) -> list:
    return list(read_html_folder(write_files(folder, files), **options))


def pages(records) -> dict[str, PageRecord]:
    return {r.page: r for r in records if isinstance(r, PageRecord)}


def targets(records) -> list[str]:
    return [r.target for r in records if isinstance(r, LinkRecord)]


def test_title_rules(tmp_path):
    # formats.md section 2 (project contract): <title>, else first <h1>, else file stem
    found = pages(
        read(
            tmp_path,
            {
                "a.html": "<html><head><title>\n  Bench   calibration </title></head><body><h1>No</h1>",
                "b.htm": "<body><h1>First <em>heading</em></h1><h1>Second</h1>",
                "c/d.html": "<body><title></title><p>nothing</p>",
            },
        )
    )
    assert {page: record.title for page, record in found.items()} == {
        "a": "Bench calibration",
        "b": "First heading",
        "c/d": "d",
    }
    assert found["c/d"].url == "http://wiki.invalid/c/d.html" and found["c/d"].space == "c"


def test_links_resolve_against_page_url_and_base_href(tmp_path):
    # RFC 3986 section 5.1: the base URI is <base href> (HTML "base" element), else the document URL
    records = read(
        tmp_path,
        {
            "ops/db.html": '<a href="../lab/probe.html">p</a>\n<a href="/ops/net.htm?x=1#y">n</a>\n'
            '<a href="http://wiki.invalid/ops/">i</a>\n<a href="#top">t</a><a href="">e</a>\n'
            '<a href="https://other.example/ops/db.html">o</a><a href="mailto:lab@halvard.example">m</a>'
            '<a href="javascript:void(0)">j</a>',
            "based/page.html": '<head><base href="../ops/runbooks/"></head><a href="x.html">x</a>'
            '<a href="../db.html#s">db</a>',
            "away.html": '<base href="https://elsewhere.example/"><a href="x.html">x</a>',
        },
        base_url="http://wiki.invalid/",  # given, so "/ops/net.htm" has a site root to resolve against
    )
    links = {(r.source, r.target, r.origin.line) for r in records if isinstance(r, LinkRecord)}
    assert links == {
        ("ops/db", "lab/probe", 1),
        ("ops/db", "ops/net", 2),
        ("ops/db", "ops/index", 3),
        ("based/page", "ops/runbooks/x", 1),
        ("based/page", "ops/db", 1),
    }
    found = pages(records)
    assert (
        found["ops/db"].external_links,
        found["away"].external_links,
        found["based/page"].external_links,
    ) == (
        2,
        1,
        0,  # other host + mailto (a script and jumps are not counted); base elsewhere: external
    )


def test_base_url_with_path_maps_only_urls_under_it(tmp_path):
    records = read(
        tmp_path,
        {"a.html": '<a href="b.html">b</a><a href="/static/c.html">c</a><a href="/wiki/d/e.html">e</a>'},
        base_url="http://intranet.halvard.example/wiki",
    )
    assert targets(records) == ["b", "d/e"]
    assert pages(records)["a"].external_links == 1
    assert pages(records)["a"].url == "http://intranet.halvard.example/wiki/a.html"


def test_exclude_selector(tmp_path):
    # CSS Selectors Level 3 (W3C): type selectors, attribute selector [role=navigation], grouping
    html = (
        "<header><h1>Title</h1><a href='h.html'>h</a></header><nav><a href='n.html'>n</a></nav>"
        "<div role='navigation'><a href='r.html'>r</a></div><main><a href='m.html'>m</a>"
        "<aside class='related'><a href='s.html'>s</a></aside></main><footer><a href='f.html'>f</a></footer>"
    )
    assert targets(read(tmp_path / "default", {"p.html": html})) == ["m", "s"]
    assert pages(read(tmp_path / "title", {"p.html": html}))["p"].title == "Title"  # h1 in <header> counts
    assert targets(read(tmp_path / "custom", {"p.html": html}, exclude="aside.related, nav")) == [
        "h",
        "r",
        "m",
        "f",
    ]
    assert targets(read(tmp_path / "none", {"p.html": html}, exclude="")) == ["h", "n", "r", "m", "s", "f"]


def test_rfc3986_examples_through_the_reader(tmp_path):
    # RFC 3986 section 5.4 (all examples) with <base href="http://a/b/c/d;p?q"> and the wiki at http://a/
    anchors = "\n".join(f'<a href="{ref}">x</a>' for ref, _ in RFC3986_NORMAL + RFC3986_ABNORMAL)
    records = read(
        tmp_path, {"page.html": '<base href="http://a/b/c/d;p?q">\n' + anchors}, base_url="http://a/"
    )
    expected = set()
    external = set()
    for ref, url in RFC3986_NORMAL + RFC3986_ABNORMAL:
        if ref.startswith("#"):
            continue  # a bare fragment is an in-page jump
        if url.startswith("http://a/"):
            path = url[len("http://a/") :].split("#")[0].split("?")[0]
            expected.add(path + "index" if path == "" or path.endswith("/") else path)
        else:
            external.add(url.split("#")[0])
    assert set(targets(records)) == expected
    assert pages(records)["page"].external_links == len(external)  # g:h, http://g, http:g


def test_duplicates_self_links_and_order(tmp_path):
    records = read(
        tmp_path,
        {
            "a.html": "<a href='b.html'>1</a>\n<a href='b.html#x'>2</a>\n<a href='a.html#part'>me</a>\n"
            "<a href='?view=print'>print</a><a href='#top'>jump</a>",
            "b.html": "<a href='a.html'>back</a>",
            "x.htm": "<a href='b.html'>first of id x</a>",
            "x.html": "<a href='a.html'>second of id x</a>",
        },
    )
    kinds = [type(r).__name__ for r in records if not isinstance(r, InputError)]
    assert kinds == ["PageRecord"] * 3 + ["LinkRecord"] * 3
    links = [(r.source, r.target, r.origin.line) for r in records if isinstance(r, LinkRecord)]
    assert links == [("a", "b", 1), ("b", "a", 1), ("x", "b", 1)]
    errors = sorted(str(e) for e in records if isinstance(e, InputError))
    assert len(errors) == 1  # links home are counted, not bad records: a.html#part, ?view=print, #top
    assert pages(records)["a"].same_page_links == 3
    assert "x.html" in errors[0] and "already taken" in errors[0] and "x.htm;" in errors[0]


def test_encodings(tmp_path):
    # WHATWG Encoding / HTML: a <meta charset> declaration and a byte-order mark decide the encoding
    records = read(
        tmp_path,
        {
            "latin.html": '<meta charset="iso-8859-1"><title>Caf\xe9</title>'.encode("latin-1"),
            "bom.html": "\ufeff<title>Gr\xfc\xdfe</title>".encode("utf-16-le"),
            "messy.html": b"<title>x</title><a href='b.html'><div></span></p><a href=><p>\xff\xfe\x00",
        },
    )
    titles = {page: record.title for page, record in pages(records).items()}
    assert titles == {"latin": "Café", "bom": "Grüße", "messy": "x"}
    strict = read(
        tmp_path / "given", {"w.html": "<title>Caf\xe9</title>".encode("latin-1")}, encoding="utf-8"
    )
    assert [(type(r).__name__, r.line) for r in strict] == [("InputError", 1)]  # undecodable, line 1


def test_bad_arguments_are_refused_eagerly():
    with pytest.raises(ValueError, match="base_url"):
        read_html_folder(".", base_url="wiki.invalid/")
    with pytest.raises(ValueError, match="exclude"):
        read_html_folder(".", exclude="nav[")
    with pytest.raises(ValueError, match="'no-such-codec'"):
        read_html_folder(".", encoding="no-such-codec")


def test_missing_folder(tmp_path):
    (error,) = list(read_html_folder(tmp_path / "nope"))
    assert isinstance(error, InputError) and "does not exist" in error.reason


_PIECES = [
    "<a href='",
    "'>",
    "</a>",
    "<base href='",
    "<nav>",
    "</nav>",
    "<title>",
    "<h1>",
    "<!--",
    "-->",
    "<![CDATA[",
    "]]>",
    "<!",
    "&",
    "#",
    "../",
    "http://",
    "x.html",
    " ",
    "\n",
    '"',
    "<",
    ">",
    "é",
]
_HTMLISH = st.lists(st.sampled_from(_PIECES), max_size=60).map("".join)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(content=st.one_of(_HTMLISH, st.text(), st.binary()))
def test_any_file_content_gives_records_or_input_errors(content):
    with tempfile.TemporaryDirectory() as folder:
        records = read(
            Path(folder), {"sub/page.html": content, "other.html": "<a href='sub/page.html'>p</a>"}
        )
    assert records and all(isinstance(r, PageRecord | LinkRecord | InputError) for r in records)


# ------------------------------------------------------------------ page text and link places

_PAGE = """<!DOCTYPE html>
<html><head><title>Disk  quotas</title><style>p { color: red }</style>
<script>var secret = "script text";</script></head>
<body>
<nav><a href="index.html">Home</a> navigation text</nav>
<div class="document"><div class="body" id="main">
<h1>Disk <em>quotas</em></h1>
<p>Each team gets <a href="db.html">space</a> on
   <strong><a href="disk.html">disks</a></strong>.</p>
<!-- a comment -->
<noscript>Enable scripts</noscript><template><p>template text</p></template>
<h2>See also</h2>
<div class="related  b-side a-side"><ul><li><a href="db.html">Database</a></li>
<li><span><a href="net.html">Network</a></span></li></ul></div>
</div></div>
<div class="footer"><p><a href="license.html">License</a> &copy; 2024</p></div>
<a href="top.html">top</a>
</body></html>
"""


def test_text_and_headings_of_a_small_page(tmp_path):
    # Worked by hand from _PAGE: the visible text outside <head>, <script>, <style>, <noscript>,
    # <template>, comments and the excluded <nav>, in document order, whitespace collapsed (text
    # pieces are joined by one space, so "disks" and "." come apart); headings: title, h1, h2.
    (page,) = pages(read(tmp_path, {"a.html": _PAGE})).values()
    assert (
        page.text
        == "Disk quotas Each team gets space on disks . See also Database Network License © 2024 top"
    )
    assert page.headings == "Disk quotas\nDisk quotas\nSee also"
    for hidden in (
        "script text",
        "color",
        "Enable scripts",
        "template text",
        "comment",
        "navigation",
        "Home",
    ):
        assert hidden not in page.text and hidden not in page.headings


def test_excluded_selector_text_never_appears(tmp_path):
    # The exclude selector (CSS Selectors Level 3 class selector, by cssselect) removes text and
    # headings too.
    page = "<body><div class='sidebar'><h2>Menu</h2>sidebar words</div><p>body words</p></body>"
    (record,) = pages(read(tmp_path, {"a.html": page}, exclude=".sidebar")).values()
    assert (record.text, record.headings) == ("body words", "a")


def test_link_places_name_the_elements_above_each_link(tmp_path):
    # Worked by hand from _PAGE: ancestors from <body> (exclusive) to the link's parent; tag names
    # with sorted class names; <strong> and <span> (inline formatting) and ids left out; a link
    # straight under <body> has the empty place; one target in two places keeps both, with counts.
    records = read(tmp_path, {"a.html": _PAGE})
    places = {r.target: r.places for r in records if isinstance(r, LinkRecord)}
    assert places == {
        "db": (("div.document>div.body>p", 1), ("div.document>div.body>div.a-side.b-side.related>ul>li", 1)),
        "disk": (("div.document>div.body>p", 1),),
        "net": (("div.document>div.body>div.a-side.b-side.related>ul>li", 1),),
        "license": (("div.footer>p", 1),),
        "top": (("", 1),),
    }
    first = next(r for r in records if isinstance(r, LinkRecord) and r.target == "db")
    assert first.place == "div.document>div.body>p" and first.origin.line == 8


def test_a_repeated_link_is_counted_in_its_place(tmp_path):
    page = "<body><section><p><a href='b.html'>b</a> and <a href='b.html#x'>again</a></p></section></body>"
    (link,) = [r for r in read(tmp_path, {"a.html": page}) if isinstance(r, LinkRecord)]
    assert link.places == (("section>p", 2),)


def test_places_are_bounded_on_deep_nesting(tmp_path):
    # Treat input as hostile: 200 nested elements give a place of the 12 nearest, and the walk
    # up stops after a bounded number (64) of inline elements.
    page = "<body>" + "<div class='d'>" * 200 + "<p><a href='b.html'>b</a></p>" + "</div>" * 200
    page += "<em>" * 200 + "<a href='c.html'>c</a>"
    links = {r.target: r.place for r in read(tmp_path, {"a.html": page}) if isinstance(r, LinkRecord)}
    assert links["b"] == ">".join(["div.d"] * 11 + ["p"])
    assert links["c"] == ""


def test_nesting_deeper_than_the_parser_allows_is_an_input_error(tmp_path):
    # libxml2 refuses documents nested deeper than 256 elements unless its "huge" option is set
    # (libxml2 documentation, XML_PARSE_HUGE), which the reader leaves off: the page is an
    # InputError, never a page cut short, and the other pages are read.
    page = "<body>" + "<div>" * 3000 + "<a href='b.html'>b</a>" + "</div>" * 3000
    records = read(tmp_path, {"deep.html": page, "fine.html": "<a href='deep.html'>d</a>"})
    (error,) = [r for r in records if isinstance(r, InputError)]
    assert error.file.endswith("deep.html") and "could not be parsed" in error.reason
    assert "depth" in error.reason and error.line == 1
    assert list(pages(records)) == ["fine"] and targets(records) == ["deep"]


def test_class_names_in_places_keep_only_name_characters(tmp_path):
    page = "<body><div class='z x>y a.b'><a href='b.html'>b</a></div></body>"
    (link,) = [r for r in read(tmp_path, {"a.html": page}) if isinstance(r, LinkRecord)]
    assert link.place == "div.a_b.x_y.z"


def test_text_is_capped_at_a_character_boundary(tmp_path):
    # RFC 3629: a UTF-8 character is one to four bytes; a cut between them would not decode.
    page = "<body><p>a" + "é" * 40_000 + "</p></body>"
    (record,) = pages(read(tmp_path, {"a.html": page})).values()
    assert len(record.text.encode("utf-8")) == 65_535  # "a" + 32,767 two-byte characters
    assert record.text == "a" + "é" * 32_767


def test_many_headings_and_paragraphs_stop_at_their_caps(tmp_path):
    # The caps of records.py: 16 KiB of headings, 64 KiB of text (UTF-8 bytes); the rest is not read.
    page = "<body>" + "".join(f"<h2>Heading {n:05d}</h2><p>Paragraph {n:05d}.</p>" for n in range(5000))
    (record,) = pages(read(tmp_path, {"a.html": page})).values()
    assert len(record.headings.encode()) == 16_384 and record.headings.startswith("a\nHeading 00000\n")
    assert len(record.text.encode()) == 65_536 and record.text.startswith("Heading 00000 Paragraph 00000.")


def test_text_pieces_stay_apart_around_hidden_elements_and_comments(tmp_path):
    # Worked by hand: a page's text pieces (element text, and what follows an element or a comment)
    # are joined by one space, so a hidden element or a comment between two words keeps them apart.
    page = "<body><p>alpha<script>x</script>beta<!--c-->gamma<style>y</style>delta</p></body>"
    (record,) = pages(read(tmp_path, {"a.html": page})).values()
    assert record.text == "alpha beta gamma delta"


def test_a_links_line_is_where_its_start_tag_begins(tmp_path):
    # Python's html.parser (standard library) numbers a start tag by its "<": a tag spread over
    # lines 2-4 is on line 2 (libxml2 alone would say 4, the line of its ">").
    page = '<body>\n<a class="x"\n   href="b.html" title="two\nlines">b</a> <a href="c.html">c</a>\n'
    lines = {r.target: r.origin.line for r in read(tmp_path, {"a.html": page}) if isinstance(r, LinkRecord)}
    assert lines == {"b": 2, "c": 4}


def test_implied_end_tags_follow_the_html_standard(tmp_path):
    # WHATWG HTML Living Standard, 13.2.6.4.7 ("in body" insertion mode): a <ul> or <p> start
    # tag first closes an open <p>; 13.2.6.4.22 ("after after body"): markup after </html> is
    # reprocessed in the body, so its links and text count.
    page = (
        "<html><body><div class='body'><p>Intro<ul><li><a href='b.html'>b</a></li></ul>"
        "<p class='note'>Note<p>Next <a href='c.html'>c</a></p></div></body></html>\n"
        "<p>After <a href='d.html'>d</a></p>"
    )
    records = read(tmp_path, {"a.html": page})
    places = {r.target: r.place for r in records if isinstance(r, LinkRecord)}
    assert places == {"b": "div.body>ul>li", "c": "div.body>p", "d": "p"}
    assert pages(records)["a"].text == "Intro b Note Next c After d"


class _ReferenceLinks(HTMLParser):
    """Links of a well-formed page by Python's html.parser (standard library): target, line of the
    start tag's "<" (getpos), and the open elements above it from <body> (exclusive)."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.open: list[tuple[str, str]] = []  # (tag, name in a place)
        self.links: set[tuple[str, int, str]] = set()

    def handle_starttag(self, tag, attrs):
        attributes = dict(attrs)
        if tag == "a" and attributes.get("href"):
            above = [name for kind, name in self.open[2:] if kind not in ("em", "span", "strong")]
            target = attributes["href"].removesuffix(".html")
            self.links.add((target, self.getpos()[0], ">".join(above)))
        classes = sorted((attributes.get("class") or "").split())
        self.open.append((tag, ".".join([tag, *classes])))

    def handle_endtag(self, tag):
        while self.open and self.open.pop()[0] != tag:
            pass


def _generated_page(seed: int) -> str:
    """A well-formed page (every element closed) with links in blocks, lists and inline elements,
    start tags spread over lines, decoy links in comments and scripts, and lines past 65,535."""
    rng = random.Random(seed)
    parts = ["<!DOCTYPE html>\n<html><head><title>Generated</title></head>\n<body>\n"]
    numbers = iter(range(1_000_000))

    def anchor() -> str:
        gap = rng.choice([" ", "\n ", "\n\n   "])
        title = rng.choice(["", ' title="one line"', ' title="two\nlines"'])
        return f'<a{gap}href="t{next(numbers)}.html"{title}{rng.choice(["", chr(10)])}>link</a>'

    def content(depth: int) -> None:
        for _ in range(rng.randint(2, 4)):
            kind = rng.random()
            if depth < 5 and kind < 0.4:
                tag = rng.choice(["div", "section", "article", "aside", "blockquote"])
                classes = " ".join(rng.sample(["x", "y", "z", "w"], rng.randint(0, 3)))
                parts.append(f"<{tag} class='{classes}'>\n" if classes else f"<{tag}>\n")
                content(depth + 1)
                parts.append(f"</{tag}>\n")
            elif kind < 0.55:
                parts.append("<ul>\n" + "".join(f"<li>{anchor()}</li>\n" for _ in range(3)) + "</ul>\n")
            elif kind < 0.65:
                parts.append("<!-- <a\nhref='x.html'>\n</a> -->\n")
                parts.append("<script>var s = `<a\nhref='y.html'>`;</script>\n")
            else:
                inline = rng.choice(["em", "span", "strong"])
                parts.append(f"<p>Some <{inline}>{anchor()}</{inline}> and {anchor()}\n</p>\n")

    content(0)
    parts.append("<p>gap" + "\n" * 70_000 + "</p>\n")
    content(0)
    parts.append("</body></html>\n")
    return "".join(parts)


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_links_lines_and_places_match_the_standard_librarys_parser(tmp_path, seed):
    # Reference: Python's html.parser (standard library) on a generated well-formed page, where its
    # literal nesting is the document tree; every link's target, line and place must agree.
    page = _generated_page(seed)
    reference = _ReferenceLinks()
    reference.feed(page)
    reference.close()
    records = read(tmp_path, {"g.html": page})
    found = {(r.target, r.origin.line, r.place) for r in records if isinstance(r, LinkRecord)}
    assert found == reference.links
    assert len(found) > 20 and max(line for _, line, _ in found) > 65_535  # past libxml2's 16 bits
    assert "x" not in targets(records) and "y" not in targets(records)  # no decoys

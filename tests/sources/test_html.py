"""Reader for an HTML folder: titles, <base href>, the exclude selector, RFC 3986 resolution."""

from __future__ import annotations

import tempfile
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rankrec.errors import InputError
from rankrec.sources.html import read_html_folder
from rankrec.sources.records import LinkRecord, PageRecord

from .test_links import RFC3986_ABNORMAL, RFC3986_NORMAL


def read(folder: Path, files: dict[str, str | bytes], **options) -> list:
    for name, content in files.items():
        path = folder / name
        path.parent.mkdir(parents=True, exist_ok=True)
        if isinstance(content, bytes):
            path.write_bytes(content)
        else:
            path.write_text(content, encoding="utf-8")
    return list(read_html_folder(folder, **options))


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
    assert len(errors) == 2
    assert errors[0].endswith("a.html:3: self-link to 'a' dropped")  # once, though two links point home
    assert "x.html" in errors[1] and "already taken" in errors[1] and "x.htm;" in errors[1]


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

"""Reader for a Markdown folder: links per CommonMark, wiki links, front matter, provenance."""

from __future__ import annotations

import tempfile
import time
import tracemalloc
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rankrec.errors import InputError
from rankrec.sources.markdown import _parse_page, read_markdown_folder
from rankrec.sources.records import LinkRecord, PageRecord
from tests.conftest import write_files as write


def read(folder: Path, files: dict[str, str | bytes]) -> list:
    return list(read_markdown_folder(write(folder, files)))


def link_targets(markdown: str, page: str = "p") -> list[str]:
    """Page ids the links of one page point to, in document order (before de-duplication)."""
    parsed = _parse_page(page + ".md", page + ".md", markdown, set())
    assert not isinstance(parsed, InputError), parsed
    return [value for _line, _kind, value, _place in parsed.links]


# ------------------------------------------------------- CommonMark specification cases
# Cases from the CommonMark Spec 0.31.2 (spec.commonmark.org), sections 6.3 "Links",
# 4.7 "Link reference definitions", 6.1 "Code spans", 4.4/4.5 code blocks, 2.4
# "Backslash escapes", 6.4 "Images", 6.5 "Autolinks". A destination "/uri" is resolved
# against the wiki root, so it is the page "uri".


@pytest.mark.parametrize(
    ("markdown", "expected"),
    [
        ('[link](/uri "title")', ["uri"]),  # 6.3: inline link with title
        ("[link](</my uri>)", ["my uri"]),  # 6.3: destination in angle brackets may hold spaces
        ("[link](/my uri)", []),  # 6.3: ...but not without them: not a link
        ("[a](<b)c>)", ["b)c"]),  # 6.3: angle brackets let a ")" into the destination
        ("[link](foo(and(bar)))", ["foo(and(bar))"]),  # 6.3: balanced parentheses
        ("[link](foo\\)\\:)", ["foo):"]),  # 6.3: backslash escapes in the destination
        ("[link [foo [bar]]](/uri)", ["uri"]),  # 6.3: nested balanced brackets in link text
        ("[link \\[bar](/uri)", ["uri"]),  # 6.3: escaped bracket in link text
        ("[foo [bar](/uri)](/uri2)", ["uri"]),  # 6.3: links may not contain links; inner wins
        ("[![moon](moon.jpg)](/uri)", ["uri"]),  # 6.3: an image inside a link; only the link counts
        ('[foo](/f&ouml;&ouml; "f&ouml;&ouml;")', ["föö"]),  # 6.3: entities in the destination
        ("[foo`](/uri)`", []),  # 6.3: the code span binds more tightly than the link
        ("`[foo](/uri)`", []),  # 6.1: no link inside a code span
        ("```\n[foo](/uri)\n```", []),  # 4.5: fenced code block
        ("    [foo](/uri)", []),  # 4.4: indented code block
        ("\\[not a link](/foo)", []),  # 2.4: backslash escape of "["
        ('![foo](/url "title")', []),  # 6.4: an image is not a link
        ("<http://foo.bar.baz>", []),  # 6.5: an autolink is external (counted, not kept)
        ('[foo][bar]\n\n[bar]: /url "title"', ["url"]),  # 6.3: full reference link
        ("[foo][BaR]\n\n[bar]: /url", ["url"]),  # 6.3: labels match case-insensitively
        ("[ẞ]\n\n[SS]: /url", ["url"]),  # 6.3: Unicode case fold, ẞ matches SS
        ("[foo][]\n\n[foo]: /url", ["url"]),  # 6.3: collapsed reference link
        ("[foo]\n\n[foo]: /url", ["url"]),  # 6.3: shortcut reference link
        ("[foo]: /url1\n\n[foo]: /url2\n\n[foo][]", ["url1"]),  # 4.7: the first definition wins
        ("[foo]\n\n    [foo]: /url", []),  # 4.7: an indented "definition" is code, not a definition
        ("[foo]: /url\n\n> [foo]", ["url"]),  # 4.7: a definition serves the whole document
        ("[foo][bar]", []),  # 6.3: undefined label: plain text
    ],
)
def test_commonmark_link_cases(markdown, expected):
    assert link_targets(markdown) == expected


def test_external_links_are_counted_not_kept(tmp_path):
    # CommonMark Spec 0.31.2, 6.5: autolinks; formats.md section 1: scheme or "//" is external
    records = read(
        tmp_path,
        {
            "a.md": "<https://halvard.example/x> [m](mailto:lab@halvard.example) [c](//cdn.example/y)\n"
            "[again](https://halvard.example/x) [b](b.md)\n"
        },
    )
    (page,) = [r for r in records if isinstance(r, PageRecord)]
    assert page.external_links == 3  # three distinct external URLs
    assert [r.target for r in records if isinstance(r, LinkRecord)] == ["b"]


# ------------------------------------------------------------------------- wiki links


def test_wiki_links_resolve_by_id_then_title_case_insensitively(tmp_path):
    # formats.md section 1 (project contract): [[Target]], [[Target|shown]], [[Target#Section|shown]];
    # matched to a page id, else a title, case-insensitively; else kept as written.
    records = read(
        tmp_path,
        {
            "ops/db.md": "# Database Runbook\n",
            "plan.md": "---\ntitle: Alpha Plan\n---\n",
            "start.md": (
                "[[ops/db]]\n"  # id
                "[[OPS/DB|the database]]\n"  # id, other case, alias
                "[[alpha plan#Budget|budget]]\n"  # title, other case, section
                "[[Database runbook]]\n"  # title of ops/db: same target, de-duplicated
                "[[Nowhere Page]]\n"  # unmatched: as written
                "`[[ops/hidden]]`\n\n"  # code span: not a link
                "```\n[[ops/fenced]]\n```\n"  # fenced code: not a link
                "\\[[ops/escaped]]\n"  # escaped bracket: not a link
                "[[#Local section]]\n"  # in-page jump
            ),
        },
    )
    links = [(r.target, r.origin.line) for r in records if isinstance(r, LinkRecord)]
    assert links == [("ops/db", 1), ("plan", 3), ("Nowhere Page", 5)]


# ----------------------------------------------------------------------- front matter


def test_front_matter_fields_and_defaults(tmp_path):
    # formats.md section 1 (project contract): title/space/tags/groups/archived and their defaults
    records = read(
        tmp_path,
        {
            "ops/db.md": "---\ntitle: DB runbook\ntags: [db, oncall]\ngroups: [ops-team]\narchived: yes\n"
            "owner: nobody\n---\n# Ignored heading\n",
            "ops/net.md": "---\nspace: network\ntags: dns\n...\nSetext title\n============\n",
            "top.md": "no heading here\n",
        },
    )
    pages = {r.page: r for r in records if isinstance(r, PageRecord)}
    db, net, top = pages["ops/db"], pages["ops/net"], pages["top"]
    assert (db.title, db.space, db.tags, db.groups, db.archived) == (
        "DB runbook",
        "ops",
        ("db", "oncall"),
        ("ops-team",),
        True,  # YAML 1.1 bool: "yes" is true
    )
    assert (net.title, net.space, net.tags, net.archived) == ("Setext title", "network", ("dns",), False)
    assert (top.title, top.space, top.groups) == ("top", None, ())  # file stem; no folder; everyone
    assert db.origin.line == 1 and top.origin.line is None


@pytest.mark.parametrize(
    ("front", "line", "words"),
    [
        ("title: ok\ntags: 5\n", 3, "tags must be a list of strings"),
        ("title: ok\ngroups: [a, 7]\n", 3, "groups must be a list of strings"),
        ("title: 2024\n", 2, "title must be a string"),  # YAML 1.1 int: unquoted 2024 is a number
        ("archived: maybe\n", 2, "archived must be true or false"),
        ("title: ok\nspace: x: y\n", 3, "not valid YAML"),  # YAML: mapping value in a plain scalar
        ("- a\n- b\n", 2, "must be a mapping"),
        ("when: 2026-13-45\n", 2, "not valid YAML"),  # YAML 1.1 timestamp with month 13
    ],
)
def test_bad_front_matter_skips_page_with_line(tmp_path, front, line, words):
    records = read(tmp_path, {"bad.md": "---\n" + front + "---\n[x](other.md)\n", "other.md": "x\n"})
    errors = [r for r in records if isinstance(r, InputError)]
    assert len(errors) == 1 and words in errors[0].reason, errors
    assert errors[0].line == line and errors[0].file.endswith("bad.md")
    assert [r.page for r in records if isinstance(r, PageRecord)] == ["other"]
    assert not [r for r in records if isinstance(r, LinkRecord)]  # the bad page's links are skipped


def test_unclosed_front_matter_is_an_error(tmp_path):
    records = read(tmp_path, {"a.md": "---\ntitle: x\n[b](b.md)\n", "b.md": "b\n"})
    assert [(type(r).__name__, getattr(r, "line", None)) for r in records] == [
        ("InputError", 1),
        ("PageRecord", None),
    ]


# --------------------------------------------------------------- provenance and order


def test_links_carry_line_pages_come_first_and_duplicates_collapse(tmp_path):
    records = read(
        tmp_path,
        {
            "a.md": "---\ntitle: A\n---\nintro\nsee [b](b.md)\nand [b again](./b.md#x) and [c](c.md)\n\n"
            "| col |\n| --- |\n| [d](d.md) |\n\n[me](a.md)\n",
            "b.md": "[a](a.md)\n",
        },
    )
    kinds = [type(r).__name__ for r in records]
    assert kinds.index("LinkRecord") > max(i for i, k in enumerate(kinds) if k == "PageRecord")
    links = [(r.source, r.target, r.origin.line, r.weight) for r in records if isinstance(r, LinkRecord)]
    assert links == [("a", "b", 5, 1.0), ("a", "c", 6, 1.0), ("a", "d", 10, 1.0), ("b", "a", 1, 1.0)]
    assert not [r for r in records if isinstance(r, InputError)]  # [me](a.md) is counted, not an error
    assert [r.same_page_links for r in records if isinstance(r, PageRecord)] == [1, 0]


def test_folder_rules(tmp_path):
    # formats.md section 1: *.md and *.markdown recursively, hidden folders skipped
    records = read(
        tmp_path,
        {
            "a.markdown": "![pic](img/plot.png) [plot](img/plot.png) [spec](files/spec.pdf) [up](../up.md)\n",
            "a.md": "duplicate id\n",
            ".git/x.md": "hidden\n",
            "img/plot.png": b"\x89PNG",
            "deep/er/page.markdown": "x\n",
            "latin.md": "caf\xe9\n".encode("latin-1"),
        },
    )
    pages = sorted(r.page for r in records if isinstance(r, PageRecord))
    assert pages == ["a", "deep/er/page"]
    errors = sorted(str(e) for e in records if isinstance(e, InputError))
    assert any("a.md" in e and "already taken" in e for e in errors)  # a.markdown sorts first
    assert any("latin.md:1" in e and "not valid utf-8" in e for e in errors)
    assert any("leaves the wiki folder" in e for e in errors)
    # the image is not a link and the link to the existing file img/plot.png is dropped;
    # files/spec.pdf is not in the folder, so it stays a link to a (missing) page
    assert [r.target for r in records if isinstance(r, LinkRecord)] == ["files/spec.pdf"]


def test_missing_or_empty_folder_gives_one_error(tmp_path):
    assert [str(e) for e in read_markdown_folder(tmp_path / "nope")] == [
        f"{tmp_path / 'nope'}: Markdown folder does not exist"
    ]
    (tmp_path / "notes.txt").write_text("x")
    (only,) = list(read_markdown_folder(tmp_path))
    assert isinstance(only, InputError) and "no Markdown pages" in only.reason


def test_bad_arguments_are_refused_eagerly():
    with pytest.raises(ValueError, match="'no-such-codec'"):
        read_markdown_folder(".", encoding="no-such-codec")


# --------------------------------------------------------------------- never raises

_PIECES = list("[]()<>`#*-_:|\\/.!%\"' \n\tab1é") + ["---\n", "[[", "]]", "```\n", "    ", "](", "title: "]
_MARKDOWNISH = st.lists(st.sampled_from(_PIECES), max_size=80).map("".join)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(content=st.one_of(_MARKDOWNISH, st.text(), st.binary()))
def test_any_file_content_gives_records_or_input_errors(content):
    with tempfile.TemporaryDirectory() as folder:
        records = read(Path(folder), {"sub/page.md": content, "other.md": "[[page]] [x](sub/page.md)\n"})
    assert records and all(isinstance(r, PageRecord | LinkRecord | InputError) for r in records)


# ------------------------------------------------------------------ page text and link places

_PAGE = """---
title: Disk quotas
---
# Quotas

Each *team* gets [space](db.md) and `du -sh`.
<div>raw html</div>

```
df -h
```

![a diagram](quota.png)

## See  Also

- [Database](db.md)
- [[Network]]

| Page | Why |
|------|-----|
| [Disks](disks.md) | size |

> Ask [support](help.md).
"""


def test_text_and_headings_of_a_small_page():
    # Worked by hand from _PAGE (CommonMark Spec 0.31.2: emphasis, code spans, fenced code, raw
    # HTML blocks, images, tables): every block's text in order, whitespace collapsed; raw HTML,
    # the image description and the front matter left out; headings: title, then h1 and h2.
    parsed = _parse_page("ops/quotas.md", "ops/quotas.md", _PAGE, set())
    assert parsed.record.text == (
        "Quotas Each team gets space and du -sh. df -h See Also Database Network Page Why Disks size "
        "Ask support."
    )
    assert parsed.record.headings == "Disk quotas\nQuotas\nSee Also"
    assert "raw html" not in parsed.record.text and "diagram" not in parsed.record.text


def test_link_places_name_the_blocks_and_the_heading_above():
    # Worked by hand from _PAGE: block chain from the markdown-it token stream, a table as one
    # block, then the nearest heading above, lowercase with whitespace collapsed.
    parsed = _parse_page("ops/quotas.md", "ops/quotas.md", _PAGE, set())
    assert [(value, place) for _line, _kind, value, place in parsed.links] == [
        ("ops/db", "md:paragraph@quotas"),
        ("ops/db", "md:bullet_list>list_item>paragraph@see also"),
        ("Network", "md:bullet_list>list_item>paragraph@see also"),
        ("ops/disks", "md:table@see also"),
        ("ops/help", "md:blockquote>paragraph@see also"),
    ]


def test_a_see_also_list_shares_its_place_across_pages(tmp_path):
    files = {
        name + ".md": f"# {name}\n\nBody of {name}.\n\n## See also\n\n- [[{other}]]\n"
        for name, other in (("a", "b"), ("b", "c"), ("c", "a"))
    }
    files["d.md"] = "Before any heading: [a](a.md), and [a](a.md) again.\n"
    records = read(tmp_path, files)
    places = {(r.source, r.target): r.places for r in records if isinstance(r, LinkRecord)}
    assert places == {
        ("a", "b"): (("md:bullet_list>list_item>paragraph@see also", 1),),
        ("b", "c"): (("md:bullet_list>list_item>paragraph@see also", 1),),
        ("c", "a"): (("md:bullet_list>list_item>paragraph@see also", 1),),
        ("d", "a"): (("md:paragraph", 2),),  # no heading above: no "@"
    }


def test_text_is_capped_at_a_character_boundary(tmp_path):
    # RFC 3629: a UTF-8 character is one to four bytes; a cut between them would not decode.
    # 64 KiB = 65,536 bytes: "a" and 32,767 two-byte characters fill 65,535 of them.
    (page,) = [r for r in read(tmp_path, {"p.md": "a" + "é" * 40_000 + "\n"}) if isinstance(r, PageRecord)]
    assert page.text == "a" + "é" * 32_767
    assert len(page.text.encode("utf-8")) == 65_535


def test_long_pages_are_read_in_linear_time(tmp_path):
    # Bounded work per page: 20,000 paragraphs with a link each (about 0.6 MB) read in one pass.
    body = "".join(f"Paragraph {i} links [b](b.md).\n\n" for i in range(20_000))
    records = read(tmp_path, {"a.md": body, "b.md": "# B\n"})
    (link,) = [r for r in records if isinstance(r, LinkRecord)]
    assert link.places == (("md:paragraph", 20_000),)
    assert len(next(r for r in records if isinstance(r, PageRecord)).text.encode()) <= 65_536


# ------------------------------------------------------------------------ hostile input
# Front matter: the "billion laughs" attack (OWASP, XML External Entity / entity expansion; the
# same shape in YAML): nine levels of nine aliases stand for 9**9 strings in under 400 bytes.
# YAML 1.2.2 section 3.2.2.2 (aliases): an alias node is the node of its anchor again, so a
# loader that copies (or a message that prints) the value expands every level.

_LAUGHS = (
    '---\na: &a ["lol","lol","lol","lol","lol","lol","lol","lol","lol"]\n'
    + "".join(
        f"{name}: &{name} [" + ",".join([f"*{prev}"] * 9) + "]\n"
        for prev, name in zip("abcdefgh", "bcdefghi", strict=True)
    )
    + "tags: *i\n---\n# Bomb\n[b](b.md)\n"
)


def test_a_yaml_alias_bomb_in_front_matter_is_refused_without_expanding_it(tmp_path):
    assert len(_LAUGHS.encode()) < 400
    tracemalloc.start()
    try:
        records = read(tmp_path, {"bomb.md": _LAUGHS, "b.md": "# B\n"})
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    (error,) = [r for r in records if isinstance(r, InputError)]
    assert error.file.endswith("bomb.md") and error.line == 3  # the first alias, *a on line 3
    assert error.reason.startswith("front matter uses the YAML alias *a; aliases are not accepted")
    assert len(str(error)) < 300 and "lol" not in error.reason  # nothing of the value is quoted
    assert [r.page for r in records if isinstance(r, PageRecord)] == ["b"]  # the import goes on
    assert peak < 8 << 20  # the expansion would take gigabytes


def test_any_alias_is_refused_but_an_anchor_alone_is_read(tmp_path):
    records = read(
        tmp_path,
        {"alias.md": "---\ntitle: &t Hello\nspace: *t\n---\n", "anchor.md": "---\ntags: &t [db]\n---\n"},
    )
    (error,) = [r for r in records if isinstance(r, InputError)]
    assert error.file.endswith("alias.md") and error.line == 3 and "alias *t" in error.reason
    (page,) = [r for r in records if isinstance(r, PageRecord)]
    assert (page.page, page.tags) == ("anchor", ("db",))


def test_front_matter_over_64_ki_characters_is_refused(tmp_path):
    front = "---\ntitle: x\nnote: " + "y" * 65_536 + "\n---\n"
    (error,) = [r for r in read(tmp_path, {"big.md": front}) if isinstance(r, InputError)]
    assert error.line == 2 and "front matter is longer than 65,536 characters" in error.reason


def test_a_long_bad_value_is_quoted_by_a_short_prefix_only(tmp_path):
    # Common practice: quote a bad value by a short prefix (about 80 characters), not whole.
    front = "---\ntitle: [" + ", ".join(f"item{i}" for i in range(5_000)) + "]\n---\n"
    (error,) = [r for r in read(tmp_path, {"long.md": front}) if isinstance(r, InputError)]
    assert error.reason.startswith("front matter: title must be a string, got list ['item0'")
    assert len(error.reason) <= 160 and error.reason.endswith("... (cut); page skipped")
    assert "item100" not in error.reason


# Markdown: markdown-it-py looks for a link label's closing "]" from every "[", so unbalanced
# brackets make the searches quadratic. Cases from cmark's pathological tests
# (commonmark/cmark, test/pathological_tests.py: "many link openers with no closers", "link
# openers and emph closers", "nested brackets", "unclosed links B") and the probe's "![[a](".


def _parse_seconds(text: str, repeats: int) -> float:
    best = float("inf")
    for _ in range(repeats):
        started = time.perf_counter()
        parsed = _parse_page("p.md", "p.md", text, set())
        best = min(best, time.perf_counter() - started)
    assert not isinstance(parsed, InputError)
    return best


@pytest.fixture(scope="module")
def prose_seconds():
    """Seconds to parse 120,000 characters of ordinary Markdown (links, emphasis, code, wiki links)."""
    sentence = "Restart the [database](ops/db.md) as the *runbook* says; check `status`. See [[Backups]].\n"
    text = (sentence * (120_000 // len(sentence) + 1))[:120_000]
    text = "\n\n".join(text[start : start + 2_000] for start in range(0, len(text), 2_000))
    return _parse_seconds(text, 3)


@pytest.mark.parametrize(
    "text",
    [
        "![[a](" * 20_000,
        "[a" * 60_000,
        "[ a_" * 30_000,
        "[" * 60_000 + "a" + "]" * 60_000,
        "[a](b" * 24_000,
        "[[" * 60_000,
        "[`]`" * 30_000,  # a code span hides the "]" a bracket count would match
    ],
    ids=[
        "probe",
        "link-openers",
        "openers-emph-closers",
        "nested-brackets",
        "unclosed-b",
        "wiki",
        "code-span",
    ],
)
def test_unbalanced_brackets_parse_about_as_fast_as_prose(text, prose_seconds):
    # A ratio, not a speed target: both are parsed here, now. Before the bound these took from 5
    # to 100 times as long as prose of the same length (120,000 characters), and the ratio grew
    # with the length; bounded, they take 0.2 to 1.3 times as long. 3 leaves room for noise.
    assert abs(len(text) - 120_000) <= 1
    assert _parse_seconds(text, 2) < 3 * prose_seconds


def test_a_hostile_block_keeps_its_text_and_the_other_blocks_keep_their_links(tmp_path):
    page = "# T\n\nSee [b](b.md).\n\n" + "![[a](" * 5_000 + "\n\nAnd [c](c.md).\n"
    records = read(tmp_path, {"a.md": page, "b.md": "b\n", "c.md": "c\n"})
    errors = [r for r in records if isinstance(r, InputError)]
    assert [(error.line, "too many unbalanced or nested brackets" in error.reason) for error in errors] == [
        (5, True)
    ]
    assert {(r.target, r.origin.line) for r in records if isinstance(r, LinkRecord)} == {("b", 3), ("c", 7)}
    (text,) = [r.text for r in records if isinstance(r, PageRecord) and r.page == "a"]
    assert "And c." in text and "![[a](![[a](" in text  # the hostile block's text, as written


def test_a_paragraph_of_many_links_is_not_cut():
    # Common practice (a generated index page): 2,000 links and 2,000 wiki links in one paragraph,
    # some nested in brackets, all found.
    markdown = " ".join(f"[see [page] {i}](p{i}.md) or [[Q{i}]]," for i in range(2_000))
    parsed = _parse_page("x.md", "x.md", markdown, set())
    assert not isinstance(parsed, InputError) and parsed.errors == []
    assert len(parsed.links) == 4_000


def test_a_wiki_link_is_at_most_512_characters():
    parsed = _parse_page("x.md", "x.md", "[[" + "a" * 508 + "]] [[" + "b" * 509 + "]]", set())
    assert [value for _line, _kind, value, _place in parsed.links] == ["a" * 508]

"""Tests of the invented-wiki generator, reading its files back with plain csv / glob / re."""

from __future__ import annotations

import csv
import hashlib
import re
from collections import Counter
from datetime import UTC, datetime
from pathlib import Path
from urllib.parse import unquote

import numpy as np
import pytest
import yaml

from rankrec.synth import WINDOW_END, synthesize

# Apache HTTP Server documentation (mod_log_config), the "combined" format:
#   %h %l %u %t \"%r\" %>s %b \"%{Referer}i\" \"%{User-agent}i\"
# %t is [day/month/year:hour:minute:second zone] with zone = (`+' | `-') 4*digit; %b is "-" for no bytes.
COMBINED = re.compile(
    r"^(?P<host>\S+) (?P<ident>\S+) (?P<user>\S+) "
    r"\[(?P<time>\d{2}/[A-Z][a-z]{2}/\d{4}:\d{2}:\d{2}:\d{2} [+-]\d{4})\] "
    r'"(?P<method>[A-Z]+) (?P<path>\S+) (?P<protocol>HTTP/\d\.\d)" '
    r'(?P<status>\d{3}) (?P<bytes>\d+|-) "(?P<referer>[^"]*)" "(?P<agent>[^"]*)"$'
)
# The asset extensions and crawler substrings of the access-log reading rules (formats.md, item 6).
ASSET = re.compile(r"\.(css|js|png|jpg|jpeg|gif|svg|ico|woff|woff2|ttf|map|webp)$")
CRAWLER = ("bot", "crawl", "spider", "slurp", "monitoring", "headless", "python-requests", "curl", "wget")
END = datetime(2026, 6, 30, tzinfo=UTC)


def _rows(path: Path) -> list[dict[str, str]]:
    with open(path, newline="", encoding="utf-8") as handle:
        return list(csv.DictReader(handle))


def _front_matter(path: Path) -> dict:
    text = path.read_text(encoding="utf-8")
    if not text.startswith("---\n"):
        return {}
    return yaml.safe_load(text[4 : text.index("\n---\n", 4)]) or {}


def _markdown_pages(folder: Path) -> dict[str, dict]:
    files = [p for p in folder.rglob("*") if p.suffix in (".md", ".markdown")]
    return {p.relative_to(folder).with_suffix("").as_posix(): _front_matter(p) for p in files}


def _digests(folder: Path) -> dict[str, str]:
    return {
        p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(folder.rglob("*"))
        if p.is_file()
    }


@pytest.fixture(scope="module")
def small(tmp_path_factory):
    out = tmp_path_factory.mktemp("small") / "wiki"
    return synthesize(out, pages=300, seed=3, access_log=True)


@pytest.fixture(scope="module")
def tables(tmp_path_factory):
    out = tmp_path_factory.mktemp("tables") / "wiki"
    return synthesize(out, pages=4000, seed=5, layout="tables", access_log=True)


def test_same_seed_gives_identical_files(tmp_path, small):
    again = synthesize(tmp_path / "again", pages=300, seed=3, access_log=True)
    assert _digests(again.out_dir) == _digests(small.out_dir)
    other = synthesize(tmp_path / "other", pages=300, seed=4, access_log=True)
    assert _digests(other.out_dir) != _digests(small.out_dir)


def test_layout_does_not_change_the_data(tmp_path, small):
    as_tables = synthesize(tmp_path / "t", pages=300, seed=3, layout="tables", access_log=True)
    for name in ("views.csv", "teams.csv", "groups.csv", "access.log"):
        assert (as_tables.out_dir / name).read_bytes() == (small.out_dir / name).read_bytes(), name
    links = _rows(as_tables.out_dir / "links.csv")
    assert len(links) == small.links
    assert {r["id"] for r in _rows(as_tables.out_dir / "pages.csv")} == set(
        _markdown_pages(small.out_dir / "pages")
    )


def test_markdown_summary_matches_files(small):
    pages = _markdown_pages(small.out_dir / "pages")
    assert small.layout == "markdown"
    assert len(pages) == small.pages == 300
    assert sum(bool(m.get("archived")) for m in pages.values()) == small.archived
    assert sum(bool(m.get("groups")) for m in pages.values()) == small.restricted
    assert len({g for m in pages.values() for g in m.get("groups") or ()}) == small.groups
    assert sorted(
        p.relative_to(small.out_dir).as_posix() for p in small.out_dir.rglob("*") if p.is_file()
    ) == list(small.files)
    assert len(_rows(small.out_dir / "views.csv")) == small.views
    teams = _rows(small.out_dir / "teams.csv")
    assert len(teams) == small.readers and len({r["team"] for r in teams}) == small.teams
    with open(small.out_dir / "access.log", encoding="utf-8") as log:
        assert sum(1 for _ in log) == small.access_log_lines


def test_tables_summary_matches_files(tables):
    pages = _rows(tables.out_dir / "pages.csv")
    links = _rows(tables.out_dir / "links.csv")
    assert len(pages) == tables.pages == 4000
    assert len(links) == tables.links
    ids = {r["id"] for r in pages}
    assert len(ids) == len(pages)
    assert {r["source"] for r in links} | {r["target"] for r in links} <= ids
    assert len(ids - {r["source"] for r in links}) == tables.dangling
    assert sum(r["archived"] == "true" for r in pages) == tables.archived
    assert sum(r["groups"] != "" for r in pages) == tables.restricted
    assert len({r["group"] for r in _rows(tables.out_dir / "groups.csv")}) == tables.groups
    # Invented demo data, shares chosen by us (common practice for wiki mock-ups, not a standard):
    assert 0.04 <= tables.dangling / tables.pages <= 0.12
    assert 0.02 <= tables.archived / tables.pages <= 0.08
    assert 0.05 <= tables.restricted / tables.pages <= 0.10
    assert len({r["source"] + "\0" + r["target"] for r in links}) == len(links)  # no repeated link
    assert all(r["source"] != r["target"] for r in links)
    assert len({r["title"].casefold() for r in pages}) == len(pages)  # titles resolve [[Title]] uniquely


def test_degrees_are_heavy_tailed_and_links_mostly_stay_in_their_space(tables):
    # Web and wiki link graphs have heavy-tailed (power-law-like) in-degree: Broder et al., "Graph
    # structure in the Web" (2000), exponent about 2.1 (from memory). A Poisson graph of the same mean
    # degree would have max/median near 2; we ask for far more.
    pages = _rows(tables.out_dir / "pages.csv")
    links = _rows(tables.out_dir / "links.csv")
    space = {r["id"]: r["space"] for r in pages}
    into, out_of = Counter(r["target"] for r in links), Counter(r["source"] for r in links)
    in_degree = np.array([into.get(p, 0) for p in space])
    out_degree = np.array([out_of.get(p, 0) for p in space])
    assert in_degree.max() >= 20 * max(1.0, np.median(in_degree))
    assert out_degree.max() >= 8 * np.median(out_degree)
    top = np.sort(in_degree)[::-1]
    assert top[: len(top) // 100].sum() >= 0.1 * top.sum()  # top 1% of pages: >= 10% of links (Poisson: ~2%)
    inside = sum(space[r["source"]] == space[r["target"]] for r in links)
    assert 0.6 <= inside / len(links) <= 0.95
    sizes = sorted(Counter(space.values()).values())
    assert sizes[-1] >= 5 * sizes[len(sizes) // 2]  # spaces of heavy-tailed sizes


@pytest.mark.parametrize("which", ["small", "tables"])
def test_no_view_of_a_page_the_viewer_may_not_see(which, request):
    summary = request.getfixturevalue(which)
    if summary.layout == "markdown":
        groups = {
            p: set(m.get("groups") or ()) for p, m in _markdown_pages(summary.out_dir / "pages").items()
        }
    else:
        groups = {
            r["id"]: set(filter(None, r["groups"].split(";"))) for r in _rows(summary.out_dir / "pages.csv")
        }
    member: dict[str, set[str]] = {}
    for row in _rows(summary.out_dir / "groups.csv"):
        member.setdefault(row["user"], set()).add(row["group"])
    views = _rows(summary.out_dir / "views.csv")
    restricted_views = [v for v in views if groups[v["page"]]]
    assert restricted_views, "the check must see some views of restricted pages"
    assert all(groups[v["page"]] & member.get(v["user"], set()) for v in restricted_views)


@pytest.mark.parametrize("which", ["small", "tables"])
def test_timestamps_inside_the_window_and_never_after_the_end(which, request):
    summary = request.getfixturevalue(which)
    assert summary.window_end == WINDOW_END == END.timestamp()
    times = [datetime.fromisoformat(v["timestamp"]) for v in _rows(summary.out_dir / "views.csv")]
    assert min(times).timestamp() >= summary.window_start
    assert max(times) < END
    with open(summary.out_dir / "access.log", encoding="utf-8") as log:
        stamps = [
            datetime.strptime(COMBINED.match(line.rstrip("\n"))["time"], "%d/%b/%Y:%H:%M:%S %z")
            for line in log
        ]
    assert min(stamps).timestamp() >= summary.window_start and max(stamps) < END
    assert all(s.utcoffset() is not None for s in stamps)


def test_views_follow_links_more_often_than_chance(tables):
    # Our own generator's rule, checked with a permutation baseline (common practice): consecutive views
    # of one reader less than 30 minutes apart (one session, the usual web-analytics cut-off) are a link
    # far more often than when the next pages are shuffled among those pairs.
    linked = {(r["source"], r["target"]) for r in _rows(tables.out_dir / "links.csv")}
    views = sorted(_rows(tables.out_dir / "views.csv"), key=lambda v: (v["user"], v["timestamp"]))
    pairs = [
        (a["page"], b["page"])
        for a, b in zip(views, views[1:], strict=False)
        if a["user"] == b["user"]
        and (datetime.fromisoformat(b["timestamp"]) - datetime.fromisoformat(a["timestamp"])).total_seconds()
        <= 1800
    ]
    observed = np.mean([p in linked for p in pairs])
    nexts = np.array([b for _, b in pairs])
    shuffled = np.random.default_rng(0).permutation(nexts)
    baseline = np.mean([(a, b) in linked for (a, _), b in zip(pairs, shuffled, strict=True)])
    assert len(pairs) > 1000
    assert observed > 0.3 and observed > 5 * baseline


def test_access_log_has_the_combined_shape_and_holds_the_views(tables):
    views = _rows(tables.out_dir / "views.csv")
    lines = (tables.out_dir / "access.log").read_text(encoding="utf-8").splitlines()
    parsed = [COMBINED.match(line) for line in lines]
    assert all(parsed), next(line for line, m in zip(lines, parsed, strict=True) if not m)
    is_view = [
        m["method"] in ("GET", "HEAD")
        and (m["status"].startswith("2") or m["status"] == "304")
        and m["path"].startswith("/wiki/")
        and not ASSET.search(m["path"])
        and not any(word in m["agent"].lower() for word in CRAWLER)
        for m in parsed
    ]
    assert sum(is_view) == tables.views == len(views)
    noise = 1 - sum(is_view) / len(lines)
    assert 0.07 <= noise <= 0.15
    kinds = Counter()
    for m, view in zip(parsed, is_view, strict=True):
        if not view:
            kinds[
                "asset"
                if ASSET.search(m["path"])
                else "post"
                if m["method"] == "POST"
                else "404"
                if m["status"] == "404"
                else "crawler"
            ] += 1
    assert min(kinds[k] for k in ("asset", "post", "404", "crawler")) > 0
    logged = Counter(
        (
            m["user"],
            unquote(m["path"][len("/wiki/") :]),
            datetime.strptime(m["time"], "%d/%b/%Y:%H:%M:%S %z").timestamp(),
        )
        for m, view in zip(parsed, is_view, strict=True)
        if view and m["user"] != "-"
    )
    written = Counter(
        (v["user"], v["page"], datetime.fromisoformat(v["timestamp"]).timestamp()) for v in views
    )
    assert not logged - written
    assert 0.9 * len(views) <= sum(logged.values()) < len(views)  # a few lines have no %u


def test_small_wiki_has_non_ascii_ids_encoded_in_urls(tmp_path):
    summary = synthesize(tmp_path / "w", pages=2000, seed=1, layout="tables", access_log=True)
    ids = [r["id"] for r in _rows(summary.out_dir / "pages.csv")]
    assert any(not i.isascii() for i in ids)
    log = (summary.out_dir / "access.log").read_bytes()
    assert log.isascii() and b"%C3%" in log  # RFC 3986: non-ASCII percent-encoded as UTF-8 octets


@pytest.mark.parametrize(
    ("arguments", "error", "word"),
    [
        ({"pages": 9}, ValueError, "pages"),
        ({"pages": True}, TypeError, "pages"),
        ({"pages": 50, "layout": "html"}, ValueError, "layout"),
        ({"pages": 50, "seed": -1}, ValueError, "seed"),
        ({"pages": 50, "days": 0}, ValueError, "days"),
        ({"pages": 50, "readers": 0}, ValueError, "readers"),
        ({"pages": 50, "views_per_reader": float("nan")}, ValueError, "views_per_reader"),
        ({"pages": 50, "access_log": "yes"}, TypeError, "access_log"),
        ({"pages": 50, "progress": 3}, TypeError, "progress"),
    ],
)
def test_bad_arguments_are_refused_by_name(tmp_path, arguments, error, word):
    with pytest.raises(error, match=word):
        synthesize(tmp_path / "w", **arguments)
    assert list(tmp_path.iterdir()) == []


def test_existing_output_is_refused_and_an_empty_folder_is_used(tmp_path):
    (tmp_path / "full").mkdir()
    (tmp_path / "full" / "keep.txt").write_text("mine")
    with pytest.raises(ValueError, match="out_dir"):
        synthesize(tmp_path / "full", pages=20)
    (tmp_path / "file").write_text("x")
    with pytest.raises(ValueError, match="out_dir"):
        synthesize(tmp_path / "file", pages=20)
    (tmp_path / "empty").mkdir()
    assert synthesize(tmp_path / "empty", pages=20).pages == 20


def test_a_failure_midway_leaves_nothing_behind(tmp_path):
    seen = []

    def stop_while_writing(step, done, total):
        seen.append(step)
        if step == "views":
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        synthesize(tmp_path / "w", pages=200, progress=stop_while_writing)
    assert "markdown" in seen
    assert list(tmp_path.iterdir()) == []


def test_markdown_round_trip_through_the_reader(tmp_path, small):
    markdown = pytest.importorskip("rankrec.sources.markdown")
    records = list(markdown.read_markdown_folder(small.out_dir / "pages"))
    errors = [r for r in records if isinstance(r, Exception)]
    assert errors == []
    pages = [r for r in records if type(r).__name__ == "PageRecord"]
    links = {(r.source, r.target) for r in records if type(r).__name__ == "LinkRecord"}
    as_tables = synthesize(tmp_path / "t", pages=300, seed=3, layout="tables")
    expected = {(r["source"], r["target"]) for r in _rows(as_tables.out_dir / "links.csv")}
    assert links == expected  # link-like text in code spans and fenced blocks was not read as a link
    by_id = {r["id"]: r for r in _rows(as_tables.out_dir / "pages.csv")}
    assert {p.page for p in pages} == set(by_id)
    for page in pages:
        row = by_id[page.page]
        assert (page.title, page.space, page.archived) == (
            row["title"],
            row["space"],
            row["archived"] == "true",
        )
        assert set(page.groups) == set(filter(None, row["groups"].split(";")))
        assert not page.tags or set(page.tags) == set(row["tags"].split(";"))
    assert sum(bool(p.tags) for p in pages) >= 0.9 * len(pages)
    assert sum(p.external_links for p in pages) > 0


def test_views_and_access_log_round_trip_through_the_readers(tables):
    views_reader = pytest.importorskip("rankrec.sources.views")
    log_reader = pytest.importorskip("rankrec.sources.access_log")
    records = list(views_reader.read_view_events(tables.out_dir / "views.csv", now=WINDOW_END))
    assert not [r for r in records if isinstance(r, Exception)]
    assert len(records) == tables.views
    assert all(tables.window_start <= r.timestamp < tables.window_end for r in records)
    tally = Counter()
    logged = list(log_reader.read_access_log(tables.out_dir / "access.log", now=WINDOW_END, tally=tally))
    assert not [r for r in logged if isinstance(r, Exception)]
    assert len(logged) == tables.views
    assert sum(tally.values()) == tables.access_log_lines - tables.views
    assert {"asset", "crawler", "method", "status"} <= set(tally)
    named = Counter((r.user, r.page, r.timestamp) for r in logged if not r.user.startswith("anon-"))
    assert not named - Counter((r.user, r.page, r.timestamp) for r in records)


def test_tables_carry_invented_text_the_page_reader_reads(tables):
    pages_reader = pytest.importorskip("rankrec.sources.pages")
    rows = _rows(tables.out_dir / "pages.csv")
    assert list(rows[0]) == ["id", "title", "space", "tags", "groups", "archived", "text"]
    texts = [row["text"] for row in rows]
    assert sum(map(bool, texts)) == tables.pages_with_text
    assert 0.97 <= tables.pages_with_text / tables.pages < 1.0  # 1% of the pages have none, by design
    words = [text.split(" ") for text in texts if text]
    assert 285 <= np.mean([len(page) for page in words]) <= 315  # Poisson around the default 300
    assert all(re.fullmatch(r"[a-z]{3,9}( [a-z]{3,9})*", text) for text in texts if text)
    records = [r for r in pages_reader.read_page_export(tables.out_dir / "pages.csv")]
    assert not [r for r in records if isinstance(r, Exception)]
    assert [r.text for r in records] == texts and all(r.headings == r.title for r in records)


def test_text_is_seeded_and_changes_nothing_else(tmp_path):
    first = synthesize(tmp_path / "a", pages=300, seed=3, layout="tables")
    again = synthesize(tmp_path / "b", pages=300, seed=3, layout="tables")
    bare = synthesize(tmp_path / "c", pages=300, seed=3, layout="tables", text_words=0)
    longer = synthesize(tmp_path / "d", pages=300, seed=3, layout="tables", text_words=40)
    assert _digests(first.out_dir) == _digests(again.out_dir)
    assert bare.pages_with_text == 0 and "text" not in _rows(bare.out_dir / "pages.csv")[0]
    without_text = [
        {k: v for k, v in row.items() if k != "text"} for row in _rows(first.out_dir / "pages.csv")
    ]
    assert without_text == _rows(bare.out_dir / "pages.csv")
    for name in ("links.csv", "views.csv", "teams.csv", "groups.csv"):
        assert (first.out_dir / name).read_bytes() == (bare.out_dir / name).read_bytes(), name
    short = [len(row["text"].split()) for row in _rows(longer.out_dir / "pages.csv")]
    assert 30 <= np.mean(short) <= 50


def test_pages_of_one_topic_share_words_the_rest_of_the_wiki_seldom_uses():
    # the generator's own topics (not in the files): same-topic pages overlap far more than others
    from rankrec.synth._text import page_texts, wiki_text

    made = wiki_text(np.array([600, 400]), 200, np.random.SeedSequence(2))
    assert made.topic.max() + 1 == 10 and (made.topic[:600] < 6).all() and (made.topic[600:] >= 6).all()
    texts = page_texts(made.lexicon, made.counts, made.topic, 0.3, np.random.default_rng(1))
    pages = Counter(word for text in texts for word in set(text.split()))
    sets = [
        {word for word in text.split() if pages[word] <= 0.1 * len(texts)} for text in texts
    ]  # rarer words
    same = [
        len(sets[i] & sets[j])
        for i in range(0, 200)
        for j in range(i + 1, 200)
        if made.topic[i] == made.topic[j]
    ]
    other = [
        len(sets[i] & sets[j])
        for i in range(0, 200)
        for j in range(i + 1, 200)
        if made.topic[i] != made.topic[j]
    ]
    assert np.mean(same) > 3 * np.mean(other)


def test_word_draws_follow_the_zipf_law_exactly():
    # the guide table is a shortcut for numpy's searchsorted over the cumulative law: the same words
    from rankrec.synth._text import _zipf, lexicon, render

    words = lexicon(3, np.random.default_rng(0), size=5000)
    uniform = np.random.default_rng(1).random(200_000)
    expected = np.minimum(np.searchsorted(words.overall, uniform), words.size - 1)
    np.testing.assert_array_equal(_zipf(words, uniform), expected)
    counts = np.array([2, 0, 3])
    flat, lengths = render(words, np.array([0, 1, 2, 3, 4]), counts)
    shown = [w.decode().strip() for w in words.words[:5]]
    assert flat.tobytes().decode() == f"{shown[0]} {shown[1]}\n\n{shown[2]} {shown[3]} {shown[4]}\n"
    assert lengths.tolist() == [len(part) + 1 for part in flat.tobytes().decode().split("\n")[:-1]]


@pytest.mark.parametrize(
    ("words", "error"), [(-1, ValueError), (True, TypeError), (float("nan"), ValueError)]
)
def test_bad_text_words_are_refused(tmp_path, words, error):
    with pytest.raises(error, match="text_words"):
        synthesize(tmp_path / "w", pages=20, layout="tables", text_words=words)

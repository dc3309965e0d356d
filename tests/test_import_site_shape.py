"""A whole site imported at once: its title affix cut off, spaces for a flat site, parsing in workers.

The demo sites below belong to the invented Fenwick Orchard Cooperative. Their shapes copy what real
generators write: Sphinx puts ``" &#8212; " + docstitle`` after every page title (its basic theme's
``layout.html``, ``titlesuffix``); DocBook's XSL stylesheets write flat HTML with an "Up" link carrying
``accesskey="u"`` in every page's navigation header, and a table of contents as ``div.toc > dl.toc`` with
one ``dt`` per entry and the entries under it in a ``dd > dl``; HTML's link type "up" is ``rel="up"``.
"""

from __future__ import annotations

import fcntl
import os
import pty
import struct
import subprocess
import sys
import termios
from collections import Counter
from pathlib import Path

import pytest

from rankrec.cli import main
from rankrec.importer import import_sources
from rankrec.sources import detect_title_affixes as detect
from rankrec.stats import wiki_stats
from rankrec.store import Store
from tests.conftest import write_files as _write

SPHINX_SUFFIX = " &#8212; Fenwick Orchard 2.4 handbook"


def _page(title: str, body: str = "", head: str = "") -> str:
    return f"<html><head><title>{title}</title>{head}</head><body>{body}</body></html>\n"


def _titles_and_spaces(store: Store) -> dict[str, tuple[str, str | None]]:
    rows = store.connection.execute("SELECT page, title, space FROM pages WHERE present").fetchall()
    return {page: (title, space) for page, title, space in rows}


def _import(tmp_path: Path, folder: Path, name: str = "wiki.db", **options):
    with Store(tmp_path / name) as store:
        (report,) = import_sources(store, [(folder, "html")], **options)
        return report, _titles_and_spaces(store), wiki_stats(store)


# ------------------------------------------------------------------------------ titles


def test_a_sphinx_style_suffix_is_cut_and_shown_in_stats(tmp_path):
    names = ["pruning", "grafting", "cider-press", "frost"]
    pages = {f"{name}.html": _page(f"{name.title()}{SPHINX_SUFFIX}") for name in names}
    pages["index.html"] = _page("Fenwick Orchard 2.4 handbook")  # the home page: the site name alone
    report, found, stats = _import(tmp_path, _write(tmp_path / "site", pages))
    assert report.site.title_suffix == " \u2014 Fenwick Orchard 2.4 handbook"
    assert found["pruning"][0] == "Pruning" and found["cider-press"][0] == "Cider-Press"
    assert found["index"][0] == "Fenwick Orchard 2.4 handbook"  # nothing else to keep: kept whole
    (site,) = stats["sites"]
    assert site["title_suffix"] == report.site.title_suffix and site["title_prefix"] == ""


def test_titles_are_kept_whole_when_asked(tmp_path):
    pages = {f"p{n}.html": _page(f"Row {n}{SPHINX_SUFFIX}") for n in range(4)}
    report, found, _ = _import(tmp_path, _write(tmp_path / "site", pages), keep_title_affixes=True)
    assert report.site.title_suffix == ""
    assert found["p0"][0] == "Row 0 \u2014 Fenwick Orchard 2.4 handbook"


def test_an_affix_under_60_percent_of_pages_is_kept():
    # 3 of 5 is 60% (cut: common practice's "most pages"); 2 of 5 is not
    assert detect(["A | Fenwick", "B | Fenwick", "C | Fenwick", "D", "E"]).suffix == " | Fenwick"
    assert detect(["A | Fenwick", "B | Fenwick", "C", "D", "E"]).suffix == ""


def test_an_affix_is_cut_at_whole_segments_on_every_usual_separator():
    for separator in (" - ", " \u2013 ", " \u2014 ", " | ", " \u00b7 ", ": "):
        titles = [f"Read-only mode{separator}Fenwick Docs", f"Ladders{separator}Fenwick Docs"]
        assert detect(titles).suffix == separator + "Fenwick Docs", separator
    # a hyphen inside a word is no separator; the two-segment suffix common to all is cut whole
    titles = ["Read-only mode | Guides | Fenwick", "Ladders | Guides | Fenwick"]
    found = detect(titles)
    assert found.suffix == " | Guides | Fenwick"
    assert found.strip(titles[0]) == "Read-only mode"


def test_a_prefix_is_cut_too(tmp_path):
    pages = {f"p{n}.html": _page(f"Fenwick Wiki: Bed {n}") for n in range(3)}
    report, found, _ = _import(tmp_path, _write(tmp_path / "site", pages))
    assert report.site.title_prefix == "Fenwick Wiki: "
    assert {title for title, _ in found.values()} == {"Bed 0", "Bed 1", "Bed 2"}


# ------------------------------------------------------------------------------ spaces


def _docbook_site(folder: Path, *, up: bool, contents: bool) -> Path:
    """A flat site of two parts, each with chapters, each chapter with sections; "Up" links if ``up``."""
    parts = {"growing": ["soil", "pests", "water"], "selling": ["market", "pricing", "export"]}
    toc = []
    pages: dict[str, str] = {}

    def nav(parent: str) -> str:
        return f'<div class="navheader"><a accesskey="u" href="{parent}.html">Up</a></div>' if up else ""

    for part, chapters in parts.items():
        nested = "".join(
            f'<dt><span class="chapter"><a href="{c}.html">{c}</a></span></dt>' for c in chapters
        )
        toc.append(
            f'<dt><span class="part"><a href="{part}.html">{part}</a></span></dt><dd><dl>{nested}</dl></dd>'
        )
        links = "".join(f'<a href="{c}.html">{c}</a>' for c in chapters)
        pages[f"{part}.html"] = _page(part, nav("index") + links)
        for chapter in chapters:
            sections = [f"{chapter}-{n}" for n in range(3)]  # left out of the contents page
            links = "".join(f'<a href="{s}.html">{s}</a>' for s in sections)
            pages[f"{chapter}.html"] = _page(chapter, nav(part) + links)
            for section in sections:
                pages[f"{section}.html"] = _page(section, nav(chapter) + f'<a href="{chapter}.html">back</a>')
    body = f'<div class="toc"><dl class="toc">{"".join(toc)}</dl></div>' if contents else ""
    pages["index.html"] = _page("Fenwick Orchard handbook", body)
    return _write(folder, pages)


@pytest.mark.parametrize(
    ("up", "contents", "method"), [(True, False, "up links"), (False, True, "contents page index")]
)
def test_a_flat_site_gets_spaces_from_its_structure(tmp_path, up, contents, method):
    report, found, _ = _import(tmp_path, _docbook_site(tmp_path / "site", up=up, contents=contents))
    assert report.site.spaces == method and report.site.space_count == 2
    assert found["pests-2"][1] == "growing" and found["soil"][1] == "growing"
    assert found["export-0"][1] == "selling" and found["selling"][1] == "selling"
    assert found["index"][1] is None  # the root belongs to no space


def test_spaces_from_rel_up_links_in_the_head(tmp_path):
    pages = {"index.html": _page("Home")}
    for part in ("roots", "fruit"):
        pages[f"{part}.html"] = _page(part, head='<link rel="up" href="index.html">')
        for n in range(3):
            pages[f"{part}{n}.html"] = _page(f"{part} {n}", head=f'<link rel="Up" href="{part}.html">')
    report, found, _ = _import(tmp_path, _write(tmp_path / "site", pages))
    assert report.site.spaces == "up links"
    assert found["fruit2"][1] == "fruit" and found["roots0"][1] == "roots"


def test_spaces_from_file_name_prefixes_are_few_and_small_ones_lumped(tmp_path):
    pages = {f"sql-{n}.html": _page(f"s{n}") for n in range(5)}
    pages |= {f"app-{n}.html": _page(f"a{n}") for n in range(4)}
    pages |= {"misc-one.html": _page("m"), "misc-two.html": _page("n"), "odd_page.html": _page("o")}
    report, found, _ = _import(tmp_path, _write(tmp_path / "site", pages))
    assert report.site.spaces == "file names"
    assert found["sql-3"][1] == "sql" and found["app-0"][1] == "app"
    assert {found[page][1] for page in ("misc-one", "misc-two", "odd_page")} == {"other"}


def test_spaces_stay_under_the_cap(tmp_path):
    pages = {f"topic{t:03d}-{n}.html": _page(f"{t} {n}") for t in range(100) for n in range(3)}
    report, found, _ = _import(tmp_path, _write(tmp_path / "site", pages))
    spaces = Counter(space for _, space in found.values())
    # 100 equal prefixes would lump 61 of them into "other": most pages, so the method gives up
    assert report.site.space_count == 0 and set(spaces) == {None}


def test_folders_win_and_the_switch_turns_structure_off(tmp_path):
    foldered = {f"{space}/p{n}.html": _page(f"{space} {n}") for space in ("ops", "dev") for n in range(3)}
    report, found, _ = _import(tmp_path, _write(tmp_path / "foldered", foldered))
    assert report.site.spaces == "folders" and found["ops/p1"][1] == "ops"
    flat = _docbook_site(tmp_path / "flat", up=True, contents=False)
    report, found, _ = _import(tmp_path, flat, "folders.db", spaces="folders")
    assert report.site.space_count == 0 and found["pests-2"][1] is None
    report, found, _ = _import(tmp_path, tmp_path / "foldered", "none.db", spaces="none")
    assert report.site.space_count == 0 and found["ops/p1"][1] is None


def test_the_cli_shows_the_site_and_takes_the_switches(tmp_path, capsys):
    pages = {f"p{n}.html": _page(f"Bed {n} | Fenwick Docs") for n in range(3)}
    site, wiki = _write(tmp_path / "site", pages), str(tmp_path / "wiki.db")
    assert main(["import", str(site), "--wiki", wiki, "--spaces", "none", "--workers", "2"]) == 0
    assert "cut title suffix ' | Fenwick Docs'" in capsys.readouterr().out
    assert main(["import", str(site), "--wiki", wiki, "--keep-site-in-titles"]) == 0
    assert "titles kept as given" in capsys.readouterr().out
    with pytest.raises(SystemExit) as stopped:
        main(["import", str(site), "--wiki", wiki, "--workers", "0"])
    assert stopped.value.code == 2


# ------------------------------------------------------------------------------ workers and progress


def _mixed_site(folder: Path) -> Path:
    pages = _docbook_site(folder / "html", up=True, contents=True)
    (pages / "broken.html").write_bytes(b"<html><body>" + b"<div>" * 300 + b"</body></html>")  # too deep
    markdown = folder / "md"
    for n in range(30):
        text = f"# Bed {n} | Fenwick\n\nSee [next](bed{n + 1}.md) and [self](bed{n}.md#top).\n"
        _write(markdown, {f"bed{n}.md": text})
    _write(markdown, {"bad.md": "---\ntitle: [unclosed\n---\n"})
    return folder


def _dump(store: Store) -> list[str]:
    # the clock time of each import and the store's random id are the only values that may differ
    store.connection.execute("UPDATE imports SET imported_at = ''")
    store.connection.execute("UPDATE meta SET value = '' WHERE key = 'store_id'")
    return list(store.connection.iterdump())


def test_an_import_with_workers_writes_exactly_what_one_worker_writes(tmp_path):
    folder = _mixed_site(tmp_path / "site")
    dumps, reports = [], []
    for workers in (1, 3):
        with Store(tmp_path / f"w{workers}.db") as store:
            sources = [(folder / "html", "html"), (folder / "md", "markdown")]
            done = import_sources(store, sources, workers=workers)
            reports.append([(r.records, [str(e) for e in r.errors], r.dropped, r.site) for r in done])
            dumps.append(_dump(store))
    assert reports[0] == reports[1] and reports[0][0][1]  # the same bad records, in the same order
    assert dumps[0] == dumps[1]


def test_progress_counts_the_files_parsed(tmp_path):
    folder = _docbook_site(tmp_path / "site", up=True, contents=False)
    files = len(list(folder.glob("*.html")))
    seen = []
    with Store(tmp_path / "wiki.db") as store:
        import_sources(store, [(folder, "html")], workers=2, progress=lambda *step: seen.append(step))
    parsing = [(done, total) for step, done, total in seen if step == "parsing files"]
    assert parsing[0] == (0, files) and parsing[-1] == (files, files)
    assert [done for done, _ in parsing] == sorted(done for done, _ in parsing)


_CLI = "import sys; from rankrec.cli import main; sys.exit(main(sys.argv[1:]))"


def test_the_progress_bar_is_drawn_only_on_a_terminal(tmp_path):
    folder = _docbook_site(tmp_path / "site", up=True, contents=False)
    command = [sys.executable, "-c", _CLI, "import", str(folder), "--wiki"]
    piped = subprocess.run([*command, str(tmp_path / "a.db")], capture_output=True, text=True, check=True)
    assert "parsing files" not in piped.stderr
    leader, follower = pty.openpty()
    # a terminal of 24 rows, 100 columns (tqdm draws nothing on one of size 0x0, as a new pty is)
    fcntl.ioctl(follower, termios.TIOCSWINSZ, struct.pack("HHHH", 24, 100, 0, 0))
    with subprocess.Popen(
        [*command, str(tmp_path / "b.db")], stdout=subprocess.DEVNULL, stderr=follower
    ) as run:
        os.close(follower)
        drawn = b""
        while True:
            try:
                chunk = os.read(leader, 4096)
            except OSError:  # the terminal closes with the program
                break
            if not chunk:
                break
            drawn += chunk
    os.close(leader)
    assert run.returncode == 0 and b"parsing files" in drawn

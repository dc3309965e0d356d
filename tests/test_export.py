"""rankrec export: every page's served list into a file, and related blocks written into Markdown pages."""

from __future__ import annotations

import csv
import json
import os
import posixpath
import re
import shutil
from pathlib import Path
from urllib.parse import quote, unquote

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rankrec.blocks import END, START, render_block, strip_block, with_block
from rankrec.cli import main
from rankrec.index import load_index
from rankrec.recommend import Reader, related
from rankrec.sources._links import page_id_for_path
from rankrec.store import Store
from rankrec.synth import synthesize

_LINK = re.compile(r"^- \[.*\]\((?P<target>[^)]+)\)$")


@pytest.fixture(scope="module")
def wiki(tmp_path_factory):
    """An invented Markdown wiki (rankrec synth), imported and built; its pages' original bytes."""
    folder = tmp_path_factory.mktemp("export")
    synthesize(folder / "synth", pages=80, seed=4, layout="markdown")
    pages = next(
        path for path in (folder / "synth").rglob("*") if path.is_dir() and any(path.glob("**/*.md"))
    )
    assert main(["import", "--wiki", str(folder / "wiki.db"), str(pages)]) == 0
    assert main(["build", "--wiki", str(folder / "wiki.db"), "--index", str(folder / "index")]) == 0
    return folder, pages


def _copy(pages: Path, target: Path) -> Path:
    shutil.copytree(pages, target)
    return target


def _bytes_of(folder: Path) -> dict[str, bytes]:
    return {
        str(path.relative_to(folder)): path.read_bytes()
        for path in sorted(folder.rglob("*"))
        if path.is_file()
    }


def test_every_list_exported_is_the_served_list_in_each_format(wiki, tmp_path):
    folder, _ = wiki
    index = load_index(folder / "index")
    for name in ("lists.json", "lists.jsonl", "lists.csv"):
        assert (
            main(["export", "--index", str(folder / "index"), "--out", str(tmp_path / name), "-k", "5"]) == 0
        )
    exported = json.loads((tmp_path / "lists.json").read_text())  # RFC 8259 JSON, read by the json module
    expected_pages = {
        index.pages[number]
        for number in range(index.size)
        if index.public[number] and not index.archived[number]
    }
    assert set(exported) == expected_pages
    for page, items in exported.items():
        served = related(index, page, k=5).items
        assert [item["page"] for item in items] == [item.page for item in served]
        assert [item["reason"] for item in items] == [item.reason for item in served]
    lines = [json.loads(line) for line in (tmp_path / "lists.jsonl").read_text().splitlines()]
    assert {line["page"]: line["items"] for line in lines} == exported
    with open(tmp_path / "lists.csv", newline="", encoding="utf-8") as handle:  # RFC 4180, Python's csv
        rows = list(csv.DictReader(handle))
    assert len(rows) == sum(len(items) for items in exported.values())
    first = rows[0]
    assert exported[first["page"]][int(first["rank"]) - 1]["page"] == first["related_page"]


def test_a_url_template_gives_every_item_its_url(wiki, tmp_path):
    folder, _ = wiki
    out = tmp_path / "lists.json"
    template = "https://wiki.example.invalid/{page}.html"
    assert (
        main(["export", "--index", str(folder / "index"), "--out", str(out), "--url-template", template]) == 0
    )
    for items in json.loads(out.read_text()).values():
        for item in items:  # the id percent-encoded as a URI path (RFC 3986 section 2.1, urllib.parse.quote)
            assert item["url"] == template.replace("{page}", quote(item["page"], safe="/"))


def test_blocks_written_into_the_wiki_resolve_and_a_second_run_changes_no_byte(wiki, tmp_path):
    folder, pages = wiki
    copy = _copy(pages, tmp_path / "pages")
    before = _bytes_of(copy)
    assert main(["export", "--index", str(folder / "index"), "--into", str(copy), "--dry-run"]) == 0
    assert _bytes_of(copy) == before  # a dry run writes nothing
    assert main(["export", "--index", str(folder / "index"), "--into", str(copy)]) == 0
    written = _bytes_of(copy)
    changed = [name for name in written if written[name] != before[name]]
    assert len(changed) > len(written) // 2
    for name in changed:
        text = written[name].decode()
        block = text[text.index(START) : text.index(END)]
        targets = [match["target"] for line in block.splitlines() if (match := _LINK.match(line))]
        assert targets
        for target in targets:  # every link resolves to a page file of the wiki
            resolved = posixpath.normpath(posixpath.join(posixpath.dirname(name), unquote(target)))
            assert (copy / resolved).is_file(), (name, target)
        # outside the markers, the page is what it was
        assert strip_block(text).rstrip("\n") == before[name].decode().rstrip("\n")
    assert main(["export", "--index", str(folder / "index"), "--into", str(copy)]) == 0
    assert _bytes_of(copy) == written


def test_the_next_import_does_not_read_the_blocks_links(wiki, tmp_path):
    folder, pages = wiki
    copy = _copy(pages, tmp_path / "pages")
    assert main(["export", "--index", str(folder / "index"), "--into", str(copy)]) == 0
    again = tmp_path / "again.db"
    assert main(["import", "--wiki", str(again), str(copy)]) == 0
    with Store(folder / "wiki.db", create=False) as first, Store(again, create=False) as second:
        for store in (first, second):
            assert store.counts()["links"] > 0
        assert np.array_equal(first.link_arrays()[2], second.link_arrays()[2])
        assert first.page_text_hashes()[1] == second.page_text_hashes()[1]
        assert first.counts()["links"] == second.counts()["links"]


def test_a_page_edited_since_the_import_is_left_alone_and_named(wiki, tmp_path, capsys):
    folder, pages = wiki
    copy = _copy(pages, tmp_path / "pages")
    edited = sorted(copy.rglob("*.md"))[3]
    edited.write_text(edited.read_text() + "\nA paragraph written after the import.\n")
    original = edited.read_bytes()
    assert main(["export", "--index", str(folder / "index"), "--into", str(copy)]) == 0
    assert edited.read_bytes() == original
    assert str(edited.relative_to(copy)) in capsys.readouterr().err


def test_a_page_that_is_a_symbolic_link_is_not_replaced(wiki, tmp_path, capsys):
    folder, pages = wiki
    copy = _copy(pages, tmp_path / "pages")
    index = load_index(folder / "index")

    def listed(path: Path) -> bool:
        number = index.find(page_id_for_path(path.relative_to(copy).as_posix()))
        return number is not None and bool(index.public[number]) and not bool(index.archived[number])

    second = next(path for path in sorted(copy.rglob("*.md")) if listed(path))
    kept = copy / "kept.txt"  # inside the wiki folder, not a page itself
    kept.write_bytes(second.read_bytes())
    second.unlink()
    second.symlink_to(kept)  # a page kept elsewhere inside the tree, linked in
    assert main(["export", "--index", str(folder / "index"), "--into", str(copy)]) == 0
    assert second.is_symlink() and kept.read_bytes() == (pages / second.relative_to(copy)).read_bytes()
    assert "symbolic link" in capsys.readouterr().err


def test_a_failed_write_leaves_the_page_as_it_was(wiki, tmp_path, monkeypatch):
    folder, pages = wiki
    copy = _copy(pages, tmp_path / "pages")
    before = _bytes_of(copy)

    def refuse(source, target):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(os, "replace", refuse)
    assert main(["export", "--index", str(folder / "index"), "--into", str(copy)]) != 0
    assert _bytes_of(copy) == before  # the page untouched, no staging file left beside it


_LINE = st.text(st.characters(blacklist_categories=("Cs",), blacklist_characters="\r\n"), max_size=30)


@settings(max_examples=150, deadline=None)
@given(
    lines=st.lists(_LINE, max_size=8),
    newline=st.sampled_from(["\n", "\r\n"]),
    ends=st.booleans(),
    old=st.booleans(),
    titles=st.lists(_LINE.filter(str.strip), min_size=1, max_size=4),
)
def test_with_block_keeps_everything_outside_the_markers(lines, newline, ends, old, titles):
    text = newline.join(lines) + (newline if ends and lines else "")
    if old:  # a page holding an earlier block in the middle
        text = text + newline + render_block([("Old", "old.md")], newline) + newline + "tail" + newline
    block = render_block([(title, f"p{number}.md") for number, title in enumerate(titles)], newline)
    updated = with_block(text, block)
    assert updated.count(START) == 1 and updated.count(END) == 1
    start, end = updated.index(START), updated.index(END) + len(END)
    if old:
        old_start, old_end = text.index(START), text.index(END) + len(END)
        assert updated[:start] == text[:old_start] and updated[end:] == text[old_end:]
    else:
        assert updated.startswith(text) and updated[end:] == newline
    assert with_block(updated, block) == updated  # idempotent
    block_lines = updated[start:end].split(newline)
    assert all("\r" not in line and "\n" not in line for line in block_lines)  # the page's own line ending


def test_pages_not_precomputed_get_their_first_request_lists_for_any_number_of_workers(tmp_path):
    # The demo wiki built by push with only the most-viewed pages precomputed (and the ranker it learns):
    # the export scores the other pages' candidates in blocks, here and in worker processes; each list
    # must be the one `related` serves on a first request, which scores that page alone.
    from rankrec.build import build_index
    from rankrec.demo import import_demo
    from rankrec.export import export_lists

    wiki = import_demo(tmp_path / "demo")
    with Store(wiki, create=False) as store:
        groups = store.names_of("group")
        folder = build_index(store, tmp_path / "index", method="push", view_share=0.3)
    index = load_index(folder)
    assert index.ranker is not None
    assert 0 < index.manifest.counts["precomputed"] < index.size
    viewer = frozenset(groups[:1])
    files = []
    for workers in (1, 2):
        out = tmp_path / f"lists-{workers}.json"
        export_lists(load_index(folder), out, groups=viewer, k=8, workers=workers)
        files.append(out.read_bytes())
    assert files[0] == files[1]
    exported = json.loads(files[0])
    first_requests = load_index(folder)
    reader = Reader(user="x", groups=viewer, restart=np.zeros(index.size), recent=np.zeros(0, dtype=np.int64))
    visible = first_requests.visible(viewer) & ~np.asarray(first_requests.archived)
    assert set(exported) == {first_requests.pages[number] for number in np.flatnonzero(visible)}
    for page, items in exported.items():
        served = related(first_requests, page, reader=reader, k=8).items
        assert [(item["page"], item["reason"]) for item in items] == [(i.page, i.reason) for i in served]
        assert [item["score"] for item in items] == pytest.approx([i.score for i in served], rel=1e-6)


def _processes_marked(mark: str) -> list[int]:
    """Live processes whose environment holds ``mark`` (Linux /proc; the spawned workers inherit it)."""
    found = []
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit():
            try:
                environ = (entry / "environ").read_bytes()
            except OSError:
                continue
            if mark.encode() in environ:
                found.append(int(entry.name))
    return found


@pytest.mark.skipif(not Path("/proc/self/environ").exists(), reason="needs Linux /proc to find the workers")
def test_a_terminated_export_leaves_no_file_no_staging_file_and_no_worker(wiki, tmp_path):
    # SIGTERM (what a job scheduler or `kill` sends) unwinds as Ctrl-C does: exit status 143 (128 + 15,
    # POSIX shell convention), the staging file removed, no output file, and the worker processes gone.
    import signal
    import subprocess
    import sys
    import time
    import uuid

    folder, _ = wiki
    mark = f"RANKREC_TEST_MARK={uuid.uuid4().hex}"
    environment = {**os.environ, mark.split("=")[0]: mark.split("=")[1]}
    out = tmp_path / "out" / "lists.json"
    command = [sys.executable, "-m", "rankrec.cli", "export", "--index", str(folder / "index")]
    child = subprocess.Popen(
        [*command, "--out", str(out), "--workers", "2"], env=environment, stderr=subprocess.PIPE
    )
    deadline = time.monotonic() + 60
    while not list(out.parent.glob(".lists.json.*")) and time.monotonic() < deadline:
        assert child.poll() is None, "the export ended before it could be stopped"
        time.sleep(0.01)
    child.send_signal(signal.SIGTERM)
    _, stderr = child.communicate(timeout=60)
    assert child.returncode == 143, stderr
    assert b"interrupted" in stderr
    assert list(out.parent.iterdir()) == []
    deadline = time.monotonic() + 10
    while _processes_marked(mark) and time.monotonic() < deadline:
        time.sleep(0.1)
    assert _processes_marked(mark) == []

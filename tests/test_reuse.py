"""A rebuild takes over the text neighbours of the index it replaces when no page's text changed
(rankrec.reuse): the same files a recount writes, and the same lists; a change of text recounts."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pytest

from rankrec.build import build_index
from rankrec.cli import main
from rankrec.configuration import Configuration
from rankrec.demo import FIXTURE
from rankrec.evidence import read_evidence
from rankrec.importer import import_sources
from rankrec.index import RELATED_ARRAYS, load_index
from rankrec.store import Store

CONFIGURATION = Configuration(ranker="none", text_weight=0.3)  # text feeds the lists, no ranker to train
MORE_VIEWS = "user,page,timestamp\nu00003,ops/on-call-interim-report,2026-06-01T06:12:37Z\n"


def _store(folder: Path) -> Path:
    wiki = folder / "wiki.db"
    shutil.copytree(FIXTURE / "pages", folder / "pages")
    with Store(wiki) as store:
        import_sources(store, [(folder / "pages", "markdown"), (FIXTURE / "views.csv", "views")])
    return wiki


def _build(wiki: Path, target: Path, reuse: bool = True):
    with Store(wiki, create=False) as store:
        build_index(store, target, CONFIGURATION, hubs=4, reuse=reuse)
    return load_index(target)


def _same_files(first: Path, second: Path, pattern: str) -> None:
    names = sorted(path.name for path in first.glob(pattern))
    assert names and names == sorted(path.name for path in second.glob(pattern))
    for name in names:
        assert (first / name).read_bytes() == (second / name).read_bytes(), name


def _same_text(first: Path, second: Path) -> None:
    """The neighbour arrays byte for byte, and their description but for the time counting took."""
    _same_files(first / "text", second / "text", "*.npy")
    described = [
        json.loads((folder / "text" / "text_neighbours.json").read_text()) for folder in (first, second)
    ]
    assert described[0] | {"seconds": 0} == described[1] | {"seconds": 0}


@pytest.fixture(scope="module")
def rebuilt(tmp_path_factory):
    """A store, its index, new views, then a rebuild over the index and a fresh build beside it."""
    folder = tmp_path_factory.mktemp("reuse")
    wiki = _store(folder)
    first = _build(wiki, folder / "index")
    first_real = first.folder.resolve()  # the link moves to the next build's folder
    (folder / "more.csv").write_text(MORE_VIEWS)
    with Store(wiki) as store:
        import_sources(store, [(folder / "more.csv", "views")])
    again = _build(wiki, folder / "index")
    return (
        folder,
        wiki,
        (first, first_real),
        (again, again.folder.resolve()),
        _build(wiki, folder / "fresh", reuse=False),
    )


def test_unchanged_text_is_taken_over_and_equals_a_recount(rebuilt):
    # Reference: the same build with reuse off, which counts the text afresh.
    _, _, (first, first_real), (again, again_real), fresh = rebuilt
    assert first.manifest.text["reused_from"] is None
    assert again.manifest.text["reused_from"] == first_real.name
    assert fresh.manifest.text["reused_from"] is None
    assert again.manifest.text["digest"] == fresh.manifest.text["digest"] == first.manifest.text["digest"]
    _same_text(again_real, fresh.folder)
    # the views did change the index (the counts), and every related list is the fresh build's
    assert again.manifest.counts["views"] == fresh.manifest.counts["views"] > first.manifest.counts["views"]
    _same_files(again_real, fresh.folder, "related_*.npy")
    assert set(RELATED_ARRAYS) | {"error", "drift"} == {  # and their error bounds (rankrec.reuse_lists)
        path.stem.removeprefix("related_") for path in again_real.glob("related_*")
    }


def test_taken_over_files_survive_the_old_index(rebuilt):
    folder, wiki, (_, first_real), (again, again_real), _ = rebuilt
    third = _build(wiki, folder / "index")  # publishing again cleans the first index's folder away
    assert not first_real.exists()
    assert third.manifest.text["reused_from"] == again_real.name
    assert np.array_equal(third.text.similar.toarray(), again.text.similar.toarray())


def test_changed_text_is_counted_again(tmp_path):
    wiki = _store(tmp_path)
    first = _build(wiki, tmp_path / "index")
    page = next((tmp_path / "pages").rglob("*.md"))
    page.write_text(page.read_text() + "\n\nA new paragraph about quarterly budget forecasting.\n")
    with Store(wiki) as store:
        import_sources(store, [(tmp_path / "pages", "markdown")])
    again = _build(wiki, tmp_path / "index")
    fresh = _build(wiki, tmp_path / "fresh", reuse=False)
    assert again.manifest.text["reused_from"] is None
    assert again.manifest.text["digest"] == fresh.manifest.text["digest"] != first.manifest.text["digest"]
    _same_text(again.folder, fresh.folder)


def test_a_broken_old_index_is_counted_again(tmp_path):
    wiki = _store(tmp_path)
    first = _build(wiki, tmp_path / "index")
    (first.folder / "text" / "text_neighbours.indices.npy").unlink()
    again = _build(wiki, tmp_path / "index")
    assert again.manifest.text["reused_from"] is None
    _same_text(again.folder, _build(wiki, tmp_path / "fresh", reuse=False).folder)


def test_the_digest_follows_every_input_of_the_text_neighbours(tmp_path):
    # The store keeps each text's SHA-256 (hashlib, of its UTF-8); an in-memory store's digest, computed
    # from the texts themselves, must be the on-disk store's, read from those stored digests.
    wiki = _store(tmp_path)
    with Store(wiki, create=False) as store:
        on_disk = read_evidence(store)
    with Store(":memory:") as store:
        import_sources(store, [(tmp_path / "pages", "markdown"), (FIXTURE / "views.csv", "views")])
        in_memory = read_evidence(store)
    assert isinstance(in_memory.bodies, list) and not isinstance(on_disk.bodies, list)
    digest = on_disk.text_digest(1.0)
    assert in_memory.text_digest(1.0) == digest
    assert on_disk.text_digest(2.0) != digest
    bodies, headings = list(in_memory.bodies), list(in_memory.headings)
    changed = {
        "body": (headings, [bodies[0] + " more", *bodies[1:]]),
        "headings": ([headings[0] + " more", *headings[1:]], bodies),
        "order": (headings[::-1], bodies[::-1]),
    }
    from dataclasses import replace

    for name, (new_headings, new_bodies) in changed.items():
        assert replace(in_memory, headings=new_headings, bodies=new_bodies).text_digest(1.0) != digest, name


def test_full_recounts_and_the_build_says_which(tmp_path, capsys):
    wiki = _store(tmp_path)
    index = str(tmp_path / "index")
    arguments = ["build", "--wiki", str(wiki), "--index", index, "--ranker", "none", "--hubs", "4"]
    assert main(arguments) == 0
    assert "taken over" not in capsys.readouterr().out
    assert main(arguments) == 0
    assert "text neighbours: taken over from the replaced index" in capsys.readouterr().out
    assert main([*arguments, "--full"]) == 0
    assert "taken over" not in capsys.readouterr().out
    assert load_index(index).manifest.text["reused_from"] is None

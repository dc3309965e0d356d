"""Building an index from a store with one configuration: navigation blend, manifest, evidence."""

from __future__ import annotations

import numpy as np
import pytest

from rankrec.build import build_index, read_evidence
from rankrec.configuration import Configuration
from rankrec.index import load_index
from rankrec.sources.records import Origin, PageRecord
from rankrec.store import Store


@pytest.fixture
def wiki(tmp_path):
    """Pages a, b, c; one link a -> b; one reader who went a -> c early and a -> b late."""
    path = tmp_path / "wiki.db"
    with Store(path) as store, store.transaction():
        for page in "abc":
            store.put_page(PageRecord(page, page.upper(), Origin("test")))
        store.put_links([("a", "b", 1.0)])
        store.put_views(
            [
                ("u", "a", 0.0, None),
                ("u", "c", 60.0, None),
                ("u", "a", 10_000.0, None),
                ("u", "b", 10_060.0, None),
            ]
        )
        store.log_import("test", "generated", 3, 0)
    return path


def _row(index, page: str) -> np.ndarray:
    forward = index.transition.forward
    return forward[[index.page_number(page)]].toarray().ravel()


def test_navigation_blend_follows_the_configuration(wiki, tmp_path):
    # Worked by hand: a's link row is [0, 1, 0]; its moves a->c and a->b (c->a is 9,940 s later, past
    # the 30-minute gap) give the navigation row [0, 0.5, 0.5]; with weight 0.5 the blend is the mean.
    with Store(wiki) as store:
        plain = load_index(
            build_index(store, tmp_path / "plain", Configuration(navigation_weight=0.0), hubs=0)
        )
        mixed = load_index(
            build_index(store, tmp_path / "mixed", Configuration(navigation_weight=0.5), hubs=0)
        )
        recent = Configuration(navigation_weight=0.5, navigation_window_days=5_000 / 86_400)
        windowed = load_index(build_index(store, tmp_path / "windowed", recent, hubs=0))
    np.testing.assert_allclose(_row(plain, "a"), [0, 1, 0])
    np.testing.assert_allclose(_row(mixed, "a"), [0, 0.75, 0.25])
    np.testing.assert_allclose(_row(mixed, "c"), [0, 0, 0])  # no links, no moves: dangling still
    np.testing.assert_allclose(_row(windowed, "a"), [0, 1, 0])  # only the late move a -> b counts
    assert (plain.manifest.navigation["moves"], mixed.manifest.navigation["moves"]) == (0, 2)
    assert windowed.manifest.navigation["moves"] == 1
    # the fingerprint is the store's link graph's, so every one of them is current for the store
    assert plain.manifest.fingerprint == mixed.manifest.fingerprint == windowed.manifest.fingerprint


def test_manifest_records_the_configuration_whole(wiki, tmp_path):
    configuration = Configuration(
        damping=0.7, lift=1.0, half_life_days=7.0, ranker="linear", editorial_place="*seealso*"
    )
    with Store(wiki) as store:
        index = load_index(
            build_index(
                store,
                tmp_path / "index",
                configuration,
                hubs=0,
                settings_source={"kind": "file", "path": "settings.json"},
            )
        )
        default = load_index(build_index(store, tmp_path / "default", hubs=0))
    assert index.configuration == configuration
    assert index.manifest.settings_source == {"kind": "file", "path": "settings.json"}
    assert default.configuration == Configuration() and default.manifest.settings_source["kind"] == "defaults"


def test_evidence_holds_the_store_in_graph_numbering(wiki):
    with Store(wiki) as store:
        evidence = read_evidence(store)
    assert evidence.graph.pages.tolist() == ["a", "b", "c"]
    assert evidence.titles == ["A", "B", "C"]
    assert evidence.views.pages.tolist() == [0, 2, 0, 1]  # ordered by reader, then time
    assert evidence.views.counts(3).tolist() == [2, 1, 1]


def test_build_with_a_settings_file_serves_what_the_file_says(tmp_path, capsys):
    # Readers always go from "start" to "hidden", a page "start" does not link to: with a navigation
    # weight the moves carry the surfer there, without it the links alone decide.
    import json

    from rankrec.cli import main
    from rankrec.configuration import Settings, write_settings
    from rankrec.recommend import related

    path = tmp_path / "wiki.db"
    with Store(path) as store, store.transaction():
        for page in ("start", "linked", "other", "hidden"):
            store.put_page(PageRecord(page, page.title(), Origin("test")))
        store.put_links(
            [
                ("start", "linked", 1.0),
                ("linked", "other", 1.0),
                ("other", "start", 1.0),
                ("hidden", "start", 1.0),
            ]
        )
        store.put_views(
            (f"reader{number}", page, 100.0 * number + offset, None)
            for number in range(20)
            for offset, page in ((0.0, "start"), (30.0, "hidden"))
        )
        store.log_import("test", "generated", 4, 0)
    moves = tmp_path / "moves.json"
    write_settings(moves, Settings(Configuration(navigation_weight=0.9, lift=0.0), {"store": str(path)}))
    links = tmp_path / "links.json"
    write_settings(links, Settings(Configuration(navigation_weight=0.0, lift=0.0)))

    assert (
        main(["build", "--wiki", str(path), "--index", str(tmp_path / "moves"), "--settings", str(moves)])
        == 0
    )
    said = capsys.readouterr().out
    assert f"configuration: {moves}" in said and "another store" not in said
    assert (
        main(["build", "--wiki", str(path), "--index", str(tmp_path / "links"), "--settings", str(links)])
        == 0
    )
    assert main(["build", "--wiki", str(path), "--index", str(tmp_path / "plain")]) == 0
    assert "the defaults" in capsys.readouterr().out
    with_moves, without = load_index(tmp_path / "moves"), load_index(tmp_path / "links")
    assert (
        with_moves.configuration.navigation_weight == 0.9 and without.configuration.navigation_weight == 0.0
    )
    assert json.loads((tmp_path / "moves" / "manifest.json").read_text())["settings_source"]["kind"] == "file"
    first = [item.page for item in related(with_moves, "start", k=3).items]
    second = [item.page for item in related(without, "start", k=3).items]
    assert first[0] == "hidden" and second[0] == "linked"
    # one setting changed on the command line, on top of the file's
    assert (
        main(
            [
                "build",
                "--wiki",
                str(path),
                "--index",
                str(tmp_path / "lifted"),
                "--settings",
                str(moves),
                "--lift",
                "1",
            ]
        )
        == 0
    )
    assert "changed on the command line: lift 1" in capsys.readouterr().out
    lifted = load_index(tmp_path / "lifted").configuration
    assert (lifted.lift, lifted.navigation_weight) == (1.0, 0.9)


def test_a_bad_settings_file_is_refused_in_one_line(wiki, tmp_path, capsys):
    from rankrec.cli import main

    bad = tmp_path / "settings.json"
    bad.write_text('{"format_version": 1, "configuration": {"damping": 1.5}}')
    assert (
        main(["build", "--wiki", str(wiki), "--index", str(tmp_path / "index"), "--settings", str(bad)]) == 2
    )
    err = capsys.readouterr().err
    assert "settings.json" in err and "damping" in err and err.count("\n") == 1
    assert not (tmp_path / "index").exists()  # nothing published
    assert main(["build", "--wiki", str(wiki), "--index", str(tmp_path / "index"), "--damping", "2"]) == 2
    assert "damping" in capsys.readouterr().err


def test_text_neighbours_are_computed_once_for_every_copy_of_the_evidence():
    # An evaluation builds an index per configuration tried; the text is the same in every copy.
    from dataclasses import replace

    import scipy.sparse as sp

    from rankrec.evidence import Evidence
    from rankrec.profiles import ViewLog

    evidence = Evidence.from_links(sp.csr_matrix(np.ones((3, 3)) - np.eye(3)))
    evidence = replace(evidence, headings=["Printer setup", "Printer drivers", "Leave"], bodies=["", "", ""])
    first = evidence.text_neighbours(0.4)
    empty = np.zeros(0, dtype=np.int64)
    copy = evidence.with_views(ViewLog(empty, empty, np.zeros(0))).with_links(evidence.graph.adjacency)
    assert copy.text_neighbours(0.4) is first
    assert copy.text_neighbours(0.8) is not first and evidence.text_neighbours(0.8) is copy.text_neighbours(
        0.8
    )

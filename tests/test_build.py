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
    configuration = Configuration(damping=0.7, lift=1.0, half_life_days=7.0, ranker={"kind": "none"})
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

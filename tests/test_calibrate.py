"""The push threshold personal lists are served with (rankrec.recommend.calibrate): chosen on the staged
index through the serving function, recorded in the manifest, and the one recommend() uses."""

from __future__ import annotations

import json

import numpy as np
import pytest

from rankrec.basis import Basis
from rankrec.build import build_index
from rankrec.configuration import Configuration
from rankrec.evidence import read_evidence
from rankrec.index import load_index
from rankrec.lists_command import _threshold_line
from rankrec.recommend import reader_from_store, recommend
from rankrec.recommend.calibrate import AGREEMENT, COARSEST, LADDER, calibrate_vector_epsilon, sample_readers
from rankrec.store import Store
from tests.test_index import make_wiki

CONFIGURED = 1e-6  # on this wiki the ladder holds thresholds that change lists and one that does not


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    folder = tmp_path_factory.mktemp("calibrate")
    wiki = make_wiki(folder / "wiki.db", pages=150, seed=4, density=0.04, users=40, views=20, groups=2)
    configuration = Configuration(navigation_weight=0.0, vector_epsilon=CONFIGURED, ranker="none")
    with Store(wiki) as store:
        build_index(store, folder / "index", configuration, hubs=4, k_related=10)
        evidence = read_evidence(store)
    index = load_index(folder / "index")
    return wiki, evidence, configuration, index


def _lists(index, readers, epsilon):
    return [[item.page for item in recommend(index, reader, epsilon=epsilon).items] for reader in readers]


def test_the_served_threshold_is_the_coarsest_whose_lists_keep_the_agreed_share_of_pages(built):
    # Reference: the definition, recomputed here list by list for every threshold of the ladder.
    _, evidence, configuration, index = built
    readers = sample_readers(evidence, configuration)
    assert len(readers) == 40  # fewer readers than the sample: all of them
    reference = _lists(index, readers, CONFIGURED)
    share = {}
    for factor in LADDER:
        epsilon = float(f"{CONFIGURED * factor:.3g}")
        if epsilon <= COARSEST:
            found = _lists(index, readers, epsilon)
            kept = sum(len(set(a) & set(b)) for a, b in zip(found, reference, strict=True))
            share[epsilon] = kept / sum(map(len, reference))
    expected = next((epsilon for epsilon, kept in share.items() if kept >= AGREEMENT), CONFIGURED)
    held = [kept >= AGREEMENT for kept in share.values()]
    assert any(held) and not all(held), f"the fixture should hold both kinds: {share}"
    # the tolerance matters here: some threshold keeps the agreed share but not every page
    assert any(AGREEMENT <= kept < 1.0 for kept in share.values()), share
    serving = index.manifest.serving
    assert serving["vector_epsilon"] == expected == index.vector_epsilon
    assert serving["configured"] == CONFIGURED and serving["readers"] == 40
    assert serving["required"] == AGREEMENT and serving["agreement"] >= AGREEMENT
    if expected != CONFIGURED:
        assert f"hold {serving['agreement']:.2%}" in _threshold_line(serving)
    # the manifest's record is what calibrating the published index again gives
    again = calibrate_vector_epsilon(index, readers)
    assert again.vector_epsilon == expected and again.tried == serving["tried"]
    assert [float(key) for key in serving["tried"]] == [e for e in share if e >= expected]
    # the every-page rule, asked for explicitly, is at least as fine
    strict = calibrate_vector_epsilon(index, readers, agreement=1.0)
    assert strict.vector_epsilon <= expected


def test_sampled_readers_are_the_readers_serving_reads_from_the_store(built):
    # Reference: rankrec.recommend.reader_from_store, which reads the store with SQL, not the evidence.
    wiki, evidence, configuration, index = built
    readers = sample_readers(evidence, configuration, count=8)
    with Store(wiki) as store:
        names = dict(store.connection.execute("SELECT id, user FROM users"))
        for reader in readers:
            served = reader_from_store(store, index, names[int(reader.user)])
            np.testing.assert_allclose(reader.restart, served.restart, rtol=1e-12, atol=1e-15)
            assert np.array_equal(reader.recent, served.recent)
            assert reader.groups == served.groups
    again = sample_readers(evidence, configuration, count=8)
    assert [r.user for r in again] == [r.user for r in readers]  # seeded


def test_recommend_pushes_at_the_served_threshold(built, monkeypatch):
    wiki, _, _, index = built
    asked = []
    original = Basis.personalised

    def spy(self, transition, restart, *, epsilon):
        asked.append(epsilon)
        return original(self, transition, restart, epsilon=epsilon)

    monkeypatch.setattr(Basis, "personalised", spy)
    with Store(wiki) as store:
        reader = reader_from_store(store, index, "user03")
    recommend(index, reader)
    recommend(index, reader, epsilon=1e-7)
    assert asked == [index.manifest.serving["vector_epsilon"], 1e-7]


def test_an_index_without_a_measured_threshold_serves_the_configured_one(built, tmp_path):
    _, _, _, index = built
    raw = json.loads((index.folder / "manifest.json").read_text())
    assert "serving" in raw
    # an index written before the threshold was measured: the same files, a manifest without "serving"
    older = tmp_path / "older"
    older.mkdir()
    for item in index.folder.iterdir():
        (older / item.name).symlink_to(item.resolve())
    (older / "manifest.json").unlink()
    del raw["serving"]
    (older / "manifest.json").write_text(json.dumps(raw))
    assert load_index(older).vector_epsilon == CONFIGURED


def test_without_reading_history_nothing_is_measured(tmp_path):
    wiki = make_wiki(tmp_path / "wiki.db", pages=30, users=0, teams=1, views=0)
    with Store(wiki) as store:
        index = load_index(build_index(store, tmp_path / "index", hubs=2))
    serving = index.manifest.serving
    assert serving["readers"] == 0 and serving["tried"] == {}
    assert index.vector_epsilon == Configuration().vector_epsilon == serving["vector_epsilon"]
    assert "as configured" in _threshold_line(serving)

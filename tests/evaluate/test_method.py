"""rankrec's evaluated method against outside references: networkx PageRank, Counter, Python's sorted()."""

from __future__ import annotations

from collections import Counter

import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st

from rankrec.configuration import Configuration
from rankrec.derive import navigation_matrix
from rankrec.evaluate.baselines import check_recommendations
from rankrec.evaluate.method import PersonalisedPageRank, query_readers, rankrec_lists, training_evidence
from rankrec.evaluate.splits import excluded_pages, session_split, temporal_split
from rankrec.evidence import Evidence
from rankrec.graph import blend_navigation
from rankrec.profiles import SECONDS_PER_DAY, profile_matrix
from rankrec.recommend.select import select_pages
from rankrec.store import Store
from tests.evaluate.test_baselines import _random_graph, _random_views

# ------------------------------------------------------------------------------ the shared ranking


def _reference_selection(vector, overall, eligible, k, lift):
    """The documented rule with Python's sorted(): positive scores by score / global^lift, then the other
    eligible pages by global PageRank, ties to the lower page."""
    pages = range(len(vector))
    scored = sorted(
        (p for p in pages if eligible[p] and vector[p] > 0),
        key=lambda p: (-(vector[p] / overall[p] ** lift), p),
    )
    rest = sorted((p for p in pages if eligible[p] and not vector[p] > 0), key=lambda p: (-overall[p], p))
    chosen = (scored + rest)[:k]
    return chosen + [-1] * (k - len(chosen))


@settings(max_examples=60, deadline=None)
@given(st.integers(0, 2**32 - 1), st.integers(1, 12), st.sampled_from([0.0, 0.5, 1.0]))
def test_select_pages_follows_its_rule_with_ties(seed, k, lift):
    rng = np.random.default_rng(seed)
    n, columns = int(rng.integers(1, 15)), int(rng.integers(1, 5))
    # few distinct values, many zeros: ties at every boundary
    vectors = rng.integers(0, 4, size=(n, columns)) / 4.0
    overall = rng.integers(1, 4, size=n) / 4.0
    eligible = rng.random((n, columns)) < 0.8
    found = select_pages(vectors, overall, eligible, k, lift=lift)
    for column in range(columns):
        expected = _reference_selection(vectors[:, column], overall, eligible[:, column], k, lift)
        assert found[column].tolist() == expected
    one = select_pages(vectors[:, 0], overall, eligible[:, 0], k, lift=lift)
    assert one.tolist() == found[0].tolist()


def test_select_pages_refuses_bad_arguments():
    with pytest.raises(ValueError, match="lift"):
        select_pages(np.ones(3), np.ones(3), np.ones(3, bool), 2, lift=-2.5)
    with pytest.raises(ValueError, match="global_vector"):
        select_pages(np.ones(3), np.ones(4), np.ones(3, bool), 2, lift=0.0)


# ------------------------------------------------------------------------------ what the method learns


def _split(seed=3, views=500):
    users, pages, times, size = _random_views(seed, views=views)
    return temporal_split(users, pages, times, size, cutoff=14_000.0), _random_graph(size, seed)


def _evidence(adjacency) -> Evidence:
    return Evidence.from_links(adjacency)


def test_training_evidence_blends_only_training_navigation():
    split, adjacency = _split()
    train = split.train
    moves = Counter()  # consecutive views of one user within the gap (rankrec.graph.navigation_counts' rule)
    for i in range(len(train) - 1):
        same = train.users[i] == train.users[i + 1] and train.times[i + 1] - train.times[i] <= 1800
        if same and train.pages[i] != train.pages[i + 1]:
            moves[(int(train.pages[i]), int(train.pages[i + 1]))] += 1
    counts = sp.csr_matrix((list(moves.values()), tuple(zip(*moves, strict=True))), shape=adjacency.shape)
    expected = blend_navigation(sp.csr_matrix(adjacency), counts, 0.4)
    training = training_evidence(_evidence(adjacency), split)
    found, _ = navigation_matrix(training, Configuration(navigation_weight=0.4))
    assert abs(found - expected).max() < 1e-12
    assert abs(navigation_matrix(training, Configuration(navigation_weight=0.0))[0] - adjacency).max() == 0


def test_user_readers_carry_the_reading_profiles_at_the_cutoff():
    split, adjacency = _split()
    readers = query_readers(split, _evidence(adjacency), Configuration(half_life_days=2.0))
    train = split.train
    excluded = excluded_pages(split)
    for query in (0, len(split.queries) // 2, len(split.queries) - 1):
        user = split.queries.users[query]
        mine = train.users == user
        profile = profile_matrix(
            np.zeros(int(mine.sum()), np.int64),
            train.pages[mine],
            train.times[mine],
            split.size,
            now=split.cutoff,
            half_life_days=2.0,
        )
        assert np.allclose(readers[query].restart, profile.toarray().ravel())
        assert set(readers[query].recent.tolist()) == set(excluded[[query]].indices.tolist())
    assert SECONDS_PER_DAY == 86_400.0


def test_session_readers_restart_uniformly_from_the_prefix():
    users, pages, times, size = _random_views(5, views=800, span=200_000.0)
    split = session_split(users, pages, times, size, cutoff=150_000.0, prefix=2, gap=600.0)
    readers = query_readers(split, _evidence(_random_graph(size, 5)), Configuration())
    for query, reader in enumerate(readers):
        prefix = {int(p) for p in split.queries.pages[query] if p >= 0}
        assert set(np.flatnonzero(reader.restart).tolist()) == prefix == set(reader.recent.tolist())
        assert np.allclose(reader.restart[sorted(prefix)], 1.0 / len(prefix))


def test_lists_match_networkx_personalised_pagerank():
    split, adjacency = _split(seed=11)
    configuration = Configuration(
        damping=0.8, half_life_days=3.0, navigation_weight=0.3, lift=0.5, tol=1e-12, vector_epsilon=1e-13
    )
    evidence = _evidence(adjacency)
    found = rankrec_lists(split, evidence, 6, configuration, hubs=0)
    graph, _ = navigation_matrix(training_evidence(evidence, split), configuration)
    directed = nx.from_scipy_sparse_array(graph, create_using=nx.DiGraph)
    # networkx sends dangling mass along `personalization` by default: rankrec's dangling="restart"
    overall = nx.pagerank(directed, alpha=0.8, tol=1e-14, max_iter=10_000)
    overall = np.array([overall[p] for p in range(split.size)])
    readers = query_readers(split, evidence, configuration)
    excluded = excluded_pages(split).toarray() > 0
    for query in range(len(split.queries)):
        personal = nx.pagerank(
            directed,
            alpha=0.8,
            personalization=dict(enumerate(readers[query].restart)),
            tol=1e-14,
            max_iter=10_000,
        )
        vector = np.array([personal[p] for p in range(split.size)])
        scores = vector / overall**0.5
        expected = found[query]
        # same pages up to near ties (the two solvers differ by ~1e-12)
        best = sorted((p for p in range(split.size) if not excluded[query, p]), key=lambda p: -scores[p])[:6]
        assert np.allclose(np.sort(scores[expected]), np.sort(scores[best]), rtol=1e-7)


def test_method_lists_pass_the_baselines_checks_and_ignore_the_test_period():
    users, pages, times, size = _random_views(7, views=500)
    adjacency = _random_graph(size, 7)
    later = times >= 14_000.0
    shuffled = pages.copy()
    shuffled[later] = np.random.default_rng(1).integers(0, size, int(later.sum()))
    first = temporal_split(users, pages, times, size, cutoff=14_000.0)
    second = temporal_split(users, shuffled, times, size, cutoff=14_000.0)
    method = PersonalisedPageRank(_evidence(adjacency))
    a = check_recommendations(first, method.recommend(first, 8), 8)
    b = check_recommendations(second, method.recommend(second, 8), 8)
    common, rows_first, rows_second = np.intersect1d(
        first.queries.users, second.queries.users, return_indices=True
    )
    assert common.size > 5 and np.array_equal(a[rows_first], b[rows_second])


# ------------------------------------------------------------------------------ evaluated is served


def _wiki_with_history(path, seed=5):
    """A random wiki store (tests.test_index.make_wiki) whose views have distinct times, 60 days long."""
    from tests.test_index import make_wiki

    make_wiki(path, pages=50, seed=seed, users=14, views=1, teams=2, groups=2)
    rng = np.random.default_rng(seed)
    with Store(path) as store, store.transaction():
        pages = [row[0] for row in store.connection.execute("SELECT page FROM pages WHERE present = 1")]
        users = [row[0] for row in store.connection.execute("SELECT user FROM users")]
        store.connection.execute("DELETE FROM views")
        times = rng.permutation(60 * 24)[:700] * 3_600.0  # distinct hours
        order = np.argsort(times)
        chosen = np.minimum(rng.zipf(1.5, times.size) - 1, len(pages) - 1)
        readers = rng.integers(0, len(users), times.size)
        store.put_views((users[readers[i]], pages[chosen[i]], float(times[i]), None) for i in order.tolist())
    return path


def _training_store(source, target, data, split):
    """A copy of ``source`` whose reading history is the split's training part only."""
    import shutil

    with Store(source) as store:
        store.connection.execute("PRAGMA wal_checkpoint(TRUNCATE)")
        row_ids, names = store.users()
    shutil.copyfile(source, target)
    user_of = dict(zip(row_ids.tolist(), names, strict=True))
    train = split.train
    with Store(target) as store, store.transaction():
        store.connection.execute("DELETE FROM views")
        store.put_views(
            (user_of[int(user)], str(data.pages[page]), float(time), None)
            for user, page, time in zip(train.users, train.pages, train.times, strict=True)
        )
        store.log_import("training part", "test", len(train), 0)
    return target


@pytest.mark.parametrize("kind", ["temporal", "sessions"])
def test_evaluated_lists_are_the_lists_an_index_built_from_the_training_part_serves(tmp_path, kind):
    # Identity, not a reference check: the evaluation's rankrec lists must be what `rankrec build` on a
    # store holding only the training part publishes and related()/recommend() serve, item by item.
    import dataclasses

    from rankrec.build import build_index
    from rankrec.evaluate.run import load_data, make_split
    from rankrec.index import load_index
    from rankrec.recommend import reader_from_store, recommend, related

    wiki = _wiki_with_history(tmp_path / "wiki.db")
    configuration = Configuration(damping=0.8, lift=0.5, navigation_weight=0.4, half_life_days=10.0)
    with Store(wiki) as store:
        data = load_data(store)
    split = make_split(data, kind, gap=4 * 3_600.0) if kind == "sessions" else make_split(data, kind)
    configuration = configuration.with_values(session_gap_seconds=split.settings.get("gap", 1800.0))
    evaluated = PersonalisedPageRank(data.evidence, configuration).recommend(split, 10)

    training = _training_store(wiki, tmp_path / "training.db", data, split)
    excluded = excluded_pages(split)
    with Store(training) as store:
        index = load_index(build_index(store, tmp_path / "served", configuration))
        row_ids, names = store.users()
        user_of = dict(zip(row_ids.tolist(), names, strict=True))
        compared = 0
        for query in range(len(split.queries)):
            user = user_of[int(split.queries.users[query])]
            reader = reader_from_store(store, index, user, now=float(split.queries.times[query]))
            recent = excluded[[query]].indices.astype(np.int64)
            reader = dataclasses.replace(reader, recent=recent)
            prefix = split.queries.pages[query]
            if kind == "sessions" and (prefix >= 0).sum() == 1:
                served = related(index, str(data.pages[prefix[0]]), reader=reader, k=10, exclude_read=True)
            elif kind == "sessions":
                restart = np.zeros(index.size)
                restart[prefix[prefix >= 0]] = 1.0 / (prefix >= 0).sum()
                served = recommend(
                    index, dataclasses.replace(reader, restart=restart), k=10, exclude_read=True
                )
            else:
                served = recommend(index, reader, k=10, exclude_read=True)
            expected = [item.page for item in served.items]
            found = [str(data.pages[page]) for page in evaluated[query] if page >= 0]
            assert found == expected, query
            compared += 1
    assert compared == len(split.queries) > 5

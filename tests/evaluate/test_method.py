"""rankrec's evaluated method against outside references: networkx PageRank, Counter, Python's sorted()."""

from __future__ import annotations

from collections import Counter

import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st

from rankrec.evaluate.baselines import check_recommendations
from rankrec.evaluate.method import (
    Configuration,
    PersonalisedPageRank,
    rankrec_lists,
    restart_matrix,
    training_graph,
)
from rankrec.evaluate.splits import excluded_pages, session_split, temporal_split
from rankrec.graph import blend_navigation
from rankrec.profiles import SECONDS_PER_DAY, profile_matrix
from rankrec.recommend.lists import select_pages
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
        select_pages(np.ones(3), np.ones(3), np.ones(3, bool), 2, lift=-1.0)
    with pytest.raises(ValueError, match="global_vector"):
        select_pages(np.ones(3), np.ones(4), np.ones(3, bool), 2, lift=0.0)


# ------------------------------------------------------------------------------ what the method learns


def _split(seed=3, views=500):
    users, pages, times, size = _random_views(seed, views=views)
    return temporal_split(users, pages, times, size, cutoff=14_000.0), _random_graph(size, seed)


def test_training_graph_blends_only_training_navigation():
    split, adjacency = _split()
    train = split.train
    moves = Counter()  # consecutive views of one user within the gap (rankrec.graph.navigation_counts' rule)
    for i in range(len(train) - 1):
        same = train.users[i] == train.users[i + 1] and train.times[i + 1] - train.times[i] <= 1800
        if same and train.pages[i] != train.pages[i + 1]:
            moves[(int(train.pages[i]), int(train.pages[i + 1]))] += 1
    counts = sp.csr_matrix((list(moves.values()), tuple(zip(*moves, strict=True))), shape=adjacency.shape)
    expected = blend_navigation(sp.csr_matrix(adjacency), counts, 0.4)
    found = training_graph(split, adjacency, blend=0.4)
    assert abs(found - expected).max() < 1e-12
    assert abs(training_graph(split, adjacency, blend=0.0) - adjacency).max() == 0


def test_user_restarts_are_the_reading_profiles_at_the_cutoff():
    split, _ = _split()
    restarts, row_of = restart_matrix(split, half_life_days=2.0)
    train = split.train
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
        assert np.allclose(restarts[row_of[query]].toarray(), profile.toarray())
    assert SECONDS_PER_DAY == 86_400.0


def test_session_restarts_are_uniform_over_the_prefix_and_shared():
    users, pages, times, size = _random_views(5, views=800, span=200_000.0)
    split = session_split(users, pages, times, size, cutoff=150_000.0, prefix=2, gap=600.0)
    restarts, row_of = restart_matrix(split, half_life_days=30.0)
    for query in range(len(split.queries)):
        prefix = {int(p) for p in split.queries.pages[query] if p >= 0}
        row = restarts[row_of[query]].toarray().ravel()
        assert set(np.flatnonzero(row).tolist()) == prefix
        assert np.allclose(row[sorted(prefix)], 1.0 / len(prefix))
    assert restarts.shape[0] == len({tuple(row) for row in split.queries.pages.tolist()})


def test_lists_match_networkx_personalised_pagerank():
    split, adjacency = _split(seed=11)
    configuration = Configuration(damping=0.8, half_life_days=3.0, blend=0.3, lift=0.5)
    found = rankrec_lists(split, adjacency, 6, configuration, lifts=(0.0, 0.5), tol=1e-12)
    graph = training_graph(split, adjacency, blend=0.3)
    directed = nx.from_scipy_sparse_array(graph, create_using=nx.DiGraph)
    # networkx sends dangling mass along `personalization` by default: rankrec's dangling="restart"
    overall = nx.pagerank(directed, alpha=0.8, tol=1e-14, max_iter=10_000)
    overall = np.array([overall[p] for p in range(split.size)])
    restarts, row_of = restart_matrix(split, half_life_days=3.0)
    excluded = excluded_pages(split).toarray() > 0
    for query in range(len(split.queries)):
        restart = restarts[row_of[query]].toarray().ravel()
        personal = nx.pagerank(
            directed, alpha=0.8, personalization=dict(enumerate(restart)), tol=1e-14, max_iter=10_000
        )
        vector = np.array([personal[p] for p in range(split.size)])
        for lift in (0.0, 0.5):
            scores = vector / overall**lift
            expected = found[lift][query]
            # same pages up to near ties (the two solvers differ by ~1e-12)
            best = sorted((p for p in range(split.size) if not excluded[query, p]), key=lambda p: -scores[p])[
                :6
            ]
            assert np.allclose(np.sort(scores[expected]), np.sort(scores[best]), rtol=1e-8)


def test_method_lists_pass_the_baselines_checks_and_ignore_the_test_period():
    users, pages, times, size = _random_views(7, views=500)
    adjacency = _random_graph(size, 7)
    later = times >= 14_000.0
    shuffled = pages.copy()
    shuffled[later] = np.random.default_rng(1).integers(0, size, int(later.sum()))
    first = temporal_split(users, pages, times, size, cutoff=14_000.0)
    second = temporal_split(users, shuffled, times, size, cutoff=14_000.0)
    method = PersonalisedPageRank(adjacency)
    a = check_recommendations(first, method.recommend(first, 8), 8)
    b = check_recommendations(second, method.recommend(second, 8), 8)
    common, rows_first, rows_second = np.intersect1d(
        first.queries.users, second.queries.users, return_indices=True
    )
    assert common.size > 5 and np.array_equal(a[rows_first], b[rows_second])


def test_configuration_refuses_values_outside_their_range():
    for bad in ({"damping": 1.0}, {"half_life_days": 0.0}, {"blend": 1.5}, {"lift": -0.1}):
        with pytest.raises(ValueError, match=next(iter(bad))):
            Configuration(**bad)

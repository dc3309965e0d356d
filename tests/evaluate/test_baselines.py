"""Baselines against outside references (scikit-learn, networkx, Counter, scipy.stats) and Wikispeedia."""

from __future__ import annotations

import dataclasses
from collections import Counter

import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp
import scipy.stats
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.metrics.pairwise import cosine_similarity

from rankrec.evaluate import evaluate_lists
from rankrec.evaluate.baselines import (
    CoVisitation,
    GlobalPageRank,
    MostRead,
    OutLinks,
    RandomPages,
    TeamMostRead,
    check_recommendations,
    covisitation,
)
from rankrec.evaluate.splits import Views, excluded_pages, session_numbers, session_split, temporal_split
from tests.conftest import require_shared


def _random_views(seed: int, views: int = 600, users: int = 30, pages: int = 25, span: float = 20_000.0):
    rng = np.random.default_rng(seed)
    return (
        rng.integers(0, users, views),
        np.minimum(rng.zipf(1.6, views) - 1, pages - 1),
        np.round(rng.uniform(0, span, views)),
        pages,
    )


def _random_graph(size: int, seed: int) -> sp.csr_array:
    rng = np.random.default_rng(seed)
    dense = (rng.random((size, size)) < 0.15) & ~np.eye(size, dtype=bool)
    dense[size - 1] = False  # one dangling page
    return sp.csr_array(dense.astype(np.float64))


def _excluded_sets(split) -> list[set[int]]:
    return _row_sets(excluded_pages(split))


def _row_sets(matrix) -> list[set[int]]:
    bounds = zip(matrix.indptr[:-1], matrix.indptr[1:], strict=True)
    return [set(matrix.indices[a:b].tolist()) for a, b in bounds]


def _ordered(counts: Counter, excluded: set[int], k: int) -> list[int]:
    """Most counted first, ties to the lower page number (as rankrec.ranking.top_k orders ties)."""
    ranked = sorted((page for page in counts if counts[page] > 0), key=lambda page: (-counts[page], page))
    return [page for page in ranked if page not in excluded][:k]


def _listed(row) -> list[int]:
    return [int(page) for page in row if page >= 0]


# --------------------------------------------------------------------------------------- co-visitation


def test_covisitation_equals_cosine_similarity_of_the_binary_session_matrix():
    users, pages, times, size = _random_views(3)
    order = np.lexsort((times, users))
    views = Views(users[order], pages[order], times[order], size)
    session = session_numbers(views.users, views.times, 1800.0)
    binary = np.zeros((session.max() + 1, size))
    binary[session, views.pages] = 1.0
    expected = cosine_similarity(binary.T)  # scikit-learn: cosine of page columns over sessions
    np.fill_diagonal(expected, 0.0)
    found = covisitation(views, gap=1800.0, max_session_pages=None).toarray()
    np.testing.assert_allclose(found, expected, rtol=1e-12, atol=1e-12)


def test_covisitation_lists_follow_summed_cosines_of_the_prefix():
    users, pages, times, size = _random_views(4)
    split = session_split(users, pages, times, size, gap=1800.0, prefix=2)
    cosine = covisitation(split.train, gap=1800.0).toarray()
    lists = CoVisitation().recommend(split, 5)
    for row, prefix in zip(lists, split.queries.pages, strict=True):
        seeds = sorted({int(page) for page in prefix if page >= 0})
        scores = cosine[seeds].sum(axis=0)
        expected = [p for p in sorted(range(size), key=lambda p: (-scores[p], p)) if scores[p] > 0]
        assert _listed(row) == [p for p in expected if p not in seeds][:5]


def test_covisitation_neighbours_keeps_only_each_pages_strongest_pages():
    users, pages, times, size = _random_views(11)
    split = session_split(users, pages, times, size, prefix=1)
    cosine = covisitation(split.train).toarray()
    lists = CoVisitation(neighbours=2).recommend(split, 5)
    for row, prefix in zip(lists, split.queries.pages, strict=True):
        seed = int(prefix[0])
        ranked = sorted(range(size), key=lambda p: (-cosine[seed, p], p))
        strongest = [p for p in ranked if cosine[seed, p] > 0]
        assert _listed(row) == [p for p in strongest[:2] if p != seed]


# ------------------------------------------------------------------------------------ global rankings


def test_global_pagerank_order_equals_networkx():
    users, pages, times, size = _random_views(5)
    adjacency = _random_graph(size, 5)
    split = temporal_split(users, pages, times, size, new_only=False)
    lists = GlobalPageRank(adjacency).recommend(split, size)
    graph = nx.from_scipy_sparse_array(adjacency, create_using=nx.DiGraph)
    reference = nx.pagerank(graph, alpha=0.85, tol=1e-12)
    values = np.array([reference[page] for page in range(size)])
    expected = sorted(range(size), key=lambda page: (-values[page], page))
    assert np.all(lists == lists[0])  # nothing is excluded without new_only: one list for every query
    # compare where networkx's values are clearly apart (near-ties may swap under rounding)
    apart = np.abs(np.diff(values[expected])) > 1e-9
    assert apart.sum() >= size // 2
    rank_found = {page: rank for rank, page in enumerate(lists[0])}
    for rank in np.flatnonzero(apart):
        assert rank_found[expected[rank]] < rank_found[expected[rank + 1]]


def test_most_read_equals_counter_of_training_views():
    users, pages, times, size = _random_views(6)
    split = temporal_split(users, pages, times, size)
    counts = Counter(split.train.pages.tolist())  # collections.Counter as the reference count
    lists = MostRead().recommend(split, 7)
    for row, excluded in zip(lists, _excluded_sets(split), strict=True):
        assert _listed(row) == _ordered(counts, excluded, 7)


def test_team_most_read_equals_counter_over_team_members_then_most_read():
    users, pages, times, size = _random_views(7)
    teams = np.arange(30) % 4 - 1  # team -1 (none), 0, 1, 2
    split = temporal_split(users, pages, times, size)
    lists = TeamMostRead(teams).recommend(split, 8)
    everyone = Counter(split.train.pages.tolist())
    for row, user, excluded in zip(lists, split.queries.users, _excluded_sets(split), strict=True):
        members = teams[split.train.users] == teams[user]
        team = Counter(split.train.pages[members].tolist()) if teams[user] >= 0 else Counter()
        expected = _ordered(team, excluded, 8)
        expected += [page for page in _ordered(everyone, excluded | set(expected), 8)][: 8 - len(expected)]
        assert _listed(row) == expected


def test_out_links_lists_only_out_links_by_popularity():
    users, pages, times, size = _random_views(8)
    adjacency = _random_graph(size, 8)
    links = _row_sets(adjacency)
    splits = (session_split(users, pages, times, size, prefix=2), temporal_split(users, pages, times, size))
    for split in splits:
        counts = Counter(split.train.pages.tolist())
        lists = OutLinks(adjacency).recommend(split, 4)
        for query, (row, excluded) in enumerate(zip(lists, _excluded_sets(split), strict=True)):
            if split.task == "sessions":
                current = _listed(split.queries.pages[query])[-1]
            else:
                current = int(split.train.pages[split.train.users == split.queries.users[query]][-1])
            assert set(_listed(row)) <= links[current]
            allowed = sorted(links[current] - excluded, key=lambda page: (-counts[page], page))
            assert _listed(row) == allowed[:4]


# -------------------------------------------------------------------------------------------- random


def _independent_users(queries: int, size: int, seed: int):
    """One training view and one later view per user, so every user is a query."""
    rng = np.random.default_rng(seed)
    users = np.repeat(np.arange(queries), 2)
    pages = rng.integers(0, size, 2 * queries)
    times = np.tile([0.0, 10.0], queries)
    return users, pages, times


@pytest.mark.parametrize("k", [5, 12])  # k = 5 draws pages i.i.d.; k = 12 sorts random keys: both uniform
def test_random_pages_are_seeded_and_uniform(k):
    size = 20
    users, pages, times = _independent_users(3000, size, 9)
    split = temporal_split(users, pages, times, size, cutoff=5.0, new_only=False)
    lists = RandomPages(seed=1).recommend(split, k)
    assert np.array_equal(lists, RandomPages(seed=1).recommend(split, k))
    assert not np.array_equal(lists, RandomPages(seed=2).recommend(split, k))
    check_recommendations(split, lists, k)
    # chi-square goodness of fit against the uniform distribution (scipy.stats; p > 0.001: common practice)
    assert scipy.stats.chisquare(np.bincount(lists.ravel(), minlength=size)).pvalue > 1e-3
    assert scipy.stats.chisquare(np.bincount(lists[:, 0], minlength=size)).pvalue > 1e-3


def test_random_pages_leave_out_excluded_pages_and_list_all_when_few_remain():
    users = np.array([0] * 18 + [0, 1, 1])
    pages = np.array(list(range(18)) + [19, 3, 4])
    times = np.array([0.0] * 18 + [10.0, 0.0, 10.0])
    split = temporal_split(users, pages, times, 20, cutoff=5.0)
    lists = RandomPages(seed=0).recommend(split, 5)
    assert sorted(_listed(lists[0])) == [18, 19] and lists[0, 2:].tolist() == [-1, -1, -1]
    assert 3 not in lists[1] and len(_listed(lists[1])) == 5


# --------------------------------------------------------------------------------- one interface


class _Dummy:
    """A stand-in for any other method: records what it is given and lists nothing."""

    name = "dummy"

    def __init__(self):
        self.seen = []

    def recommend(self, split, k):
        self.seen.append(split)
        return np.full((len(split.queries), k), -1, dtype=np.int64)


def _methods(size: int, seed: int):
    return [
        RandomPages(seed=seed),
        MostRead(),
        GlobalPageRank(_random_graph(size, seed)),
        OutLinks(_random_graph(size, seed)),
        CoVisitation(),
        TeamMostRead(np.arange(40) % 3),
    ]


@pytest.mark.parametrize("task", ["temporal", "sessions"])
def test_every_method_sees_the_same_split_and_never_its_answers(task):
    users, pages, times, size = _random_views(10)
    make = {"temporal": temporal_split, "sessions": session_split}[task]
    split = make(users, pages, times, size)
    again = make(users, pages, times, size)
    assert np.array_equal(split.queries.users, again.queries.users)
    assert (split.relevant != again.relevant).nnz == 0  # deterministic: a rerun gives the same task
    before = [array.copy() for array in (split.train.pages, split.queries.pages, split.relevant.data)]
    blind = dataclasses.replace(
        split,
        relevant=sp.csr_array(split.relevant.shape),
        held_out=Views(*(np.zeros(0, t) for t in (int, int, float)), size),
    )
    dummy = _Dummy()
    for method in [*_methods(size, 10), dummy]:
        lists = check_recommendations(split, method.recommend(split, 10), 10)
        assert np.array_equal(lists, method.recommend(blind, 10)), method.name  # answers are never read
        assert lists.shape == (len(split.queries), 10)
    assert dummy.seen == [split, blind]
    after = [split.train.pages, split.queries.pages, split.relevant.data]
    assert all(np.array_equal(a, b) for a, b in zip(before, after, strict=True))


@settings(max_examples=25, deadline=None)
@given(st.integers(0, 2**32 - 1))
def test_changing_the_test_period_changes_no_baseline_list(seed):
    users, pages, times, size = _random_views(seed % 1000, views=300)
    cutoff = 14_000.0
    later = times >= cutoff
    shuffled = pages.copy()
    shuffled[later] = np.random.default_rng(seed).integers(0, size, int(later.sum()))
    first = temporal_split(users, pages, times, size, cutoff=cutoff)
    second = temporal_split(users, shuffled, times, size, cutoff=cutoff)
    common, rows_first, rows_second = np.intersect1d(
        first.queries.users, second.queries.users, return_indices=True
    )
    for method in _methods(size, 0):
        if method.name == "random":
            continue  # its draws depend on the number of queries, not on the test period
        a, b = method.recommend(first, 6), method.recommend(second, 6)
        assert np.array_equal(a[rows_first], b[rows_second]), method.name


def test_check_recommendations_refuses_broken_lists():
    split = temporal_split([0, 0, 0], [0, 1, 2], [0.0, 1, 9], 4, cutoff=5.0)
    check_recommendations(split, np.array([[2, 3]]), 2)
    broken = (([[2, 2]], "repeat"), ([[0, 2]], "excluded"), ([[-1, 2]], "tail"), ([[2, 9]], "outside"))
    for bad, reason in broken:
        with pytest.raises(ValueError, match=reason):
            check_recommendations(split, np.array(bad), 2)


# ------------------------------------------------------------------------------------------ Wikispeedia


def _wikispeedia_views():
    """Unfinished Wikispeedia paths as views: one reader per hashed IP, one session per path.

    Format (../shared/data/wikispeedia/SOURCE.md): tab-separated hashedIpAddress, timestamp, duration, path
    (``;``-separated, ``<`` = a back click, which views the previous page again), target, type.
    Steps of one path are 1 ms apart; paths of one reader start whole seconds apart, so with a gap of 0.5 s
    every path is its own session.
    """
    paths = require_shared("wikispeedia", "paths_unfinished.tsv")
    links = require_shared("wikispeedia", "links.tsv")
    articles = require_shared("wikispeedia", "articles.tsv")
    names = [line.rstrip("\n") for line in articles.read_text(encoding="utf-8").splitlines()[1:] if line]
    number = {name: index for index, name in enumerate(names)}
    readers: dict[str, int] = {}
    users, pages, times = [], [], []
    for line in paths.read_text(encoding="utf-8").splitlines():
        fields = line.split("\t")
        reader = readers.setdefault(fields[0], len(readers))
        trail: list[str] = []
        for step, token in enumerate(fields[3].split(";")):
            if token == "<":
                trail.pop()
            else:
                trail.append(token)
            users.append(reader)
            pages.append(number[trail[-1]])
            times.append(float(fields[1]) + step / 1000.0)
    edges = [line.split("\t") for line in links.read_text(encoding="utf-8").splitlines()[1:] if line]
    rows = [number[source] for source, _ in edges]
    columns = [number[target] for _, target in edges]
    adjacency = sp.csr_array((np.ones(len(rows)), (rows, columns)), shape=(len(names), len(names)))
    return np.array(users), np.array(pages), np.array(times), adjacency, len(readers)


@pytest.mark.slow
def test_wikispeedia_next_pages_end_to_end(record_property):
    users, pages, times, adjacency, readers = _wikispeedia_views()
    size = adjacency.shape[0]
    order = np.lexsort((times, users))
    starts = np.unique(np.stack([users, np.floor(times)]), axis=1).shape[1]  # distinct (reader, path start)
    assert session_numbers(users[order], times[order], 0.5).max() + 1 == starts
    split = session_split(users, pages, times, size, gap=0.5)
    assert len(split.queries) > 1000 and split.relevant.shape == (len(split.queries), size)
    methods = [
        RandomPages(seed=0),
        MostRead(),
        GlobalPageRank(adjacency),
        OutLinks(adjacency),
        CoVisitation(),
        TeamMostRead(np.arange(readers) % 16),  # invented grouping: 16 teams by reader number
    ]
    results = {}
    for method in methods:
        lists = check_recommendations(split, method.recommend(split, 10), 10)
        scores = evaluate_lists(lists, split.relevant, ks=(10,))
        results[method.name] = {name: float(np.nanmean(values)) for name, values in scores.items()}
        record_property(method.name, results[method.name])
    assert results["out-links"]["hit_rate@10"] > results["random"]["hit_rate@10"]
    assert results["co-visitation"]["hit_rate@10"] > results["random"]["hit_rate@10"]

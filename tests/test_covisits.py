"""Reading neighbours of the related-list ranker (rankrec.ranker.covisits) against direct definitions."""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.metrics.pairwise import cosine_similarity

from rankrec.profiles import ViewLog
from rankrec.ranker.covisits import MAX_SESSION_PAGES, covisited_pages, session_successors
from rankrec.ranker.features import FEATURES, Signals, candidate_pool, pair_features


def _random_views(seed: int, users: int = 6, views: int = 40, size: int = 12):
    rng = np.random.default_rng(seed)
    return ViewLog(
        rng.integers(0, users, views), rng.integers(-1, size, views), np.sort(rng.uniform(0, 5_000, views))
    )


def _sessions(views: ViewLog, gap: float) -> list[list[int]]:
    """Each session's pages in viewing order, cut by hand (reader change or a pause over ``gap``; views
    of pages outside the wiki left out first)."""
    found, last = [], None
    rows = zip(views.users.tolist(), views.pages.tolist(), views.times.tolist(), strict=True)
    for user, page, time in rows:
        if page < 0:
            continue
        if last is None or user != last[0] or time - last[1] > gap:
            found.append([])
        last = (user, time)
        found[-1].append(page)
    return [pages for pages in found if len(set(pages)) <= MAX_SESSION_PAGES]


@settings(max_examples=30, deadline=None)
@given(seed=st.integers(0, 10_000), gap=st.sampled_from([60.0, 600.0, 3_000.0]))
def test_session_successors_follow_their_definition(seed, gap):
    # pairwise sequential rules (Ludewig & Jannach 2018, session-based recommendation; from memory) with
    # every later page weighted 1: share of the sessions reading a that first read b after a's first view
    views, size = _random_views(seed), 12
    expected = np.zeros((size, size))
    readers = np.zeros(size)
    for pages in _sessions(views, gap):
        first = list(dict.fromkeys(pages))  # first views, in order
        for position, page in enumerate(first):
            readers[page] += 1
            for later in first[position + 1 :]:
                expected[page, later] += 1
    expected = np.divide(expected, readers[:, None], out=np.zeros_like(expected), where=readers[:, None] > 0)
    found = session_successors(views, size, gap=gap, top=size, minimum=1)
    dense = np.zeros((size, size)) if found is None else found.toarray()
    assert np.allclose(dense, expected, atol=1e-6)


@settings(max_examples=30, deadline=None)
@given(seed=st.integers(0, 10_000), top=st.integers(1, 12))
def test_covisited_pages_are_the_cosine_of_session_columns_pruned_to_the_strongest(seed, top):
    # cosine over the binary sessions x pages matrix: scikit-learn's cosine_similarity as the reference
    views, size, gap = _random_views(seed), 12, 600.0
    sessions = _sessions(views, gap)
    binary = np.zeros((max(len(sessions), 1), size))
    for row, pages in enumerate(sessions):
        binary[row, pages] = 1.0
    reference = cosine_similarity(binary.T)
    np.fill_diagonal(reference, 0.0)
    found = covisited_pages(views, size, gap=gap, top=top)
    dense = np.zeros((size, size)) if found is None else found.toarray()
    for page in range(size):
        kept = np.flatnonzero(dense[page])
        assert kept.size == min(top, np.count_nonzero(reference[page] > 1e-9))
        assert np.allclose(dense[page, kept], reference[page, kept], atol=1e-6)
        if kept.size:  # nothing left out is stronger than what was kept
            assert reference[page][dense[page] == 0].max(initial=0) <= dense[page, kept].min() + 1e-6


def test_reading_neighbours_join_the_candidates_and_their_features():
    size = 8
    forward = sp.csr_array(np.eye(size, k=1))
    views = ViewLog(np.zeros(6, dtype=np.int64), np.array([0, 5, 6, 0, 5, 3]), np.arange(6.0) * 10)
    covisited = covisited_pages(views, size, gap=100)
    successors = session_successors(views, size, gap=100, minimum=1)
    signals = Signals(
        forward=forward,
        backward=sp.csr_array(forward.T),
        global_vector=np.full(size, 1 / size),
        space=np.zeros(size, dtype=np.int32),
        views=np.zeros(size),
        archived=np.zeros(size, dtype=bool),
        chrome_in_share=np.zeros(size),
        covisited=covisited,
        successors=successors,
    )
    pool = candidate_pool(signals, 0, np.array([1]), np.array([1.0]), pool=5)
    assert {5, 6, 3} <= set(pool.tolist())  # read with page 0, though never linked from it
    features = pair_features(signals, 0, pool, np.array([1]), np.array([1.0]))
    column = {name: number for number, name in enumerate(FEATURES)}
    shown = dict(zip(pool.tolist(), features[:, column["goes_on"]].tolist(), strict=True))
    # one session read 0 twice: 5, 6 and 3 came after its first view; page 1 never did
    assert shown[5] == shown[6] == shown[3] == 1.0 and shown[1] == 0.0
    assert features[pool.tolist().index(1), column["covisit"]] == 0.0


def test_successor_pairs_read_by_fewer_than_the_minimum_of_sessions_are_dropped():
    # k-anonymity (Sweeney 2002): a pair seen in fewer than `minimum` sessions tells of single readers
    sessions = [[0, 1]] * 5 + [[0, 2]] * 4  # 0 -> 1 in five sessions, 0 -> 2 in four
    users = np.repeat(np.arange(len(sessions)), 2)
    pages = np.array([page for pair in sessions for page in pair])
    views = ViewLog(users, pages, np.tile([0.0, 1.0], len(sessions)))
    found = session_successors(views, 3, gap=10, minimum=5).toarray()
    assert found[0, 1] == np.float32(5 / 9) and found[0, 2] == 0.0
    assert session_successors(views, 3, gap=10, minimum=6) is None

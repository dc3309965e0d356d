"""Collaborative baselines against their published definitions, computed directly with dense numpy.

Outside sources:
- RP3beta: Paudel, Christoffel, Newell & Bernstein 2017, "Updatable, accurate, diverse, and scalable
  recommendations for interactive applications", ACM TiiS (transition probabilities raised to alpha,
  divided by the target's popularity to the power beta; alpha = 1, beta = 0 is the plain random walk).
- EASE: Steck 2019, "Embarrassingly shallow autoencoders for sparse data", WWW (closed form
  B = I - P / diag(P) with P = (XᵀX + λI)⁻¹, the minimiser of ‖X - XB‖² + λ‖B‖² with diag(B) = 0).
- item-kNN: Sarwar, Karypis, Konstan & Riedl 2001, "Item-based collaborative filtering recommendation
  algorithms", WWW (cosine similarity of item columns); scikit-learn's ``cosine_similarity`` as the
  reference cosine; the shrink term in the denominator is common practice.
- Sessions are cut here by a plain Python loop (a new session when the reader changes or more than the gap
  passes), the rule stated in :func:`rankrec.evaluate.splits.session_numbers`.
"""

from __future__ import annotations

import dataclasses

import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.metrics.pairwise import cosine_similarity

from rankrec.evaluate.baselines import check_recommendations
from rankrec.evaluate.collaborative import (
    EASE,
    ItemKNN,
    RP3beta,
    ease_weights,
    interactions,
    item_similarity,
    rp3beta_similarity,
)
from rankrec.evaluate.links import held_out_links_split
from rankrec.evaluate.splits import Views, excluded_pages, session_split, temporal_split
from tests.evaluate.test_baselines import _random_views as random_views

GAP = 1800.0

# ------------------------------------------------------------------------------------------- helpers


def _random_views(seed: int, views: int = 500, users: int = 25, pages: int = 20, span: float = 20_000.0):
    return random_views(seed, views=views, users=users, pages=pages, span=span)


def _reference_sessions(views: Views, gap: float, max_pages: int | None) -> np.ndarray:
    """Binary sessions × pages, cut by a plain loop over the views (ordered by user, then time)."""
    sessions: list[set[int]] = []
    previous = None
    for user, page, time in zip(
        views.users.tolist(), views.pages.tolist(), views.times.tolist(), strict=True
    ):
        if previous is None or user != previous[0] or time - previous[1] > gap:
            sessions.append(set())
        sessions[-1].add(page)
        previous = (user, time)
    kept = [pages for pages in sessions if max_pages is None or len(pages) <= max_pages]
    matrix = np.zeros((len(kept), views.size))
    for row, pages in enumerate(kept):
        matrix[row, sorted(pages)] = 1.0
    return matrix


def _toy_split(matrix: np.ndarray, seed: int, *, prefix: int = 2, test_sessions: int = 12):
    """A session split whose training sessions are exactly the rows of the binary ``matrix`` (one reader
    per row, views a second apart) and whose test sessions view random pages after the cutoff."""
    rng = np.random.default_rng(seed)
    rows, pages = np.nonzero(matrix)
    times = rows * 100_000.0 + np.arange(rows.size)
    cutoff = float(matrix.shape[0]) * 100_000.0
    size = matrix.shape[1]
    test_users, test_pages, test_times = [], [], []
    for number in range(test_sessions):
        chosen = rng.choice(size, size=prefix + 2, replace=False)
        test_users += [matrix.shape[0] + number] * chosen.size
        test_pages += chosen.tolist()
        test_times += (cutoff + number * 100_000.0 + np.arange(chosen.size)).tolist()
    return session_split(
        np.concatenate([rows, np.array(test_users, dtype=np.int64)]),
        np.concatenate([pages, np.array(test_pages, dtype=np.int64)]),
        np.concatenate([times, test_times]),
        size,
        cutoff=cutoff,
        prefix=prefix,
        gap=GAP,
    )


def _toy_matrix(seed: int, users: int = 8, items: int = 7, density: float = 0.45) -> np.ndarray:
    """Random binary users × items; every row holds an item; the last item is never held."""
    rng = np.random.default_rng(seed)
    matrix = (rng.random((users, items)) < density).astype(np.float64)
    matrix[np.arange(users), rng.integers(0, items - 1, users)] = 1.0
    matrix[:, -1] = 0.0
    return matrix


def _seed_matrix(split) -> np.ndarray:
    """Queries × pages, 1 at each prefix page (session tasks)."""
    seeds = np.zeros((len(split.queries), split.size))
    for row, prefix in enumerate(split.queries.pages):
        seeds[row, prefix[prefix >= 0]] = 1.0
    return seeds


def _excluded_sets(split) -> list[set[int]]:
    matrix = excluded_pages(split)
    bounds = zip(matrix.indptr[:-1], matrix.indptr[1:], strict=True)
    return [set(matrix.indices[a:b].tolist()) for a, b in bounds]


def _expected(scores: np.ndarray, excluded: set[int], k: int, allowed=None) -> list[int]:
    """Highest score first, ties to the lower page; only positive scores unless ``allowed`` says which."""
    pages = range(scores.size)
    keep = [p for p in pages if (scores[p] > 0 if allowed is None else allowed[p]) and p not in excluded]
    return sorted(keep, key=lambda page: (-scores[page], page))[:k]


def _listed(row) -> list[int]:
    return [int(page) for page in row if page >= 0]


def _assert_ranked(lists, scores, split, k, allowed=None, digits=None):
    """Each row lists the top ``k`` of its reference scores: the same length and, position by position,
    the same score as the reference order (pages whose scores tie up to rounding may swap: to ``digits``
    decimal digits of the row's largest score when given)."""
    for row, (found, excluded) in enumerate(zip(lists, _excluded_sets(split), strict=True)):
        expected = _expected(scores[row], excluded, k, allowed)
        found = _listed(found)
        assert len(found) == len(expected), row
        assert not set(found) & excluded
        atol = 1e-12 if digits is None else 10.0**-digits * np.abs(scores[row]).max()
        np.testing.assert_allclose(scores[row][found], scores[row][expected], rtol=1e-9, atol=atol)


# ---------------------------------------------------------------------------------- the interactions


def test_session_rows_equal_the_sessions_cut_by_a_loop_and_long_sessions_are_left_out():
    for seed in range(4):
        users, pages, times, size = _random_views(seed)
        split = temporal_split(users, pages, times, size, cutoff=15_000.0)
        for max_pages in (None, 3, 100):
            expected = _reference_sessions(split.train, GAP, max_pages)
            found = interactions(split, gap=GAP, max_session_pages=max_pages).toarray()
            np.testing.assert_array_equal(found, expected)
        everything = _reference_sessions(split.train, GAP, None)
        assert (everything.sum(axis=1) > 3).any()  # so the bound of 3 did leave sessions out


def test_session_rows_follow_the_splits_own_gap():
    users, pages, times, size = _random_views(7)
    split = session_split(users, pages, times, size, gap=600.0, cutoff=15_000.0)
    expected = _reference_sessions(split.train, 600.0, 100)
    np.testing.assert_array_equal(interactions(split).toarray(), expected)
    assert expected.shape != _reference_sessions(split.train, GAP, 100).shape  # the gap matters here


def _graph(size: int, p: float, seed: int) -> sp.csr_array:
    graph = nx.gnp_random_graph(size, p, seed=seed, directed=True)  # Erdős–Rényi G(n, p)
    return sp.csr_array(nx.to_scipy_sparse_array(graph, nodelist=range(size), dtype=np.float64))


@settings(max_examples=25, deadline=None)
@given(
    size=st.integers(min_value=8, max_value=30),
    p=st.floats(min_value=0.15, max_value=0.6),
    seed=st.integers(min_value=0, max_value=10_000),
)
def test_link_rows_are_each_page_and_its_out_links_and_hold_no_hidden_link(size, p, seed):
    links = _graph(size, p, seed)
    links.data = 1.0 + np.arange(links.nnz) % 3  # weighted links: the rows are binary all the same
    split = held_out_links_split(links, share=0.3, seed=seed, min_links=2)
    before = split.links.toarray().copy()
    found = interactions(split).toarray()
    expected = ((split.links.toarray() != 0) | np.eye(size, dtype=bool)).astype(np.float64)
    np.testing.assert_array_equal(found, expected)  # no training views: only the link rows
    np.testing.assert_array_equal(split.links.toarray(), before)  # the split's matrix is left untouched
    original = links.toarray() != 0
    for query, page in enumerate(split.queries.pages[:, 0].tolist()):
        hidden = split.relevant.indices[split.relevant.indptr[query] : split.relevant.indptr[query + 1]]
        assert original[page, hidden].all()  # they were links of the page...
        assert not found[page, hidden].any()  # ...that its row does not hold


def test_adjacency_adds_link_rows_after_the_sessions_of_a_reading_task():
    users, pages, times, size = _random_views(3)
    split = temporal_split(users, pages, times, size, cutoff=15_000.0)
    adjacency = _graph(size, 0.2, 3)
    found = interactions(split, adjacency, gap=GAP).toarray()
    sessions = _reference_sessions(split.train, GAP, 100)
    baskets = ((adjacency.toarray() != 0) | np.eye(size, dtype=bool)).astype(np.float64)
    np.testing.assert_array_equal(found, np.vstack([sessions, baskets]))


# ------------------------------------------------------------------------------------------- RP3beta


def _rp3beta_reference(matrix: np.ndarray, alpha: float, beta: float) -> np.ndarray:
    """W by the definition of Paudel et al. 2017, dense: (P_iu ** alpha) @ (P_ui ** alpha) / pop ** beta."""
    popularity = matrix.sum(axis=0)
    user_item = matrix / matrix.sum(axis=1, keepdims=True)
    item_user = np.divide(
        matrix.T, popularity[:, None], out=np.zeros_like(matrix.T), where=popularity[:, None] > 0
    )
    weights = (item_user**alpha) @ (user_item**alpha)
    weights = weights / np.where(popularity > 0, popularity, 1.0) ** beta
    np.fill_diagonal(weights, 0.0)
    return weights


@pytest.mark.parametrize(("alpha", "beta"), [(0.8, 0.4), (0.5, 0.6)])
def test_rp3beta_weights_and_lists_follow_the_definition(alpha, beta):
    for seed in range(5):
        matrix = _toy_matrix(seed)
        reference = _rp3beta_reference(matrix, alpha, beta)
        found = rp3beta_similarity(matrix, alpha=alpha, beta=beta, neighbours=None).toarray()
        np.testing.assert_allclose(found, reference, rtol=1e-12, atol=1e-15)
        split = _toy_split(matrix, seed)
        lists = RP3beta(alpha=alpha, beta=beta).recommend(split, 4)
        check_recommendations(split, lists, 4)
        _assert_ranked(lists, _seed_matrix(split) @ reference, split, 4)


def test_rp3beta_with_alpha_one_and_beta_zero_is_the_three_step_random_walk():
    for seed in range(5):
        matrix = _toy_matrix(seed)
        split = _toy_split(matrix, seed)
        users, items = matrix.shape
        # the walk on the bipartite graph (users first, then items), one uniform step from each node
        graph = np.block([[np.zeros((users, users)), matrix], [matrix.T, np.zeros((items, items))]])
        degree = graph.sum(axis=1, keepdims=True)
        step = np.divide(graph, degree, out=np.zeros_like(graph), where=degree > 0)
        seeds = _seed_matrix(split)
        start = np.hstack([np.zeros((seeds.shape[0], users)), seeds / seeds.sum(axis=1, keepdims=True)])
        walk = (start @ np.linalg.matrix_power(step, 2))[:, users:]  # item -> user -> item
        lists = RP3beta(alpha=1.0, beta=0.0).recommend(split, 4)
        _assert_ranked(lists, walk, split, 4)  # seeds are excluded, so the walk's return to them is moot


def test_rp3beta_keeps_each_items_strongest_targets():
    matrix = _toy_matrix(11, users=12, items=9)
    reference = _rp3beta_reference(matrix, 0.8, 0.2)
    found = rp3beta_similarity(matrix, alpha=0.8, beta=0.2, neighbours=2)
    assert (np.diff(found.indptr) <= 2).all()
    for row in range(matrix.shape[1]):
        kept = found[[row]].toarray().ravel()
        strongest = np.sort(reference[row][reference[row] > 0])[::-1][:2]
        np.testing.assert_allclose(np.sort(kept[kept > 0])[::-1], strongest, rtol=1e-12)
        assert (reference[row][kept > 0] >= (strongest[-1] if strongest.size else 0) - 1e-12).all()


def test_ties_go_to_the_lower_page():
    # items 1 and 3 are held by the same rows, so every method gives them equal scores from item 0
    matrix = np.array([[1, 1, 0, 1, 0], [1, 1, 1, 1, 0], [0, 0, 1, 0, 1], [1, 0, 0, 0, 1]], dtype=float)
    split = _toy_split(matrix, 0, prefix=1, test_sessions=0)
    split = dataclasses.replace(
        split,
        queries=dataclasses.replace(
            split.queries, users=np.array([9]), times=np.array([1e9]), pages=np.array([[0]])
        ),
    )
    for method in (ItemKNN(), RP3beta(), EASE(lam=1.0)):
        row = _listed(method.recommend(split, 4)[0])
        assert row.index(1) == row.index(3) - 1, method.name


# ---------------------------------------------------------------------------------------------- EASE


def _ease_reference(matrix: np.ndarray, lam: float) -> tuple[np.ndarray, np.ndarray]:
    """B of Steck 2019 over the items some row holds, by np.linalg.inv."""
    active = np.flatnonzero(matrix.sum(axis=0))
    chosen = matrix[:, active]
    inverse = np.linalg.inv(chosen.T @ chosen + lam * np.eye(active.size))
    weights = np.eye(active.size) - inverse / np.diag(inverse)[None, :]
    np.fill_diagonal(weights, 0.0)
    return active, weights


@pytest.mark.parametrize("lam", [0.5, 10.0, 500.0])
def test_ease_weights_equal_the_closed_form_and_solve_the_constrained_problem(lam):
    for seed in range(4):
        matrix = _toy_matrix(seed, users=15, items=9)
        active, found = ease_weights(matrix, lam)
        expected_active, expected = _ease_reference(matrix, lam)
        np.testing.assert_array_equal(active, expected_active)
        np.testing.assert_allclose(found, expected, rtol=1e-9, atol=1e-12)
        assert np.all(np.diag(found) == 0.0)
        chosen = matrix[:, active]
        gram = chosen.T @ chosen
        # stationarity of ‖X - XB‖² + λ‖B‖² + Σ_j μ_j B_jj: (XᵀX + λI)B - XᵀX is diagonal
        gradient = (gram + lam * np.eye(active.size)) @ found - gram
        off = ~np.eye(active.size, dtype=bool)
        np.testing.assert_allclose(gradient[off], 0.0, atol=1e-9 * max(1.0, np.abs(gram).max()))
        # and column j is the ridge regression of item j on the other items
        for column in range(active.size):
            others = np.delete(np.arange(active.size), column)
            ridge = np.linalg.solve(
                gram[np.ix_(others, others)] + lam * np.eye(others.size), gram[others, column]
            )
            np.testing.assert_allclose(found[others, column], ridge, rtol=1e-8, atol=1e-12)


def test_ease_lists_rank_every_active_item_by_score_of_either_sign():
    for seed in range(5):
        matrix = _toy_matrix(seed)
        active, weights = _ease_reference(matrix, 2.0)
        split = _toy_split(matrix, seed)
        scores = np.zeros((len(split.queries), split.size))
        scores[:, active] = _seed_matrix(split)[:, active] @ weights
        allowed = np.zeros(split.size, dtype=bool)
        allowed[active] = True
        lists = EASE(lam=2.0).recommend(split, 5)
        check_recommendations(split, lists, 5)
        for row, prefix in enumerate(split.queries.pages):
            if not np.isin(prefix, active).any():  # no evidence at all: nothing listed
                assert (lists[row] == -1).all()
                scores[row] = 0.0
        has_seed = np.isin(split.queries.pages, active).any(axis=1)
        _assert_ranked(lists[has_seed], scores[has_seed], _subset(split, has_seed), 5, allowed, digits=9)
        assert (scores[has_seed] < 0).any()  # negative scores were there to rank


def _subset(split, rows):
    queries = split.queries
    chosen = dataclasses.replace(
        queries, users=queries.users[rows], times=queries.times[rows], pages=queries.pages[rows]
    )
    return dataclasses.replace(
        split, queries=chosen, relevant=sp.csr_array(split.relevant[np.flatnonzero(rows)])
    )


def test_ease_is_refused_above_its_bound_of_items():
    matrix = _toy_matrix(1)
    split = _toy_split(matrix, 1)
    items = int((matrix.sum(axis=0) > 0).sum())
    assert EASE(max_items=items).applicable(split)[0]
    fits, message = EASE(max_items=items - 1).applicable(split)
    assert not fits and message.startswith("EASE skipped:") and f"{items:,} items" in message
    with pytest.raises(ValueError, match="EASE skipped"):
        EASE(max_items=items - 1).recommend(split, 3)


# ------------------------------------------------------------------------------------------ item-kNN


def test_item_similarity_equals_scikit_learn_cosine_and_the_shrunk_formula():
    for seed in range(4):
        matrix = _toy_matrix(seed, users=14, items=9)
        cosine = cosine_similarity(matrix.T)  # scikit-learn: cosine of the item columns
        np.fill_diagonal(cosine, 0.0)
        found = item_similarity(matrix, neighbours=None).toarray()
        np.testing.assert_allclose(found, cosine, rtol=1e-12, atol=1e-15)
        counts = matrix.T @ matrix
        norms = np.sqrt(np.diag(counts))
        shrunk = counts / (np.outer(norms, norms) + 10.0)  # Sarwar et al. 2001 cosine, shrink added
        np.fill_diagonal(shrunk, 0.0)
        found = item_similarity(matrix, shrink=10.0, neighbours=None).toarray()
        np.testing.assert_allclose(found, shrunk, rtol=1e-12, atol=1e-15)


def test_item_knn_lists_follow_summed_cosines():
    for seed in range(5):
        matrix = _toy_matrix(seed)
        split = _toy_split(matrix, seed)
        cosine = cosine_similarity(matrix.T)
        np.fill_diagonal(cosine, 0.0)
        lists = ItemKNN().recommend(split, 4)
        check_recommendations(split, lists, 4)
        _assert_ranked(lists, _seed_matrix(split) @ cosine, split, 4)


def test_item_knn_on_a_user_task_starts_from_the_last_training_views():
    users, pages, times, size = _random_views(5)
    split = temporal_split(users, pages, times, size, cutoff=15_000.0)
    matrix = _reference_sessions(split.train, GAP, 100)
    counts = matrix.T @ matrix
    norms = np.sqrt(np.diag(counts))
    similar = np.divide(counts, np.outer(norms, norms) + 2.0)
    np.fill_diagonal(similar, 0.0)
    seeds = np.zeros((len(split.queries), size))
    for row, user in enumerate(split.queries.users):
        seeds[row, split.train.pages[split.train.users == user][-3:]] = 1.0  # views are in time order
    lists = ItemKNN(shrink=2.0, neighbours=size).recommend(split, 6)
    check_recommendations(split, lists, 6)
    _assert_ranked(lists, seeds @ similar, split, 6)


# ------------------------------------------------------------------------------------- one interface


def _splits():
    users, pages, times, size = _random_views(21, views=800)
    links = _graph(size, 0.25, 21)
    return [
        temporal_split(users, pages, times, size, cutoff=15_000.0),
        session_split(users, pages, times, size, cutoff=15_000.0, prefix=2),
        held_out_links_split(links, share=0.3, seed=21, min_links=3),
    ]


def _methods():
    return [ItemKNN(), ItemKNN(neighbours=2, shrink=10.0), RP3beta(), RP3beta(alpha=0.5, beta=0.0), EASE()]


@pytest.mark.parametrize("task", range(3))
def test_every_method_lists_allowed_pages_deterministically_and_never_reads_the_answers(task):
    split, again = _splits()[task], _splits()[task]
    blind = dataclasses.replace(
        split,
        relevant=sp.csr_array(split.relevant.shape),
        held_out=Views(*(np.zeros(0, t) for t in (int, int, float)), split.size),
    )
    for method in _methods():
        lists = check_recommendations(split, method.recommend(split, 8), 8)
        assert (lists >= 0).any(), method.name
        assert np.array_equal(lists, method.recommend(split, 8)), method.name
        assert np.array_equal(lists, method.recommend(again, 8)), method.name
        assert np.array_equal(lists, method.recommend(blind, 8)), method.name


def test_pages_never_consumed_are_never_listed_and_queries_without_evidence_list_nothing():
    matrix = _toy_matrix(4)
    split = _toy_split(matrix, 4, prefix=1, test_sessions=20)
    never = matrix.shape[1] - 1  # no training row holds it
    for method in (ItemKNN(), RP3beta(), EASE()):
        lists = method.recommend(split, 6)
        assert never not in lists, method.name
        alone = split.queries.pages[:, 0] == never
        assert alone.any() and (lists[alone] == -1).all(), method.name


def test_grids_sweep_distinct_names_of_one_family():
    sizes = {ItemKNN: 6, RP3beta: 12, EASE: 4}
    for cls, size in sizes.items():
        grid = cls.grid()
        assert len(grid) == size and len({method.name for method in grid}) == size
        assert {method.family for method in grid} == {cls.family} == {cls().name}
    assert RP3beta(alpha=0.8, beta=0.4, name="x").family == "RP3beta"
    assert "RP3beta α=0.8 β=0.4" in {method.name for method in RP3beta.grid()}


def test_evaluation_tunes_each_family_on_validation_and_tests_the_chosen_point_under_its_family_name():
    from rankrec.evaluate.metrics import ndcg
    from rankrec.evaluate.run import _tune
    from rankrec.evaluate.sweeps import validation_split

    users, pages, times, size = _random_views(3, views=900, users=40)
    split = session_split(users, pages, times, size, gap=600.0, test_share=0.3, prefix=1)
    validation = validation_split(split)
    seen = []
    chosen, name, scores = _tune(RP3beta.grid(), validation, 10, seen.append)
    # the score of each grid point is its mean nDCG@10 on validation (Järvelin & Kekäläinen 2002)
    for point in RP3beta.grid():
        expected = np.nanmean(ndcg(point.recommend(validation, 10), validation.relevant, 10))
        assert scores[point.name] == pytest.approx(expected)
    assert name == max(scores, key=scores.get) and len(seen) == len(RP3beta.grid())
    assert chosen.name == "RP3beta"
    assert dataclasses.replace(chosen, name=name) in RP3beta.grid()
    default, label, empty = _tune(RP3beta.grid(), None, 10, seen.append)
    assert (default, label, empty) == (RP3beta(name="RP3beta"), "defaults", {})

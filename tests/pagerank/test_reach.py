"""Reverse push and the change bound against personalised PageRank solved from its definition (numpy).

Reference: the strongly-preferential personalised PageRank of seed ``s`` is the row vector
``π_s = (1 − α) e_s (I − α P_s)⁻¹`` with ``P_s`` the row-stochastic link matrix whose dangling rows jump to
``s`` (Langville & Meyer, *Google's PageRank and Beyond*, 2006, ch. 4 and 6); solved here densely with
``numpy.linalg.solve`` for every seed.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st

from rankrec.pagerank import prepare
from rankrec.pagerank.reach import change_bound, changed_pages, changed_rows, mass_on, row_changes

from ._graphs import random_graph


def _exact_all(adjacency: sp.csr_array, damping: float) -> np.ndarray:
    """Row s: π_s for every seed s, from the definition."""
    dense = adjacency.toarray().astype(np.float64)
    n = dense.shape[0]
    out = dense.sum(axis=1)
    vectors = np.zeros((n, n))
    for seed in range(n):
        rows = np.divide(dense, out[:, None], out=np.zeros_like(dense), where=out[:, None] > 0)
        rows[out == 0, seed] = 1.0  # a dangling page jumps back to the seed
        start = np.zeros(n)
        start[seed] = 1.0 - damping
        vectors[seed] = np.linalg.solve((np.eye(n) - damping * rows).T, start)
    return vectors


@st.composite
def _graphs(draw):
    n = draw(st.integers(3, 24))
    seed = draw(st.integers(0, 10_000))
    links = draw(st.integers(n, 5 * n))
    dangling = draw(st.sampled_from([0.0, 0.2, 0.5]))
    return random_graph(n, links, seed=seed, dangling_share=dangling)


@settings(max_examples=40, deadline=None)
@given(_graphs(), st.floats(0.3, 0.95), st.data())
def test_mass_on_a_set_bounds_every_seeds_exact_mass_from_above(adjacency, damping, data):
    n = adjacency.shape[0]
    targets = data.draw(st.lists(st.integers(0, n - 1), min_size=1, max_size=n, unique=True))
    exact = _exact_all(adjacency, damping)[:, targets].sum(axis=1)
    found = mass_on(adjacency, targets, damping=damping, epsilon=1e-10)
    assert found.converged
    assert np.all(found.mass >= exact - 1e-12)  # an upper bound for every seed
    assert np.all(found.mass <= exact + 1e-6)  # and a tight one at this threshold


def test_a_coarse_threshold_still_bounds_from_above():
    adjacency = random_graph(300, 1500, seed=2, dangling_share=0.2)
    targets = np.arange(0, 300, 17)
    exact = _exact_all(adjacency, 0.85)[:, targets].sum(axis=1)
    for epsilon in (1e-2, 1e-3, 1e-4):
        found = mass_on(adjacency, targets, damping=0.85, epsilon=epsilon)
        assert np.all(found.mass >= exact - 1e-12)
        assert found.error <= epsilon
    coarse = mass_on(adjacency, targets, damping=0.85, epsilon=1e-2)
    fine = mass_on(adjacency, targets, damping=0.85, epsilon=1e-5)
    assert fine.pushes > coarse.pushes and np.abs(fine.mass - exact).max() < np.abs(coarse.mass - exact).max()


@settings(max_examples=40, deadline=None)
@given(_graphs(), st.floats(0.3, 0.95), st.data())
def test_the_change_bound_holds_for_every_seed(adjacency, damping, data):
    n = adjacency.shape[0]
    edited = adjacency.tolil(copy=True)
    rows = data.draw(st.lists(st.integers(0, n - 1), min_size=1, max_size=max(1, n // 4), unique=True))
    for row in rows:  # rewrite a few pages' links: new targets, dropped links, or none at all (dangling)
        edited.rows[row], edited.data[row] = [], []
        targets = sorted(set(data.draw(st.lists(st.integers(0, n - 1), max_size=4))))
        for target in targets:
            edited[row, target] = data.draw(st.floats(0.5, 2.0))
    edited = sp.csr_array(edited)
    old, new = prepare(adjacency), prepare(edited)
    changed = changed_rows(old, new, np.arange(n))
    before, after = _exact_all(adjacency, damping), _exact_all(edited, damping)
    truly = np.abs(after - before).sum(axis=1)
    bound = change_bound(new, changed, damping=damping, epsilon=1e-10)
    assert np.all(truly <= bound + 1e-9)  # valid for every seed
    on_changed = after[:, changed].sum(axis=1)
    factor = 2 * damping / (1 - damping)
    assert np.all(bound <= np.minimum(factor * on_changed, 2.0) + 1e-6)  # and no looser than the theory's
    # weighted by how far each row moved: still valid, never looser, and the theory's weighted sum
    distance = row_changes(old, new, np.arange(n))
    weighted = change_bound(new, distance, damping=damping, epsilon=1e-10)
    assert np.all(truly <= weighted + 1e-9)
    assert np.all(weighted <= bound + 1e-6)  # up to the pushes' additive errors
    assert np.all(weighted <= np.minimum(factor / 2 * (after * distance).sum(axis=1), 2.0) + 1e-6)


def test_changed_rows_follow_pages_by_number_mapping():
    # old pages 0..3; the new graph drops old page 2 and adds a page: new numbers 0 -> 1, 1 -> 0, 3 -> 2
    old = prepare(sp.csr_array(([1.0, 1.0, 1.0, 2.0], ([0, 1, 3, 3], [1, 0, 2, 1])), shape=(4, 4)))
    new_of_old = np.array([1, 0, -1, 2])
    # new: page 1 (old 0) -> 0 (old 1) as before; page 0 (old 1) -> 1 as before; page 2 (old 3) lost its
    # link to old page 2 (gone); page 3 is new
    new = prepare(sp.csr_array(([1.0, 1.0, 1.0], ([1, 0, 2], [0, 1, 0])), shape=(4, 4)))
    assert changed_rows(old, new, new_of_old).tolist() == [False, False, True, True]
    weights = prepare(sp.csr_array(([1.0, 1.0, 3.0], ([1, 0, 1], [0, 1, 2])), shape=(4, 4)))
    assert changed_rows(old, weights, new_of_old).tolist() == [False, True, True, True]  # new link of page 1
    with pytest.raises(ValueError, match="one entry per old page"):
        changed_rows(old, new, np.array([0, 1]))


@settings(max_examples=40, deadline=None)
@given(_graphs(), st.data())
def test_changed_pages_are_the_rows_and_columns_that_differ_after_renumbering(adjacency, data):
    """Against the dense definition (numpy): the old matrix moved to the new numbering, compared entry by
    entry; a page on the new side only has changed both ways, a row that held a page now gone too."""
    n = adjacency.shape[0]
    order = np.array(data.draw(st.permutations(range(n))))
    gone = data.draw(st.integers(0, n - 1)) if data.draw(st.booleans()) else None
    new_of_old = order.copy()
    if gone is not None:
        new_of_old[gone] = -1
    edited = adjacency.toarray()
    row = data.draw(st.integers(0, n - 1))
    edited[row, data.draw(st.integers(0, n - 1))] += 1.0  # one more link (or a heavier one)
    moved = np.zeros((n + 1, n + 1))  # one page added at the end of the new numbering
    moved[np.ix_(order, order)] = edited
    new = sp.csr_array(moved)
    rows, columns = changed_pages(adjacency, new, new_of_old)
    before = np.zeros((n + 1, n + 1))
    kept = np.flatnonzero(new_of_old >= 0)
    before[np.ix_(new_of_old[kept], new_of_old[kept])] = adjacency.toarray()[np.ix_(kept, kept)]
    differs = np.abs(moved - before) > 1e-12
    expected_rows, expected_columns = differs.any(axis=1), differs.any(axis=0)
    expected_rows[n] = expected_columns[n] = True  # the added page
    absent = np.ones(n + 1, dtype=bool)
    absent[new_of_old[kept]] = False
    expected_rows |= absent
    expected_columns |= absent
    if gone is not None:  # rows that linked to the page now gone, columns it linked to
        expected_rows[new_of_old[np.flatnonzero(adjacency.toarray()[:, gone] != 0)]] = True
        expected_columns[new_of_old[np.flatnonzero(adjacency.toarray()[gone] != 0)]] = True
    assert rows.tolist() == expected_rows.tolist()
    assert columns.tolist() == expected_columns.tolist()

"""Warm starts: the power iteration begun from the vectors of the graph before an edit reaches the same
answer in fewer steps. Reference: networkx.pagerank (personalisation and dangling jump to the restart,
which is this project's "restart" policy), run to a tight tolerance."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp

from rankrec.pagerank import personalised_pagerank, prepare

from ._graphs import random_graph


def _edited(adjacency: sp.csr_array, share: float, seed: int) -> sp.csr_array:
    """The graph with ``share`` of its pages' links rewritten (new targets and weights)."""
    rng = np.random.default_rng(seed)
    n = adjacency.shape[0]
    edited = adjacency.tolil(copy=True)
    for row in rng.choice(n, max(1, int(share * n)), replace=False).tolist():
        edited.rows[row], edited.data[row] = [], []
        for target in sorted(set(rng.integers(0, n, 3).tolist())):
            edited[row, target] = float(rng.uniform(0.5, 2.0))
    return sp.csr_array(edited)


def _networkx(adjacency: sp.csr_array, damping: float, restart: np.ndarray) -> np.ndarray:
    graph = nx.from_scipy_sparse_array(adjacency, create_using=nx.DiGraph)
    weights = dict(enumerate(restart.tolist()))
    found = nx.pagerank(
        graph, alpha=damping, personalization=weights, dangling=weights, tol=1e-13, max_iter=10_000
    )
    return np.array([found[page] for page in range(adjacency.shape[0])])


@pytest.mark.parametrize("extrapolate", [True, False])
def test_a_warm_start_after_an_edit_takes_fewer_steps_to_the_same_vectors(extrapolate):
    before = random_graph(400, 2400, seed=5, dangling_share=0.1)
    after = _edited(before, 0.01, seed=6)
    rng = np.random.default_rng(7)
    restarts = rng.random((400, 3)) * (rng.random((400, 3)) < 0.05)
    restarts[0] += 1.0  # no empty column
    old = personalised_pagerank(prepare(before), restarts, tol=1e-10, extrapolate=extrapolate)
    cold = personalised_pagerank(prepare(after), restarts, tol=1e-10, extrapolate=extrapolate)
    warm = personalised_pagerank(
        prepare(after), restarts, tol=1e-10, extrapolate=extrapolate, initial=old.vectors
    )
    assert warm.converged and warm.iterations < cold.iterations
    bound = 1e-10 * 0.85 / 0.15  # the stopping rule's error bound, whatever the start
    for column in range(3):
        reference = _networkx(after, 0.85, restarts[:, column] / restarts[:, column].sum())
        assert np.abs(warm.vectors[:, column] - reference).sum() <= bound + 1e-11
        assert np.abs(cold.vectors[:, column] - reference).sum() <= bound + 1e-11


def test_starting_at_the_answer_stops_at_once():
    graph = prepare(random_graph(300, 1500, seed=1))
    solved = personalised_pagerank(graph, tol=1e-12)
    again = personalised_pagerank(graph, tol=1e-9, initial=solved.vectors)
    assert again.iterations == 1
    np.testing.assert_allclose(again.vectors, solved.vectors, atol=1e-9)


def test_a_start_of_the_wrong_shape_or_sign_is_refused():
    graph = prepare(random_graph(50, 200, seed=1))
    with pytest.raises(ValueError, match="initial must have the restart's shape"):
        personalised_pagerank(graph, np.ones((50, 2)), initial=np.ones(50))
    with pytest.raises(ValueError, match="initial must be non-negative"):
        personalised_pagerank(graph, initial=-np.ones(50))

"""Linearity of personalised PageRank in the restart distribution (Jeh & Widom 2003), as a property."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from rankrec.pagerank import combine, personalised_pagerank, solve_exact

from ._graphs import random_graph


@settings(max_examples=60, deadline=None)
@given(
    n=st.integers(2, 25),
    density=st.floats(0.5, 4.0),
    parts=st.integers(1, 4),
    damping=st.floats(0.5, 0.95),
    seed=st.integers(0, 2**32 - 1),
)
def test_combined_leaky_basis_is_the_pagerank_of_the_mix(n, density, parts, damping, seed):
    rng = np.random.default_rng(seed)
    graph = random_graph(n, max(1, int(density * n)), seed=seed, dangling_share=0.3)
    basis = rng.random((n, parts)) * (rng.random((n, parts)) < 0.5)
    basis[rng.integers(0, n, parts), np.arange(parts)] += 1.0  # no all-zero column
    basis /= basis.sum(axis=0)
    weights = rng.random(parts) + 0.01
    leaky = personalised_pagerank(graph, basis, damping=damping, tol=1e-13, leaky=True).vectors
    mix = basis @ weights
    direct = personalised_pagerank(graph, mix, damping=damping, tol=1e-13, dangling="restart").vectors
    np.testing.assert_allclose(combine(leaky, weights), direct, rtol=0, atol=1e-9)
    # and against the direct sparse solve of the strongly-preferential (patched) system
    np.testing.assert_allclose(direct, solve_exact(graph, mix, damping=damping).vectors, rtol=0, atol=1e-9)

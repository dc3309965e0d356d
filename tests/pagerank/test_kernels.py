"""The compiled kernels' housekeeping: lane padding, reused push scratch arrays, calls from many threads."""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pytest

from rankrec.pagerank import personalised_pagerank, prepare, push, solve_exact
from rankrec.pagerank.power import _aligned_zeros, _lanes

from ._graphs import random_graph


@pytest.fixture(scope="module")
def transition():
    return prepare(random_graph(300, 1500, seed=11))


def _restarts(n: int, k: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return rng.random((n, k)) * (rng.random((n, k)) < 0.1) + 1e-3


@pytest.mark.parametrize("k", [1, 2, 3, 5, 8, 16, 17, 33])
@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_every_column_count_matches_the_direct_solve(transition, k, dtype):
    # Reference: scipy's sparse LU (solve_exact). Column counts that are not a whole number of vector
    # lanes are zero-padded inside the kernel; the padding must not leak into any column.
    restart = _restarts(transition.n, k, seed=k)
    tol = 1e-7 if dtype == np.float32 else 1e-10
    found = personalised_pagerank(transition, restart, tol=tol, dtype=dtype, workers=2)
    exact = solve_exact(transition, restart).vectors
    assert found.vectors.shape == (transition.n, k) and found.vectors.dtype == dtype
    # L1 error <= α/(1 − α) · last change (contraction of modulus α); float32 adds rounding (common practice)
    bound = 0.85 / 0.15 * tol + (1e-5 if dtype == np.float32 else 1e-12)
    assert np.abs(found.vectors - exact).sum(axis=0).max() < bound


def test_lanes_and_alignment():
    # one 64-byte cache line holds 16 float32 values: the row update uses at most 16 lanes
    assert [_lanes(k) for k in (1, 2, 3, 5, 9, 16, 17, 40)] == [1, 2, 4, 8, 16, 16, 16, 16]
    block = _aligned_zeros(1000, 16, np.float32)
    assert block.ctypes.data % 64 == 0 and not block.any() and block.flags.c_contiguous


def test_parallel_solves_from_two_threads_agree_with_a_serial_solve(transition):
    # A service may call the solver from several threads; numba's workqueue layer would abort on
    # concurrent parallel regions, so the kernel is serialised. Results must equal the serial solve.
    restart = _restarts(transition.n, 16, seed=3)
    serial = personalised_pagerank(transition, restart, tol=1e-10, workers=1).vectors
    with ThreadPoolExecutor(max_workers=4) as pool:
        results = list(
            pool.map(
                lambda _: personalised_pagerank(transition, restart, tol=1e-10, workers=2).vectors, range(8)
            )
        )
    for vectors in results:
        assert np.abs(vectors - serial).sum(axis=0).max() < 1e-12


def test_push_repeated_calls_are_identical_and_leave_clean_scratch(transition):
    # The scratch arrays are reused across calls; a stale entry would change the next answer.
    first = push(transition, 5, epsilon=1e-7)
    push(transition, {7: 1.0, 40: 2.0}, epsilon=1e-5)
    again = push(transition, 5, epsilon=1e-7)
    assert np.array_equal(first.vector.coords[0], again.vector.coords[0])
    assert np.array_equal(first.vector.data, again.vector.data)
    assert first.residual_mass == again.residual_mass and first.pushes == again.pushes
    workspace = transition.borrow_workspace()
    try:
        assert not any(np.any(array) for array in workspace[:2])  # residuals, thresholds, estimates
    finally:
        transition.return_workspace(workspace)


def test_push_from_many_threads_matches_one_thread(transition):
    # Each concurrent caller borrows its own scratch arrays (the pool grows instead of sharing one).
    seeds = list(range(0, 300, 7))
    alone = {seed: push(transition, seed, epsilon=1e-7) for seed in seeds}
    with ThreadPoolExecutor(max_workers=4) as pool:
        together = dict(zip(seeds, pool.map(lambda s: push(transition, s, epsilon=1e-7), seeds), strict=True))
    for seed in seeds:
        assert np.array_equal(alone[seed].vector.data, together[seed].vector.data)
        assert alone[seed].residual_mass == together[seed].residual_mass


def test_push_error_stays_within_its_bound_against_the_direct_solve(transition):
    # Andersen, Chung & Lang (2006): ‖x − p‖₁ equals the unpushed residual mass (x from scipy's LU).
    for seed in (0, 17, 123):
        result = push(transition, seed, epsilon=1e-5)
        restart = np.zeros(transition.n)
        restart[seed] = 1.0
        exact = solve_exact(transition, restart).vectors
        error = np.abs(exact - result.vector.toarray()).sum()
        assert error <= result.residual_mass + 1e-12
        assert np.all(result.vector.toarray() <= exact + 1e-12)

"""Facts of the method and the solver contract (symmetry, eigenvector, convergence rate, validation)."""

from __future__ import annotations

import inspect
import math

import numpy as np
import pytest
import scipy.sparse as sp

from rankrec.pagerank import (
    ConvergenceWarning,
    combine,
    personalised_pagerank,
    prepare,
    push,
    solve_exact,
)

from ._graphs import random_graph

N = 60


@pytest.fixture(scope="module")
def graph():
    return random_graph(N, 240, seed=7)


@pytest.fixture(scope="module")
def restarts():
    rng = np.random.default_rng(11)
    values = rng.random((N, 3)) * (rng.random((N, 3)) < 0.2)
    values[0] = 1.0  # no all-zero column
    return values


def _google(transition, restart, damping, dangling):
    """Dense Google matrix G = α (Pᵀ + v dᵀ) + (1 − α) r 1ᵀ (Page & Brin 1998; Langville & Meyer 2004)."""
    n = transition.n
    r = restart / restart.sum()
    v = r if dangling == "restart" else np.full(n, 1.0 / n)
    patched = transition.backward.toarray() + np.outer(v, transition.dangling.astype(float))
    return damping * patched + (1 - damping) * np.outer(r, np.ones(n))


@pytest.mark.parametrize("dangling", ["restart", "uniform"])
def test_patched_transition_is_column_stochastic_and_solution_is_its_eigenvector(graph, restarts, dangling):
    # Langville & Meyer 2004: the patched Google matrix is column-stochastic and x is its eigenvector of 1
    transition = prepare(graph)
    assert transition.dangling.any()
    row_sums = transition.forward.sum(axis=1)
    np.testing.assert_allclose(row_sums, (~transition.dangling).astype(float), atol=1e-14)
    result = personalised_pagerank(transition, restarts, tol=1e-12, dangling=dangling)
    for column in range(restarts.shape[1]):
        google = _google(transition, restarts[:, column], 0.85, dangling)
        np.testing.assert_allclose(google.sum(axis=0), 1.0, atol=1e-13)
        x = result.vectors[:, column]
        assert np.all(x >= 0) and math.isclose(x.sum(), 1.0, abs_tol=1e-12)
        np.testing.assert_allclose(google @ x, x, rtol=0, atol=1e-11)


def test_directed_cycle_is_uniform():
    # symmetry: every page of a directed cycle is alike, so the stationary vector is uniform
    n = 17
    cycle = sp.coo_array((np.ones(n), (np.arange(n), (np.arange(n) + 1) % n)), shape=(n, n))
    for dtype in (np.float64, np.float32):
        result = personalised_pagerank(cycle, tol=1e-7, dtype=dtype)
        np.testing.assert_allclose(result.vectors, 1.0 / n, rtol=1e-6)


def test_two_closed_components_converge_at_rate_damping():
    # Haveliwala & Kamvar 2003: with two closed components |λ2| = α, so ‖x_t − x_{t-1}‖₁ = 2 α^t
    # here (point restarts on two directed cycles) and the count is log(tol / 2) / log(α) within a step.
    lengths, damping, tol = (5, 7), 0.85, 1e-8
    sources = np.r_[np.arange(5), 5 + np.arange(7)]
    targets = np.r_[(np.arange(5) + 1) % 5, 5 + (np.arange(7) + 1) % 7]
    graph = sp.csr_array((np.ones(12), (sources, targets)), shape=(12, 12))
    restart = np.zeros(12)
    restart[[0, 5]] = 0.5
    seen = []
    result = personalised_pagerank(
        graph,
        restart,
        damping=damping,
        tol=tol,
        extrapolate=False,
        callback=lambda step, residuals: seen.append(residuals[0]),
    )
    expected = math.log(tol / 2) / math.log(damping)
    assert abs(result.iterations - expected) <= 1.0
    np.testing.assert_allclose(seen[:20], 2 * damping ** np.arange(1, 21), rtol=1e-9)
    assert sum(lengths) == 12


def test_iteration_count_bounded_by_contraction(graph, restarts):
    # the step map is an L1 contraction of factor α (column-stochastic patch), so
    # ‖x_{t+1} − x_t‖₁ ≤ 2 α^{t+1} and the count never exceeds log(tol / 2) / log(α) + 1
    tol = 1e-9
    result = personalised_pagerank(graph, restarts, tol=tol)
    assert result.converged and result.iterations <= math.log(tol / 2) / math.log(0.85) + 1


def test_max_iter_one_reports_not_converged(graph):
    # scipy's solvers' convention, made visible: a warning and converged=False
    with pytest.warns(ConvergenceWarning, match="max_iter=1"):
        result = personalised_pagerank(graph, max_iter=1)
    assert result.converged is False and result.iterations == 1
    assert result.residuals.shape == (1,) and result.residuals[0] >= 1e-6


def test_inputs_unchanged(graph, restarts):
    adjacency = sp.coo_array(graph)
    before = (adjacency.data.copy(), adjacency.coords[0].copy(), adjacency.coords[1].copy())
    restart = restarts.copy()
    personalised_pagerank(adjacency, restart, tol=1e-8)
    solve_exact(adjacency, restart)
    seeds = {3: 2.0, 5: 1.0}
    push(adjacency, seeds)
    assert seeds == {3: 2.0, 5: 1.0}
    np.testing.assert_array_equal(restart, restarts)
    for old, new in zip(before, (adjacency.data, *adjacency.coords), strict=True):
        np.testing.assert_array_equal(old, new)


def test_solver_knobs_are_keyword_only():
    # scipy's iterative-solver tests assert that tolerances are keyword-only; so do we
    checks = {
        personalised_pagerank: ("damping", "tol", "max_iter", "callback", "dangling", "leaky", "dtype"),
        push: ("damping", "epsilon", "max_pushes"),
        solve_exact: ("damping", "dangling", "leaky"),
    }
    for solver, names in checks.items():
        parameters = inspect.signature(solver).parameters
        for name in names:
            assert parameters[name].kind is inspect.Parameter.KEYWORD_ONLY, (solver.__name__, name)


def test_float32_meets_the_tolerance(graph, restarts):
    wide = personalised_pagerank(graph, restarts, tol=1e-12)
    narrow = personalised_pagerank(graph, restarts, tol=1e-6, dtype=np.float32)
    assert narrow.vectors.dtype == np.float32 and narrow.converged
    # after ‖x_{t+1} − x_t‖₁ < tol the error is at most tol α / (1 − α) (contraction argument)
    assert np.abs(narrow.vectors - wide.vectors).sum(axis=0).max() < 1e-6 * 0.85 / 0.15 + 1e-6


def test_uniform_restart_makes_policies_agree(graph):
    # with a uniform restart, sending dangling mass to the restart or uniformly is the same chain
    a = personalised_pagerank(graph, tol=1e-12, dangling="restart").vectors
    b = personalised_pagerank(graph, np.ones(N), tol=1e-12, dangling="uniform").vectors
    np.testing.assert_allclose(a, b, atol=1e-13)


def test_columns_match_one_at_a_time(graph, restarts):
    together = personalised_pagerank(graph, restarts, tol=1e-12).vectors
    for column in range(restarts.shape[1]):
        alone = personalised_pagerank(graph, restarts[:, column], tol=1e-12).vectors
        np.testing.assert_allclose(together[:, column], alone, atol=1e-13)


def _power(dangling, dtype=np.float64):
    def solve(graph, restarts):
        tol = 1e-10 if dtype == np.float64 else 1e-6
        return personalised_pagerank(graph, restarts, tol=tol, dangling=dangling, dtype=dtype).vectors

    return solve


def _leaky_combined(graph, restarts):
    leaky = personalised_pagerank(graph, np.eye(N)[:, :5], tol=1e-12, leaky=True).vectors
    return np.column_stack([combine(leaky, w) for w in np.eye(5)[:3] + 0.5])


def _exact(dangling):
    def solve(graph, restarts):
        return solve_exact(graph, restarts, dangling=dangling).vectors

    return solve


def _push(graph, restarts):
    columns = []
    for seed in (0, 1, 2):
        result = push(graph, {seed: 1.0, seed + 10: 3.0}, epsilon=1e-12)
        columns.append(result.vector.toarray() + result.residual_mass / N)
    return np.column_stack(columns)


VARIANTS = {
    "power-restart-float64": _power("restart"),
    "power-uniform-float64": _power("uniform"),
    "power-restart-float32": _power("restart", np.float32),
    "power-uniform-float32": _power("uniform", np.float32),
    "leaky-combined": _leaky_combined,
    "exact-restart": _exact("restart"),
    "exact-uniform": _exact("uniform"),
    "push": _push,
}


@pytest.mark.parametrize("solve", list(VARIANTS.values()), ids=list(VARIANTS))
@pytest.mark.parametrize("prepared", [False, True], ids=["adjacency", "transition"])
def test_contract(solve, prepared, graph, restarts):
    # common practice (scipy's solver fixture): every variant returns n×k non-negative columns summing to 1
    source = prepare(graph) if prepared else graph
    vectors = np.asarray(solve(source, restarts))
    assert vectors.shape == (N, 3)
    assert np.all(vectors >= 0)
    np.testing.assert_allclose(vectors.sum(axis=0), 1.0, atol=1e-6)


@pytest.mark.parametrize(
    ("call", "error", "match"),
    [
        (lambda g: personalised_pagerank(sp.csr_array(np.ones((2, 3)))), ValueError, r"square.*\(2, 3\)"),
        (lambda g: personalised_pagerank(sp.csr_array(-np.eye(3))), ValueError, "non-negative.*-1.0"),
        (lambda g: personalised_pagerank(sp.csr_array(np.diag([1.0, np.nan]))), ValueError, "finite.*nan"),
        (lambda g: personalised_pagerank(np.eye(3)), TypeError, "transition_or_adjacency.*ndarray"),
        (lambda g: personalised_pagerank(g, np.zeros(N)), ValueError, r"(?s)restart must not be.*\(60,\)"),
        (lambda g: personalised_pagerank(g, np.c_[np.ones(N), np.zeros(N)]), ValueError, "column 1"),
        (lambda g: personalised_pagerank(g, -np.ones(N)), ValueError, "restart must be non-negative"),
        (lambda g: personalised_pagerank(g, np.ones(N - 1)), ValueError, r"shape \(60,\).*\(59,\)"),
        (lambda g: personalised_pagerank(g, damping=1.0), ValueError, "damping.*1.0"),
        (lambda g: personalised_pagerank(g, tol=0), ValueError, "tol.*0"),
        (lambda g: personalised_pagerank(g, max_iter=0), ValueError, "max_iter.*0"),
        (lambda g: personalised_pagerank(g, dangling="drop"), ValueError, "dangling.*'drop'"),
        (lambda g: personalised_pagerank(g, dtype=np.float16), ValueError, "dtype"),
        (lambda g: personalised_pagerank(g, callback=3), TypeError, "callback.*3"),
        (lambda g: personalised_pagerank(g, tol=1e-9, dtype=np.float32), ValueError, "tol=1e-09.*float32"),
        (lambda g: push(g, N), ValueError, "seeds index 60"),
        (lambda g: push(g, np.array([0.5])), TypeError, "seeds must be"),
        (lambda g: push(g, {1: -1.0}), ValueError, "seeds weights"),
        (lambda g: combine(np.ones((N, 2)), [1.0]), ValueError, r"weights must have shape \(2,\)"),
    ],
    ids=[
        "non-square",
        "negative",
        "nan",
        "dense",
        "zero-restart",
        "zero-column",
        "negative-restart",
        "restart-shape",
        "damping",
        "tol",
        "max-iter",
        "dangling",
        "dtype",
        "callback",
        "float32-tol",
        "seed-range",
        "seed-float",
        "seed-weight",
        "combine-shape",
    ],
)
def test_bad_input_names_the_parameter(call, error, match, graph):
    with pytest.raises(error, match=match):
        call(graph)


def test_extrapolation_on_rotating_error_is_switched_off_and_still_converges():
    # On two directed cycles the error rotates (eigenvalues α·e^{2πi/m}, Haveliwala & Kamvar 2003), so an
    # Aitken-type jump along one real eigenvector cannot remove it; the jump must not make it diverge.
    sources = np.r_[np.arange(5), 5 + np.arange(7)]
    targets = np.r_[(np.arange(5) + 1) % 5, 5 + (np.arange(7) + 1) % 7]
    graph = sp.csr_array((np.ones(12), (sources, targets)), shape=(12, 12))
    restart = np.zeros(12)
    restart[[0, 5]] = 0.5
    plain = personalised_pagerank(graph, restart, tol=1e-10, extrapolate=False)
    jumped = personalised_pagerank(graph, restart, tol=1e-10)
    assert jumped.converged and jumped.iterations <= 2 * plain.iterations
    # both stop on a plain step with change < tol, so each is within tol·α/(1−α) of the fixed point
    assert np.abs(jumped.vectors - plain.vectors).sum() <= 2 * 1e-10 * 0.85 / 0.15


def test_extrapolation_agrees_with_the_plain_iteration(graph, restarts):
    # both stop on a plain step with change < tol, so each is within tol·α/(1−α) of the fixed point
    plain = personalised_pagerank(graph, restarts, tol=1e-10, extrapolate=False)
    jumped = personalised_pagerank(graph, restarts, tol=1e-10)
    assert jumped.converged
    assert np.abs(jumped.vectors - plain.vectors).sum(axis=0).max() <= 2 * 1e-10 * 0.85 / 0.15
    with pytest.raises(TypeError, match="extrapolate"):
        personalised_pagerank(graph, restarts, extrapolate=1)


def test_extrapolation_cuts_steps_where_one_real_eigenvalue_dominates():
    # Two dense communities joined by a few links: the slow mode is the mass exchange between them, one
    # real eigenvalue near α (Haveliwala & Kamvar 2003), which an Aitken-type jump removes (Kamvar,
    # Haveliwala, Manning & Golub 2003).
    rng = np.random.default_rng(0)
    inside = [(50 * c + rng.integers(50, size=600), 50 * c + rng.integers(50, size=600)) for c in (0, 1)]
    left, right = rng.integers(50, size=12), 50 + rng.integers(50, size=12)
    sources = np.concatenate([inside[0][0], inside[1][0], left, right])
    targets = np.concatenate([inside[0][1], inside[1][1], right, left])
    keep = sources != targets
    graph = sp.csr_array((np.ones(int(keep.sum())), (sources[keep], targets[keep])), shape=(100, 100))
    restarts = np.zeros((100, 2))
    restarts[:50, 0], restarts[50:, 1] = 1.0, 1.0
    plain = personalised_pagerank(graph, restarts, tol=1e-10, extrapolate=False)
    jumped = personalised_pagerank(graph, restarts, tol=1e-10)
    assert jumped.iterations < plain.iterations / 2
    assert np.abs(jumped.vectors - plain.vectors).sum(axis=0).max() <= 2 * 1e-10 * 0.85 / 0.15

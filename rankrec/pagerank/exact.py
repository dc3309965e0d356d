"""Direct sparse solve of the PageRank linear system: the reference for small graphs."""

from __future__ import annotations

import time

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from ._validate import check_damping, check_dangling, check_restart
from .results import PageRankResult
from .transition import Transition, as_transition


def solve_exact(
    transition_or_adjacency: Transition | object,
    restart: object = None,
    *,
    damping: float = 0.85,
    dangling: str = "restart",
    leaky: bool = False,
) -> PageRankResult:
    """PageRank by LU factorisation of ``I − α Pᵀ`` (scipy.sparse.linalg.spsolve), for small graphs.

    Solves, per restart column ``r``, the patched system ``(I − α (Pᵀ + v dᵀ)) x = (1 − α) r`` with
    ``v = r`` (``dangling="restart"``) or ``v = 1/n`` (``"uniform"``), via the Sherman–Morrison formula:
    ``x = y + (α dᵀy / (1 − α dᵀw)) w`` where ``(I − α Pᵀ) y = (1 − α) r`` and ``(I − α Pᵀ) w = v``.
    With ``leaky=True`` it returns ``y``. Same parameters and result shape as
    :func:`personalised_pagerank`; ``residuals`` are the L1 norms of the patched system's residual.

    Examples
    --------
    >>> import scipy.sparse as sp
    >>> graph = sp.csr_array(([1.0, 1.0], ([0, 1], [1, 0])), shape=(3, 3))
    >>> solve_exact(graph, dangling="uniform").vectors.round(4).tolist()
    [0.4651, 0.4651, 0.0698]
    """
    graph = as_transition(transition_or_adjacency, "transition_or_adjacency")
    damping = check_damping(damping)
    dangling = check_dangling(dangling)
    distributions = check_restart(restart, graph.n)
    start = time.perf_counter()
    n = graph.n
    restart_columns = distributions.reshape(n, -1)
    system = sp.csc_array(sp.eye_array(n) - damping * graph.backward)
    if leaky:
        vectors = _solve(system, (1.0 - damping) * restart_columns)
        residual = system @ vectors - (1.0 - damping) * restart_columns
    else:
        patch = restart_columns if dangling == "restart" else np.full((n, 1), 1.0 / n)
        solutions = _solve(system, np.hstack([(1.0 - damping) * restart_columns, patch]))
        base, spread = solutions[:, : restart_columns.shape[1]], solutions[:, restart_columns.shape[1] :]
        indicator = graph.dangling.astype(np.float64)
        scale = damping * (indicator @ base) / (1.0 - damping * (indicator @ spread))
        vectors = base + spread * scale
        patched = system @ vectors - damping * patch * (indicator @ vectors)
        residual = patched - (1.0 - damping) * restart_columns
    return PageRankResult(
        vectors=vectors.reshape(distributions.shape),
        iterations=0,
        residuals=np.abs(residual).sum(axis=0),
        converged=True,
        seconds=time.perf_counter() - start,
    )


def _solve(system: sp.csc_array, right: np.ndarray) -> np.ndarray:
    # The system is column diagonally dominant (off-diagonal column sums ≤ α < 1), so LU needs no pivoting;
    # a minimum-degree ordering of AᵀA + A keeps the fill about three times lower than COLAMD on link graphs.
    factors = spla.splu(system, permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0)
    return np.asarray(factors.solve(np.ascontiguousarray(right))).reshape(right.shape)

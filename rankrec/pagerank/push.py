"""Forward push (Andersen, Chung & Lang 2006): personalised PageRank of a few seed pages, locally."""

from __future__ import annotations

import time
import warnings

import numpy as np
import scipy.sparse as sp

from . import _kernels
from ._validate import check_count, check_damping, check_positive, check_seeds
from .results import ConvergenceWarning, PushResult
from .transition import Transition, as_transition

REFINE = 64
"""Default number of leading pages whose scores :func:`push` refines with their in-links' residual."""


def push(
    transition: Transition | object,
    seeds: object,
    *,
    damping: float = 0.85,
    epsilon: float = 1e-6,
    max_pushes: int = 50_000_000,
    refine: int = REFINE,
) -> PushResult:
    """Approximate strongly-preferential personalised PageRank of a seed distribution.

    Keeps an estimate ``p`` (starts at 0) and a residual ``r`` (starts at the seed distribution ``s``).
    Pushing page ``u`` moves ``(1 − α) r[u]`` into ``p[u]`` and spreads ``α r[u]`` over ``u``'s out-links
    by weight; a dangling page spreads it over the seeds (the ``dangling="restart"`` policy), so the exact
    target is ``personalised_pagerank(..., restart=s, dangling="restart")``. The invariant
    ``x = p + X r`` with ``X = (1 − α) Σₜ (α Pᵀ)ᵗ`` (column-stochastic) gives ``‖x − p‖₁ = ‖r‖₁``.

    Stopping rule: no page has ``r[u] > epsilon · max(deg(u), 1)`` (``deg`` = out-degree), or
    ``max_pushes`` pushes were made. The work is at most ``1 / (epsilon (1 − α))`` link visits.

    The returned estimate then takes the first terms of ``X r`` that cost little: every touched page
    gets ``(1 − α) r[u]`` (the restart share of its own residual), and the ``refine`` best pages also get
    ``(1 − α) α (Pᵀ r)[v]``, read from their in-links. Every term is non-negative, so the estimate
    still never exceeds ``x``, and the L1 error is exactly the mass of ``X r`` not yet added
    (``α ‖r‖₁`` minus the refined terms), which is what ``residual_mass`` reports. On a
    1,000,000-page synthetic wiki, at ``epsilon = 1e-5``, this raised the mean top-20 agreement with
    the exact vector over 200 seeds from 0.93 to 0.96 for 1.5 ms more per query (3.6 → 5.1 ms median;
    ``tests/bench/bench_pagerank.py``).

    Parameters
    ----------
    transition : Transition or scipy sparse matrix
    seeds : int, mapping {index: weight} or 1-d integer array of indices (equal weights)
    damping : float
        Probability ``α`` of following a link, in (0, 1).
    epsilon : float
        Residual threshold per out-link.
    max_pushes : int
        Push limit; reaching it with work left issues :class:`ConvergenceWarning` (``converged=False``);
        the residual bound still holds.
    refine : int
        How many of the best pages get the one-step in-link term (0 = none).

    Returns
    -------
    PushResult

    Examples
    --------
    >>> import scipy.sparse as sp
    >>> cycle = sp.csr_array(([1.0, 1.0, 1.0], ([0, 1, 2], [1, 2, 0])), shape=(3, 3))
    >>> result = push(cycle, 0, damping=0.5, epsilon=1e-9)
    >>> result.vector.toarray().round(3).tolist(), result.residual_mass < 1e-8
    ([0.571, 0.286, 0.143], True)
    """
    graph = as_transition(transition)
    damping = check_damping(damping)
    epsilon = check_positive(epsilon, "epsilon")
    max_pushes = check_count(max_pushes, "max_pushes")
    refine = check_count(refine, "refine", minimum=0)
    seed_pages, seed_weights = check_seeds(seeds, graph.n)
    start = time.perf_counter()
    forward = graph.forward
    workspace = graph.borrow_workspace()
    hot, estimate = workspace[0], workspace[1]
    count = 0
    try:
        count, pushes, converged = _kernels.forward_push(
            forward.indptr,
            forward.indices,
            forward.data,
            graph.out_degree,
            seed_pages,
            seed_weights,
            damping,
            epsilon,
            max_pushes,
            workspace,
        )
        touched = workspace[3][:count].astype(np.int64)
        residual = hot[2 * touched]
        values = estimate[touched] + (1.0 - damping) * residual
        unaccounted = damping * float(residual.sum())
        if refine and count:
            unaccounted -= _refine(
                graph, hot, touched, residual, values, seed_pages, seed_weights, damping, min(refine, count)
            )
    finally:
        _clear(workspace, count)
        graph.return_workspace(workspace)
    order = np.argsort(touched)
    touched, values = touched[order], values[order]
    keep = values > 0
    vector = sp.coo_array((values[keep], (touched[keep],)), shape=(graph.n,))
    if not converged:
        warnings.warn(
            f"push stopped at max_pushes={max_pushes} with residual mass {unaccounted:.3g} left",
            ConvergenceWarning,
            stacklevel=2,
        )
    return PushResult(
        vector=vector,
        residual_mass=max(unaccounted, 0.0),
        pushes=int(pushes),
        converged=bool(converged),
        seconds=time.perf_counter() - start,
    )


def _refine(graph, hot, touched, residual, values, seed_pages, seed_weights, damping, count) -> float:
    """Add ``(1 − α) α (Pᵀ r)[v]`` to the ``count`` best ``values`` in place; returns the mass added."""
    best = np.argpartition(-values, count - 1)[:count]
    backward = graph.backward
    arriving = _kernels.inflow(backward.indptr, backward.indices, backward.data, hot, touched[best])
    # dangling pages send their residual to the seeds
    on_dangling = float(residual[graph.dangling[touched]].sum())
    if on_dangling:
        at = np.searchsorted(seed_pages, touched[best])
        is_seed = seed_pages[np.minimum(at, seed_pages.size - 1)] == touched[best]
        arriving[is_seed] += on_dangling * seed_weights[at[is_seed]]
    added = (1.0 - damping) * damping * arriving
    values[best] += added
    return float(added.sum())


def _clear(workspace: tuple, count: int) -> None:
    """Zero what a push wrote, so the scratch arrays are clean for the next caller."""
    hot, estimate, _, touched = workspace
    pages = touched[:count].astype(np.int64)
    hot[2 * pages] = 0.0
    hot[2 * pages + 1] = 0.0
    estimate[pages] = 0.0

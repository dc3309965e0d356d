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


def push(
    transition: Transition | object,
    seeds: object,
    *,
    damping: float = 0.85,
    epsilon: float = 1e-6,
    max_pushes: int = 50_000_000,
) -> PushResult:
    """Approximate strongly-preferential personalised PageRank of a seed distribution.

    Keeps an estimate ``p`` (starts at 0) and a residual ``r`` (starts at the seed distribution ``s``).
    Pushing page ``u`` moves ``(1 − α) r[u]`` into ``p[u]`` and spreads ``α r[u]`` over ``u``'s out-links
    by weight; a dangling page spreads it over the seeds (the ``dangling="restart"`` policy), so the exact
    target is ``personalized_pagerank(..., restart=s, dangling="restart")``. The invariant
    ``x = p + X r`` (``X`` the column-stochastic PageRank operator) gives ``‖x − p‖₁ = ‖r‖₁``.

    Stopping rule: no page has ``r[u] > epsilon · max(deg(u), 1)`` (``deg`` = out-degree), or
    ``max_pushes`` pushes were made. The work is at most ``1 / (epsilon (1 − α))`` link visits.

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
    seed_pages, seed_weights = check_seeds(seeds, graph.n)
    start = time.perf_counter()
    forward = graph.forward
    workspace = graph.borrow_workspace()
    try:
        touched, values, residual, pushes, converged = _kernels.forward_push(
            forward.indptr, forward.indices, forward.data, graph.out_degree, seed_pages, seed_weights,
            damping, epsilon, max_pushes, workspace,
        )
    finally:
        graph.return_workspace(workspace)
    order = np.argsort(touched)
    touched, values = touched[order], values[order]
    residual_mass = float(residual.sum())
    keep = values > 0
    vector = sp.coo_array((values[keep], (touched[keep].astype(np.int64),)), shape=(graph.n,))
    if not converged:
        warnings.warn(
            f"push stopped at max_pushes={max_pushes} with residual mass {residual_mass:.3g} left",
            ConvergenceWarning,
            stacklevel=2,
        )
    return PushResult(
        vector=vector,
        residual_mass=residual_mass,
        pushes=int(pushes),
        converged=bool(converged),
        seconds=time.perf_counter() - start,
    )

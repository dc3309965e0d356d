"""Result objects returned by the solvers, and the warning for a solver that ran out of steps."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp


class ConvergenceWarning(UserWarning):
    """A solver stopped at its step limit before meeting its tolerance (``converged=False`` says so)."""


@dataclass(frozen=True)
class PageRankResult:
    """Stationary vectors from :func:`personalised_pagerank` or :func:`solve_exact`.

    Attributes
    ----------
    vectors : ndarray
        Shape ``(n,)`` for one restart distribution, ``(n, k)`` for ``k`` columns solved together.
    iterations : int
        Steps taken (0 for the direct solve).
    residuals : ndarray
        Shape ``(k,)``, float64: per column, the L1 change of the last step (power iteration) or
        the L1 norm of the linear-system residual (direct solve).
    converged : bool
        True when every column met the stopping rule.
    seconds : float
        Wall-clock time of the solve.
    """

    vectors: np.ndarray
    iterations: int
    residuals: np.ndarray
    converged: bool
    seconds: float


@dataclass(frozen=True)
class PushResult:
    """Approximate personalised PageRank of a seed set from :func:`push`.

    Attributes
    ----------
    vector : scipy.sparse.coo_array
        One-dimensional sparse array of shape ``(n,)``; it never exceeds the exact vector entrywise.
    residual_mass : float
        L1 norm of the residual left unpushed. It bounds (and in exact arithmetic equals) the L1 error
        ``‖x − vector‖₁`` to the exact strongly-preferential personalised PageRank ``x``.
    pushes : int
        Number of push operations performed.
    converged : bool
        False when ``max_pushes`` stopped the push before every residual fell below its threshold.
    seconds : float
        Wall-clock time.
    """

    vector: sp.coo_array
    residual_mass: float
    pushes: int
    converged: bool
    seconds: float

    def top(self, k: int) -> tuple[np.ndarray, np.ndarray]:
        """Indices and scores of the ``k`` highest entries, best first (ties by lower index).

        >>> import numpy as np, scipy.sparse as sp
        >>> vector = sp.coo_array((np.array([0.1, 0.5, 0.2]), (np.array([0, 3, 7]),)), shape=(9,))
        >>> PushResult(vector, 0.2, 3, True, 0.0).top(2)[0].tolist()
        [3, 7]
        """
        indices = np.asarray(self.vector.coords[0])
        values = np.asarray(self.vector.data)
        order = np.lexsort((indices, -values))[: max(int(k), 0)]
        return indices[order], values[order]

"""How much of every page's personalised PageRank lies on a set of pages, for all pages at once.

A build that replaces an index needs to know whose related list a change can move. When the rows of the
transition change on a set ``C`` of pages (links added or removed, reading moves, chrome judged anew),
the personalised PageRank ``π_s`` of a seed ``s`` moves, in L1, by at most ``2α / (1 − α) · π′_s(C)``
(``π′`` on the new transition): from ``π′ − π = α π′ (P′ − P) (I − α P)⁻¹``, each changed row differs by at
most 2 in L1 and ``‖(I − α P)⁻¹‖ ≤ 1 / (1 − α)`` on row vectors (the standard perturbation argument for
PageRank; see e.g. Langville & Meyer, *Google's PageRank and Beyond*, 2006, ch. 6). ``π′_s(C)`` for every
``s`` at once is what one reverse push from ``C`` gives (Andersen, Borgs, Chayes, Hopcroft, Mirrokni &
Teng, "Local computation of PageRank contributions", 2007), with an additive error of at most its
threshold for every ``s``.

The push works on the leaky walk ``x_s = (1 − α) e_s + α Pᵀ x_s`` (dangling pages send nothing); the
strongly-preferential vector the solvers compute (a dangling page returns its mass to the seed) is
``π_s = x_s / ‖x_s‖₁`` with ``‖x_s‖₁ = 1 − α x_s(D) / (1 − α)``, ``D`` the dangling pages, so a second
reverse push from ``D`` turns the first into an upper bound of ``π_s(C)``.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from . import _kernels
from ._validate import check_count, check_damping, check_positive
from .transition import Transition, as_transition


@dataclass(frozen=True)
class ReachResult:
    """Per seed page ``s``: an upper bound of ``π_s(targets)`` (:func:`mass_on`).

    Attributes
    ----------
    mass : ndarray of float64, shape (n,)
        Upper bounds, each at most 1 and at most ``error`` above the exact value divided by the
        lower bound of ``‖x_s‖₁`` (see the module docstring).
    error : float
        The additive error of each reverse push (the largest residual it left).
    pushes : int
    converged : bool
    seconds : float
    """

    mass: np.ndarray
    error: float
    pushes: int
    converged: bool
    seconds: float


def _leaky_mass(graph: Transition, start: np.ndarray, damping, epsilon, max_pushes) -> tuple:
    """(estimate, largest residual left, pushes, converged) of ``x_s(start)`` for every ``s``."""
    backward = graph.backward
    residual = start.astype(np.float64, copy=True)
    estimate = np.zeros(graph.n)
    pushes, converged = _kernels.reverse_push(
        backward.indptr, backward.indices, backward.data, residual, estimate, damping, epsilon, max_pushes
    )
    return estimate, float(residual.max(initial=0.0)), int(pushes), bool(converged)


def mass_on(
    transition: Transition | object,
    targets: object,
    *,
    damping: float = 0.85,
    epsilon: float = 1e-6,
    max_pushes: int = 500_000_000,
) -> ReachResult:
    """An upper bound, for every seed page ``s``, of the personalised PageRank mass ``π_s(targets)``
    (dangling pages return to the seed, as in :func:`rankrec.pagerank.push`).

    >>> import scipy.sparse as sp
    >>> chain = sp.csr_array(([1.0, 1.0], ([0, 1], [1, 2])), shape=(3, 3))  # 0 -> 1 -> 2, 2 dangling
    >>> found = mass_on(chain, [2], damping=0.5, epsilon=1e-12)
    >>> found.mass.round(4).tolist()  # from 0: 1/7 of the walk is on page 2; from 2: all of it
    [0.1429, 0.3333, 1.0]
    """
    graph = as_transition(transition)
    damping = check_damping(damping)
    epsilon = check_positive(epsilon, "epsilon")
    max_pushes = check_count(max_pushes, "max_pushes")
    chosen = np.zeros(graph.n, dtype=bool)
    chosen[np.asarray(targets, dtype=np.int64)] = True
    return _weighted_mass(graph, chosen, damping, epsilon, max_pushes)


def _weighted_mass(graph: Transition, weights: np.ndarray, damping, epsilon, max_pushes) -> ReachResult:
    """:func:`mass_on` of a weight per page (``Σ_u w_u π_s(u)``; weights at most 1 keep its bound)."""
    started = time.perf_counter()
    on_targets, error, pushes, converged = _leaky_mass(graph, weights, damping, epsilon, max_pushes)
    upper = on_targets + error
    if graph.dangling.any():
        on_dangling, leak_error, more, done = _leaky_mass(graph, graph.dangling, damping, epsilon, max_pushes)
        total = 1.0 - damping / (1.0 - damping) * (on_dangling + leak_error)  # ‖x_s‖₁ from below
        upper = np.divide(upper, total, out=np.ones_like(upper), where=total > 0)
        error, pushes, converged = max(error, leak_error), pushes + more, converged and done
    return ReachResult(np.minimum(upper, 1.0), error, pushes, converged, time.perf_counter() - started)


def _in_new_numbering(old, new, new_of_old):
    """``old``'s entries in ``new``'s page numbering: (old as COO, each entry's new row and column, -1
    where its page is gone, the entries between pages in both as a CSR array, ``new`` as CSR). ``old`` and
    ``new`` are transitions (their forward matrices) or square sparse matrices."""
    old_matrix, new_matrix = getattr(old, "forward", old), sp.csr_array(getattr(new, "forward", new))
    new_of_old = np.asarray(new_of_old, dtype=np.int64)
    if new_of_old.shape != (old_matrix.shape[0],):
        raise ValueError(
            f"new_of_old must have one entry per old page ({old_matrix.shape[0]}); "
            f"got shape {new_of_old.shape}"
        )
    before = sp.coo_array(old_matrix)
    old_rows, old_columns = new_of_old[before.row], new_of_old[before.col]
    live = (old_rows >= 0) & (old_columns >= 0)
    shape = new_matrix.shape
    mapped = sp.csr_array((before.data[live], (old_rows[live], old_columns[live])), shape=shape)
    return before, old_rows, old_columns, mapped, new_matrix


def changed_pages(
    old: Transition | object, new: Transition | object, new_of_old: np.ndarray, *, tol: float = 1e-12
) -> tuple[np.ndarray, np.ndarray]:
    """Per page of ``new``: (its row differs from its row in ``old``, its column does), each by more than
    ``tol`` in some entry; a page with no page in ``old`` has changed both. ``old`` and ``new`` are
    transitions (their forward matrices are compared) or square sparse matrices (text neighbours,
    co-visits); ``new_of_old[i]`` is the new number of old page ``i`` (-1: gone). A row that held a page
    now gone has changed too, and so has a column a page now gone held."""
    _, old_rows, old_columns, mapped, new_matrix = _in_new_numbering(old, new, new_of_old)
    size = new_matrix.shape[0]
    new_of_old = np.asarray(new_of_old, dtype=np.int64)
    rows, columns = np.ones(size, dtype=bool), np.ones(size, dtype=bool)
    kept = new_of_old[new_of_old >= 0]
    rows[kept] = columns[kept] = False  # pages in both: compared below
    rows[old_rows[(old_rows >= 0) & (old_columns < 0)]] = True  # held a page now gone
    columns[old_columns[(old_rows < 0) & (old_columns >= 0)]] = True  # held by a page now gone
    difference = sp.coo_array(new_matrix - mapped)
    moved = np.abs(difference.data) > tol
    rows[difference.row[moved]] = True
    columns[difference.col[moved]] = True
    return rows, columns


def changed_rows(
    old: Transition | object, new: Transition | object, new_of_old: np.ndarray, *, tol: float = 1e-12
) -> np.ndarray:
    """Per page of ``new``, True when its transition row differs from its row in ``old`` (by more than
    ``tol`` in any entry), or it has no page in ``old`` (:func:`changed_pages`' rows)."""
    return changed_pages(old, new, new_of_old, tol=tol)[0]


def row_changes(old: Transition | object, new: Transition | object, new_of_old: np.ndarray) -> np.ndarray:
    """Per page of ``new``: the L1 distance between its transition row and its row in ``old`` (at most 2;
    2 for a page with no page in ``old``, and for one that became dangling or stopped being; an entry for
    a page now gone counts in full)."""
    before, old_rows, old_columns, mapped, new_matrix = _in_new_numbering(old, new, new_of_old)
    size = new_matrix.shape[0]
    new_of_old = np.asarray(new_of_old, dtype=np.int64)
    distance = np.asarray(abs(new_matrix - mapped).sum(axis=1)).ravel()
    # a page that became dangling, or stopped being: its row of the strongly-preferential walk (a dangling
    # page returns to the seed) may have moved in full
    sums = np.asarray(new_matrix.sum(axis=1)).ravel(), np.zeros(size)
    sums[1][old_rows[old_rows >= 0]] = 0.0
    np.add.at(sums[1], old_rows[old_rows >= 0], before.data[old_rows >= 0])
    distance[np.abs(sums[0] - sums[1]) > 0.5] = 2.0
    lost = (old_rows >= 0) & (old_columns < 0)
    distance += np.bincount(old_rows[lost], weights=np.abs(before.data[lost]), minlength=size)
    absent = np.ones(size, dtype=bool)
    absent[new_of_old[new_of_old >= 0]] = False
    distance[absent] = 2.0
    return np.minimum(distance, 2.0)


def change_bound(
    new: Transition, changed: np.ndarray, *, damping: float = 0.85, epsilon: float = 1e-6
) -> np.ndarray:
    """Per seed page of ``new``: an upper bound of the L1 change of its personalised PageRank vector
    when its transition rows changed. ``changed``: per page, True for a changed row (:func:`changed_rows`;
    the bound is ``2α / (1 − α) · π′_s(C)``), or the L1 distance each row moved (:func:`row_changes`;
    the bound is ``α / (1 − α) · Σ_u π′_s(u) ‖P′_u − P_u‖₁``, tighter when rows moved a little); at most
    2 either way (the module docstring)."""
    changed = np.asarray(changed)
    distance = 2.0 * changed if changed.dtype == bool else np.asarray(changed, dtype=np.float64)
    if not distance.any():
        return np.zeros(new.n)
    graph = as_transition(new)
    damping = check_damping(damping)
    epsilon = check_positive(epsilon, "epsilon")
    reach = _weighted_mass(graph, distance / 2.0, damping, epsilon, 500_000_000)
    return np.minimum(2.0 * damping / (1.0 - damping) * reach.mass, 2.0)

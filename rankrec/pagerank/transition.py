"""The row-stochastic transition of a link graph, prepared once and shared by every solver."""

from __future__ import annotations

import threading
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
import scipy.sparse as sp

from ._validate import check_adjacency


@dataclass(frozen=True, eq=False)
class Transition:
    """Link graph normalised for the random surfer; arrays are read-only.

    Attributes
    ----------
    forward : scipy.sparse.csr_array
        ``P`` with ``P[i, j] = A[i, j] / Σ_j A[i, j]`` (row = source page); dangling rows are empty.
        The local push walks it row by row.
    backward : scipy.sparse.csr_array
        ``Pᵀ`` in CSR form (row = target page, columns = pages linking to it): one pass of the block
        power iteration gathers each target's in-links, so rows can be computed in parallel.
    dangling : ndarray of bool
        Pages without out-links.
    out_degree : ndarray of int64
        Number of out-links per page.
    out_weight : ndarray of float64
        Total out-link weight per page (0 for dangling pages).

    Notes
    -----
    A Transition also keeps, out of sight, a pool of scratch arrays for :func:`push` (one set per
    concurrent caller, made on first use and cleaned after every call), so a query costs work in
    proportion to the pages it touches rather than an O(n) allocation.
    """

    forward: sp.csr_array
    backward: sp.csr_array
    dangling: np.ndarray
    out_degree: np.ndarray
    out_weight: np.ndarray
    _workspaces: list = field(default_factory=list, init=False, repr=False, compare=False)
    _workspace_lock: threading.Lock = field(
        default_factory=threading.Lock, init=False, repr=False, compare=False
    )

    @property
    def n(self) -> int:
        """Number of pages."""
        return int(self.forward.shape[0])

    @cached_property
    def dangling_pages(self) -> np.ndarray:
        """Indices of the dangling pages (found once)."""
        return np.flatnonzero(self.dangling)

    def borrow_workspace(self) -> tuple:
        """Scratch arrays for one push (residuals and thresholds interleaved, estimates, queue, touched)."""
        with self._workspace_lock:
            if self._workspaces:
                return self._workspaces.pop()
        n = self.n
        return (np.zeros(2 * n), np.zeros(n), np.zeros(n, dtype=np.int32), np.zeros(n, dtype=np.int32))

    def return_workspace(self, workspace: tuple) -> None:
        """Give back arrays from :meth:`borrow_workspace`; the caller has cleared what it wrote."""
        with self._workspace_lock:
            self._workspaces.append(workspace)


def prepare(adjacency: object) -> Transition:
    """Normalise a link matrix once for many solves.

    Parameters
    ----------
    adjacency : scipy sparse matrix or array, shape (n, n)
        ``A[i, j]`` = weight (> 0) of the link from page ``i`` to page ``j``; any sparse format. It is
        not modified.

    Returns
    -------
    Transition

    Examples
    --------
    >>> import scipy.sparse as sp
    >>> t = prepare(sp.coo_array(([1.0, 3.0], ([0, 0], [1, 2])), shape=(3, 3)))
    >>> t.forward.toarray()[0].tolist(), t.dangling.tolist()
    ([0.0, 0.25, 0.75], [False, True, True])
    """
    matrix = check_adjacency(adjacency)
    out_weight = np.asarray(matrix.sum(axis=1)).ravel()
    out_degree = np.diff(matrix.indptr).astype(np.int64)
    dangling = out_degree == 0
    scale = np.divide(1.0, out_weight, out=np.zeros_like(out_weight), where=~dangling)
    matrix.data *= np.repeat(scale, out_degree)
    forward = _index32(matrix)
    backward = _index32(sp.csr_array(matrix.T))
    backward.sort_indices()
    for array in (
        forward.data,
        forward.indices,
        forward.indptr,
        backward.data,
        backward.indices,
        backward.indptr,
        dangling,
        out_degree,
        out_weight,
    ):
        array.flags.writeable = False
    return Transition(forward, backward, dangling, out_degree, out_weight)


def _index32(matrix: sp.csr_array) -> sp.csr_array:
    """Same matrix with int32 indices where they fit (halves the index traffic of a product)."""
    if matrix.nnz < np.iinfo(np.int32).max and matrix.shape[0] < np.iinfo(np.int32).max:
        matrix.indices = matrix.indices.astype(np.int32, copy=False)
        matrix.indptr = matrix.indptr.astype(np.int32, copy=False)
    return matrix


def as_transition(graph: object, name: str = "transition") -> Transition:
    """A :class:`Transition` as given, or one prepared from a sparse adjacency matrix."""
    if isinstance(graph, Transition):
        return graph
    if sp.issparse(graph):
        return prepare(graph)
    kind = type(graph).__name__
    raise TypeError(f"{name} must be a Transition or a scipy sparse adjacency matrix, got {kind!r}")

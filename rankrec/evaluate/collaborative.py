"""Collaborative-filtering baselines behind the baselines' interface: ``method.recommend(split, k)``.

Each learns from one binary "user × item" matrix, :func:`interactions` (items are pages), and scores a
query by summing the item-item weights of its starting pages (:func:`~rankrec.evaluate.baselines._seeds`,
as :class:`~rankrec.evaluate.baselines.CoVisitation` does: all prefix pages of a session task, a user's
last ``history`` training views). Like every baseline they read ``split.train``, ``split.queries``,
``split.links`` and ``split.settings`` only, leave out :func:`~rankrec.evaluate.splits.excluded_pages`,
pad short lists with ``-1`` at the tail and send ties to the lower page number.

- :class:`ItemKNN`: cosine similarity of item columns with an optional shrink term, each item keeping its
  strongest neighbours (Sarwar, Karypis, Konstan & Riedl 2001, "Item-based collaborative filtering
  recommendation algorithms", WWW).
- :class:`RP3beta`: three-step random walk item -> user -> item with transition probabilities raised to
  ``alpha``, divided by the target's popularity to the power ``beta`` (Paudel, Christoffel, Newell &
  Bernstein 2017, "Updatable, accurate, diverse, and scalable recommendations for interactive
  applications", ACM TiiS).
- :class:`EASE`: the closed-form item-item ridge regression with a zero diagonal (Steck 2019,
  "Embarrassingly shallow autoencoders for sparse data", WWW); dense in the number of items, so
  :meth:`EASE.applicable` refuses catalogues above ``max_items``.

Every class has :meth:`grid` (the instances to sweep on a validation split, each with its own ``name``)
and a ``family`` naming the method whatever the instance's name.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import ClassVar

import numpy as np
import scipy.linalg
import scipy.sparse as sp

from .._validation import check_count, check_positive, check_real
from .baselines import _CHUNK_ELEMENTS, _ranked_product, _seeds, _strongest, ranked_entries, split_links
from .splits import SESSION_GAP_SECONDS, Split, excluded_pages, session_numbers

# ------------------------------------------------------------------------------ what the methods learn


def interactions(split: Split, adjacency=None, *, gap: float | None = None, max_session_pages=100):
    """The binary "user × item" matrix the collaborative baselines learn from: CSR (rows, ``split.size``).

    - One row per training session of ``split.train`` (sessions cut by
      :func:`~rankrec.evaluate.splits.session_numbers` with ``gap``, by default the split's own gap, else
      30 minutes), 1 at each page the session viewed. Sessions with more than ``max_session_pages``
      distinct pages are left out, as :func:`~rankrec.evaluate.baselines.covisitation` does (mostly
      crawlers: common practice); None keeps all.
    - When the split hides links (``split.links`` is not None: held-out links, editorial blocks, which have
      no reading history), or when ``adjacency`` is given, then after the sessions one row per page ``p``,
      holding ``p`` and its out-links: a page's link neighbourhood acts as its "basket", so pages linked
      from the same pages, or linking to each other, count as consumed together. The links are the split's
      own when it has them (:func:`~rankrec.evaluate.baselines.split_links`), so no hidden link can
      reach a row; ``adjacency`` only adds link rows to a task on reading history.

    >>> from rankrec.evaluate.splits import temporal_split
    >>> split = temporal_split([0, 0, 0, 1], [0, 1, 2, 2], [0.0, 1, 9000, 2], 3, cutoff=9500.0)
    >>> interactions(split).toarray().tolist()
    [[1.0, 1.0, 0.0], [0.0, 0.0, 1.0], [0.0, 0.0, 1.0]]
    """
    gap = check_positive("gap", gap if gap is not None else split.settings.get("gap", SESSION_GAP_SECONDS))
    if max_session_pages is not None:
        max_session_pages = check_count("max_session_pages", max_session_pages)
    train, size = split.train, split.size
    session = session_numbers(train.users, train.times, gap)
    sessions = int(session.max()) + 1 if session.size else 0
    rows = sp.csr_array((np.ones(session.size), (session, train.pages)), shape=(sessions, size))
    rows.sum_duplicates()
    if max_session_pages is not None:
        rows = sp.csr_array(rows[np.diff(rows.indptr) <= max_session_pages])
    blocks = [rows]
    if adjacency is not None or split.links is not None:
        links = split_links(adjacency, split).copy()  # a copy: the split's own matrix stays untouched
        links.eliminate_zeros()
        links.data[:] = 1.0
        blocks.append(sp.csr_array(links + sp.eye_array(size, format="csr")))
    matrix = sp.csr_array(sp.vstack(blocks, format="csr"), dtype=np.float64)
    matrix.sum_duplicates()
    matrix.data[:] = 1.0
    return matrix


def _binary(matrix) -> sp.csr_array:
    """A canonical float64 CSR copy of ``matrix`` with 1 at every stored nonzero."""
    binary = sp.csr_array(matrix, dtype=np.float64, copy=True)
    binary.sum_duplicates()
    binary.eliminate_zeros()
    binary.data[:] = 1.0
    return binary


def _pruned_product(
    left: sp.csr_array,
    right: sp.csr_array,
    neighbours: int | None,
    finish: Callable[[sp.csr_array, int], sp.csr_array],
) -> sp.csr_array:
    """``finish(left[rows] @ right, first row)`` with a zero diagonal, each row cut to its ``neighbours``
    strongest entries (None: all), a block of rows at a time so that no block holds more than
    ``_CHUNK_ELEMENTS`` cells before pruning."""
    width = right.shape[1]
    step = max(1, _CHUNK_ELEMENTS // max(width, 1))
    blocks = [sp.csr_array((0, width))]
    for start in range(0, left.shape[0], step):
        block = sp.csr_array(left[start : start + step] @ right)
        block.sum_duplicates()
        block = finish(block, start)
        rows = start + np.repeat(np.arange(block.shape[0]), np.diff(block.indptr))
        block.data[block.indices == rows] = 0.0
        block.eliminate_zeros()
        block.sort_indices()
        blocks.append(block if neighbours is None else _strongest(block, neighbours))
    result = sp.csr_array(sp.vstack(blocks, format="csr"))
    result.sum_duplicates()
    result.sort_indices()
    return result


def item_similarity(matrix, *, shrink: float = 0.0, neighbours: int | None = 100) -> sp.csr_array:
    """Cosine similarity of the item columns of the binary ``matrix``: CSR (items, items), zero diagonal.

    With ``C = XᵀX`` (``X`` the binary matrix), ``sim[i, j] = C[i, j] / (sqrt(C[i, i] · C[j, j]) + shrink)``;
    each row keeps its ``neighbours`` strongest entries (ties to the lower item; None keeps all).
    """
    shrink = check_real("shrink", shrink)
    if shrink < 0:
        raise ValueError(f"shrink must be at least 0; got {shrink!r}")
    if neighbours is not None:
        neighbours = check_count("neighbours", neighbours)
    binary = _binary(matrix)
    norms = np.sqrt(np.bincount(binary.indices, minlength=binary.shape[1]).astype(np.float64))

    def cosine(block: sp.csr_array, start: int) -> sp.csr_array:
        rows = start + np.repeat(np.arange(block.shape[0]), np.diff(block.indptr))
        block.data /= norms[rows] * norms[block.indices] + shrink
        return block

    return _pruned_product(sp.csr_array(binary.T), binary, neighbours, cosine)


def rp3beta_similarity(
    matrix, *, alpha: float = 1.0, beta: float = 0.5, neighbours: int | None = 100
) -> sp.csr_array:
    """RP3beta item-item weights of the binary ``matrix``: CSR (items, items), zero diagonal.

    ``P_ui`` is ``X`` with each row divided by its sum (user -> item), ``P_iu`` is ``Xᵀ`` likewise (item
    -> user), both raised elementwise to ``alpha``; ``W = P_iu @ P_ui`` with column ``j`` divided by
    ``pop_j ** beta`` (``pop_j``: rows holding item ``j``; an item no row holds has an empty column).
    Each row keeps its ``neighbours`` strongest entries (ties to the lower item; None keeps all).
    """
    alpha = check_positive("alpha", alpha)
    beta = check_real("beta", beta)
    if beta < 0:
        raise ValueError(f"beta must be at least 0; got {beta!r}")
    if neighbours is not None:
        neighbours = check_count("neighbours", neighbours)
    binary = _binary(matrix)
    user_degree = np.diff(binary.indptr).astype(np.float64)
    popularity = np.bincount(binary.indices, minlength=binary.shape[1]).astype(np.float64)
    to_item = np.divide(1.0, user_degree, out=np.zeros_like(user_degree), where=user_degree > 0) ** alpha
    to_user = np.divide(1.0, popularity, out=np.zeros_like(popularity), where=popularity > 0) ** alpha
    scale = np.zeros_like(popularity)
    np.power(popularity, -beta, out=scale, where=popularity > 0)
    user_item = sp.csr_array(sp.diags_array(to_item) @ binary)
    item_user = sp.csr_array(sp.diags_array(to_user) @ sp.csr_array(binary.T))

    def penalised(block: sp.csr_array, start: int) -> sp.csr_array:
        block.data *= scale[block.indices]
        return block

    return _pruned_product(item_user, user_item, neighbours, penalised)


def ease_weights(matrix, lam: float) -> tuple[np.ndarray, np.ndarray]:
    """EASE weights of the binary ``matrix`` over the items some row holds: ``(active, B)``.

    ``active`` are those items (ascending), ``B`` the dense (active, active) float64 matrix
    ``B = I - P · diag(1 / diag(P))`` with ``P = (XᵀX + lam · I)⁻¹`` (by Cholesky), i.e.
    ``B[i, j] = -P[i, j] / P[j, j]`` and ``B[j, j] = 0``: the minimiser of ``‖X - XB‖² + lam ‖B‖²`` with a
    zero diagonal.
    """
    lam = check_positive("lam", lam)
    binary = _binary(matrix)
    active = np.flatnonzero(np.bincount(binary.indices, minlength=binary.shape[1]))
    count = active.size
    chosen = sp.csr_array(binary[:, active])
    transposed = sp.csr_array(chosen.T)
    gram = np.empty((count, count))
    step = max(1, _CHUNK_ELEMENTS // max(count, 1))
    for start in range(0, count, step):
        gram[start : start + step] = (transposed[start : start + step] @ chosen).toarray()
    gram[np.diag_indices(count)] += lam
    if count == 0:
        return active, gram
    potrf, potri = scipy.linalg.get_lapack_funcs(("potrf", "potri"), (gram,))
    # gram is symmetric, so its (Fortran-ordered) transpose is the same matrix: factorise it in place
    factor, info = potrf(gram.T, lower=False, overwrite_a=True)
    if info == 0:
        inverse, info = potri(factor, lower=False, overwrite_c=True)
    if info != 0:
        raise np.linalg.LinAlgError(f"XᵀX + lam·I is not positive definite (LAPACK info {info})")
    inverse = np.asarray(inverse)
    for start in range(0, count, step):  # only the upper triangle is set: mirror it, a block at a time
        stop = min(start + step, count)
        inverse[start:stop, :start] = inverse[:start, start:stop].T
        corner = inverse[start:stop, start:stop]
        corner[:] = np.triu(corner) + np.triu(corner, 1).T
    diagonal = np.diag(inverse).copy()
    inverse /= -diagonal[None, :]
    np.fill_diagonal(inverse, 0.0)
    return active, inverse


# ------------------------------------------------------------------------------------------ ranking


def _dense_top(scores: np.ndarray, allowed: np.ndarray, k: int) -> np.ndarray:
    """The ``k`` highest-scoring allowed columns of each row, best first, ties to the lower column;
    ``-1`` padded."""
    values = np.where(allowed, scores, -np.inf)
    width = values.shape[1]
    candidate = allowed
    if k < width:
        threshold = np.partition(values, width - k, axis=1)[:, width - k]
        candidate = allowed & (values >= threshold[:, None])
    rows, columns = np.nonzero(candidate)
    return ranked_entries(rows, columns, values[rows, columns], scores.shape[0], k)


_TIE_DIGITS = 9  # decimal digits, relative to a query's largest score, that EASE scores are ranked by


def _ranked_dense(
    seeds: sp.csr_array, active: np.ndarray, weights: np.ndarray, excluded: sp.csr_array, k: int
) -> np.ndarray:
    """Top ``k`` active items of ``seeds @ weights`` (any sign), leaving out ``excluded`` entries; a query
    whose seeds hold no active item lists nothing. Scores are compared to ``_TIE_DIGITS`` digits of the
    query's largest; a block of queries at a time (bounded memory)."""
    queries, count = seeds.shape[0], active.size
    lists = np.full((queries, k), -1, dtype=np.int64)
    if count == 0:
        return lists
    position = np.full(seeds.shape[1], -1, dtype=np.int64)
    position[active] = np.arange(count)
    local = sp.csr_array(seeds[:, active])
    step = max(1, _CHUNK_ELEMENTS // count)
    for start in range(0, queries, step):
        block = sp.csr_array(local[start : start + step])
        scores = np.asarray(block @ weights)
        # interchangeable items get equal weights only up to rounding from the dense inverse: scores that
        # agree to _TIE_DIGITS digits of the row's largest are ties (to the lower page)
        largest = np.abs(scores).max(axis=1, keepdims=True)
        scores = np.round(scores / np.where(largest > 0, largest, 1.0), _TIE_DIGITS)
        allowed = np.repeat((np.diff(block.indptr) > 0)[:, None], count, axis=1)
        barred = sp.coo_array(excluded[start : start + step])
        where = position[barred.col]
        allowed[barred.row[where >= 0], where[where >= 0]] = False
        top = _dense_top(scores, allowed, k)
        lists[start : start + block.shape[0]] = np.where(top >= 0, active[np.maximum(top, 0)], -1)
    return lists


def _label(value: float) -> str:
    return f"{value:g}"


# -------------------------------------------------------------------------------------- the methods


def _summed_from_seeds(split: Split, weights: sp.csr_array, history: int, k: int) -> np.ndarray:
    """Each query's lists of summed item-item ``weights`` from its starting pages (positive scores)."""
    k = check_count("k", k)
    seeds = _seeds(split, check_count("history", history), last_only=False)
    return _ranked_product(seeds, weights, excluded_pages(split), k)


@dataclass(frozen=True)
class ItemKNN:
    """Sum of :func:`item_similarity` cosines to the query's pages; pages never co-consumed are not listed.

    ``neighbours`` strongest neighbours kept per item (None: all), ``shrink`` added to every cosine's
    denominator, ``history`` as in :class:`~rankrec.evaluate.baselines.CoVisitation`.
    """

    neighbours: int | None = 100
    shrink: float = 0.0
    history: int = 3
    name: str = "item-kNN"

    family: ClassVar[str] = "item-kNN"

    @classmethod
    def grid(cls) -> list[ItemKNN]:
        """Neighbours × shrink to sweep on a validation split (common practice)."""
        return [
            cls(neighbours=n, shrink=s, name=f"item-kNN neighbours={n} shrink={_label(s)}")
            for n in (20, 100, 500)
            for s in (0.0, 10.0)
        ]

    def recommend(self, split: Split, k: int) -> np.ndarray:
        similarity = item_similarity(interactions(split), shrink=self.shrink, neighbours=self.neighbours)
        return _summed_from_seeds(split, similarity, self.history, k)


@dataclass(frozen=True)
class RP3beta:
    """Sum of :func:`rp3beta_similarity` weights from the query's pages; unreachable pages are not listed.

    ``alpha`` and ``beta`` as in :func:`rp3beta_similarity`, ``neighbours`` strongest targets kept per
    item (None: all), ``history`` as in :class:`~rankrec.evaluate.baselines.CoVisitation`.
    """

    alpha: float = 1.0
    beta: float = 0.5
    neighbours: int | None = 100
    history: int = 3
    name: str = "RP3beta"

    family: ClassVar[str] = "RP3beta"

    @classmethod
    def grid(cls) -> list[RP3beta]:
        """Alpha × beta to sweep on a validation split (common practice)."""
        return [
            cls(alpha=a, beta=b, name=f"RP3beta α={_label(a)} β={_label(b)}")
            for a in (0.5, 0.8, 1.0)
            for b in (0.0, 0.2, 0.4, 0.6)
        ]

    def recommend(self, split: Split, k: int) -> np.ndarray:
        weights = rp3beta_similarity(
            interactions(split), alpha=self.alpha, beta=self.beta, neighbours=self.neighbours
        )
        return _summed_from_seeds(split, weights, self.history, k)


@dataclass(frozen=True)
class EASE:
    """Sum of :func:`ease_weights` rows of the query's pages, over every item some row of
    :func:`interactions` holds, whatever the sign of its score (pages no row holds are never listed; a
    query none of whose pages any row holds lists nothing).

    ``lam`` is the ridge penalty, ``history`` as in :class:`~rankrec.evaluate.baselines.CoVisitation`;
    the weights are a dense inverse of (items, items), so more than ``max_items`` items are refused
    (:meth:`applicable`).
    """

    lam: float = 100.0
    history: int = 3
    max_items: int = 8000
    name: str = "EASE"

    family: ClassVar[str] = "EASE"

    @classmethod
    def grid(cls) -> list[EASE]:
        """Ridge penalties to sweep on a validation split (common practice)."""
        return [cls(lam=lam, name=f"EASE λ={_label(lam)}") for lam in (10.0, 100.0, 500.0, 2000.0)]

    def applicable(self, split: Split) -> tuple[bool, str]:
        """(True, a note) when the split's items fit ``max_items``, else (False, why EASE is skipped)."""
        return self._fits(interactions(split))

    def _fits(self, matrix: sp.csr_array) -> tuple[bool, str]:
        bound = check_count("max_items", self.max_items)
        items = int(np.count_nonzero(np.bincount(matrix.indices, minlength=matrix.shape[1])))
        if items > bound:
            return (
                False,
                f"EASE skipped: {items:,} items exceed the bound of {bound:,} (dense item-item inverse)",
            )
        return True, f"EASE: {items:,} items within the bound of {bound:,}"

    def recommend(self, split: Split, k: int) -> np.ndarray:
        k = check_count("k", k)
        matrix = interactions(split)
        fits, message = self._fits(matrix)
        if not fits:
            raise ValueError(message)
        active, weights = ease_weights(matrix, self.lam)
        seeds = _seeds(split, check_count("history", self.history), last_only=False)
        return _ranked_dense(seeds, active, weights, excluded_pages(split), k)

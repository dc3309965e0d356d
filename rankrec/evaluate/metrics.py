"""Offline metrics of top-k recommendation lists, vectorised over users (full-catalogue evaluation).

Shared inputs
-------------
recommended : int array, shape (users, K)
    Page numbers, best first. ``-1`` marks an empty slot: short lists are padded with ``-1`` at the tail
    (a ``-1`` before a page is an empty slot at that rank). A page may appear at most once per list.
relevant : scipy sparse matrix, shape (users, pages)
    Gains of each user's held-out pages: 1 for binary judgements, any positive number for graded ones.
    A page not stored (or stored as 0) is not relevant. Every page of the catalogue counts; there are no
    sampled negatives.

Conventions
-----------
- Ranks start at 1; the discount at rank ``i`` is ``1 / log2(i + 1)``.
- A user with no relevant page gets NaN in every relevance metric (hit rate, precision, recall, MAP, MRR,
  nDCG): such a user says nothing about ranking quality. Average with ``np.nanmean``; the functions of
  :mod:`rankrec.evaluate.statistics` leave NaN users out and report how many users they used.
- ``k`` larger than ``K``: the missing ranks are empty slots, i.e. misses (precision still divides by ``k``).
- Every metric except graded nDCG uses binary relevance (gain > 0).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from .._validation import check_choice, check_count

GAIN_KINDS = ("binary", "graded")


@dataclass(frozen=True)
class _Judged:
    """Lists looked up against the held-out gains once, shared by every relevance metric."""

    gains: np.ndarray  # (users, K) float64: gain of the page in each slot, 0 for misses and empty slots
    relevant_count: np.ndarray  # (users,) int64
    ideal_rows: np.ndarray  # (nnz,) user of each relevant entry, grouped by user
    ideal_ranks: np.ndarray  # (nnz,) 0-based rank of the entry in the user's ideal (gain-descending) order
    ideal_gains: np.ndarray  # (nnz,) gain of the entry

    @property
    def users(self) -> int:
        return self.gains.shape[0]


# ---------------------------------------------------------------------------------------------- validation


def _check_recommended(recommended, pages: int | None = None) -> np.ndarray:
    array = np.asarray(recommended)
    if array.dtype == bool or not np.issubdtype(array.dtype, np.integer):
        raise TypeError(f"recommended must be an integer array of page numbers; got dtype {array.dtype!r}")
    if array.ndim != 2 or array.shape[1] == 0:
        raise ValueError(f"recommended must have shape (users, K) with K >= 1; got shape {array.shape!r}")
    array = array.astype(np.int64, copy=False)
    if array.size:
        low, high = int(array.min()), int(array.max())
        if low < -1:
            raise ValueError(f"recommended holds {low!r}; page numbers are >= 0 and -1 marks an empty slot")
        if pages is not None and high >= pages:
            raise ValueError(f"recommended holds page {high!r} but the catalogue has {pages!r} pages")
        ordered = np.sort(array, axis=1)
        repeated = (ordered[:, 1:] == ordered[:, :-1]) & (ordered[:, 1:] >= 0)
        if repeated.any():
            user = int(np.flatnonzero(repeated.any(axis=1))[0])
            raise ValueError(f"recommended repeats a page in the list of user {user!r}: {array[user]!r}")
    return array


def _check_matrix(name: str, matrix, users: int) -> sp.csr_array:
    """Canonical CSR (sorted, summed, no stored zeros) with finite non-negative float values."""
    if not sp.issparse(matrix):
        raise TypeError(f"{name} must be a scipy sparse matrix, not {type(matrix).__name__}")
    if matrix.ndim != 2 or matrix.shape[0] != users:
        raise ValueError(f"{name} must have shape (users={users!r}, pages); got shape {matrix.shape!r}")
    csr = sp.csr_array(matrix, dtype=np.float64, copy=True)
    csr.sum_duplicates()
    if not np.all(np.isfinite(csr.data)) or (csr.data < 0).any():
        raise ValueError(f"{name} must hold finite non-negative values; got minimum {csr.data.min()!r}")
    csr.eliminate_zeros()
    return csr


def _check_k(k, name: str = "k") -> int:
    return check_count(name, k)


def _check_ks(ks) -> tuple[int, ...]:
    if isinstance(ks, int) or not isinstance(ks, Sequence) or not ks:
        raise TypeError(f"ks must be a non-empty sequence of list lengths; got {ks!r}")
    checked = tuple(_check_k(k, "ks") for k in ks)
    if len(set(checked)) != len(checked):
        raise ValueError(f"ks must not repeat a value; got {ks!r}")
    return checked


def _lookup(matrix: sp.csr_array, recommended: np.ndarray) -> np.ndarray:
    """``matrix[u, recommended[u, j]]`` for every slot (0 for empty slots), without densifying.

    Each stored entry gets the key ``user * pages + page``; canonical CSR keys are already sorted, so one
    ``searchsorted`` answers every slot at once.
    """
    users, pages = matrix.shape
    keys = np.repeat(np.arange(users, dtype=np.int64), np.diff(matrix.indptr)) * pages + matrix.indices
    if keys.size == 0:
        return np.zeros(recommended.shape)
    wanted = np.arange(users, dtype=np.int64)[:, None] * pages + recommended
    position = np.minimum(np.searchsorted(keys, wanted), keys.size - 1)
    found = (keys[position] == wanted) & (recommended >= 0)
    return np.where(found, matrix.data[position], 0.0)


def _judge(recommended, relevant) -> _Judged:
    array = _check_recommended(recommended)
    users = array.shape[0]
    matrix = _check_matrix("relevant", relevant, users)
    if array.size and int(array.max()) >= matrix.shape[1]:
        raise ValueError(
            f"recommended holds page {int(array.max())!r} but relevant has {matrix.shape[1]!r} page columns"
        )
    rows = np.repeat(np.arange(users, dtype=np.int64), np.diff(matrix.indptr))
    order = np.lexsort((-matrix.data, rows))  # by user, then gain descending
    ranks = np.arange(rows.size, dtype=np.int64) - matrix.indptr[rows]
    return _Judged(
        gains=_lookup(matrix, array),
        relevant_count=np.diff(matrix.indptr).astype(np.int64),
        ideal_rows=rows,
        ideal_ranks=ranks,
        ideal_gains=matrix.data[order],
    )


def _discounts(n: int) -> np.ndarray:
    return 1.0 / np.log2(np.arange(2, n + 2, dtype=np.float64))


def _undefined_where_nothing_relevant(values: np.ndarray, judged: _Judged) -> np.ndarray:
    values = np.asarray(values, dtype=np.float64)
    values[judged.relevant_count == 0] = np.nan
    return values


# ------------------------------------------------------------------------------- metrics on judged lists


def _hit_rate(judged: _Judged, k: int) -> np.ndarray:
    return _undefined_where_nothing_relevant((judged.gains[:, :k] > 0).any(axis=1), judged)


def _precision(judged: _Judged, k: int) -> np.ndarray:
    return _undefined_where_nothing_relevant((judged.gains[:, :k] > 0).sum(axis=1) / k, judged)


def _recall(judged: _Judged, k: int) -> np.ndarray:
    hits = (judged.gains[:, :k] > 0).sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return _undefined_where_nothing_relevant(hits / judged.relevant_count, judged)


def _average_precision(judged: _Judged, k: int) -> np.ndarray:
    hit = judged.gains[:, :k] > 0
    precision_at_rank = np.cumsum(hit, axis=1) / np.arange(1, hit.shape[1] + 1)
    normaliser = np.minimum(k, judged.relevant_count)
    with np.errstate(invalid="ignore", divide="ignore"):
        values = (precision_at_rank * hit).sum(axis=1) / normaliser
    return _undefined_where_nothing_relevant(values, judged)


def _reciprocal_rank(judged: _Judged, k: int | None) -> np.ndarray:
    hit = judged.gains[:, :k] > 0
    first = np.argmax(hit, axis=1)
    values = np.where(hit.any(axis=1), 1.0 / (first + 1), 0.0)
    return _undefined_where_nothing_relevant(values, judged)


def _dcg(judged: _Judged, k: int, gains: str) -> np.ndarray:
    slot_gains = judged.gains[:, :k]
    if gains == "binary":
        slot_gains = (slot_gains > 0).astype(np.float64)
    return slot_gains @ _discounts(slot_gains.shape[1])


def _ndcg(judged: _Judged, k: int, gains: str) -> np.ndarray:
    within = judged.ideal_ranks < k
    ideal_gains = judged.ideal_gains[within] if gains == "graded" else 1.0
    ideal_discounts = 1.0 / np.log2(judged.ideal_ranks[within] + 2.0)
    idcg = np.bincount(
        judged.ideal_rows[within], weights=ideal_gains * ideal_discounts, minlength=judged.users
    )
    with np.errstate(invalid="ignore", divide="ignore"):
        # dcg <= idcg holds exactly; the clip removes the last-bit rounding of two summation orders
        values = np.minimum(_dcg(judged, k, gains) / idcg, 1.0)
    return _undefined_where_nothing_relevant(values, judged)


# ---------------------------------------------------------------------------------- public: relevance


def hit_rate(recommended, relevant, k: int) -> np.ndarray:
    """1 when at least one relevant page is in the top ``k``, else 0; NaN for users with nothing relevant.

    >>> import numpy as np, scipy.sparse as sp
    >>> hit_rate(np.array([[2, 0], [1, -1]]), sp.csr_array(np.array([[1, 0, 0], [0, 0, 1]])), 2).tolist()
    [1.0, 0.0]
    """
    return _hit_rate(_judge(recommended, relevant), _check_k(k))


def precision(recommended, relevant, k: int) -> np.ndarray:
    """Precision@k: relevant pages among the top ``k`` divided by ``k`` (empty slots count as misses).

    Returns NaN for users with no relevant page.
    """
    return _precision(_judge(recommended, relevant), _check_k(k))


def recall(recommended, relevant, k: int) -> np.ndarray:
    """Recall@k: relevant pages among the top ``k`` divided by the user's number of relevant pages.

    This is the standard definition; it cannot reach 1 when a user has more than ``k`` relevant pages.
    Returns NaN for users with no relevant page.
    """
    return _recall(_judge(recommended, relevant), _check_k(k))


def average_precision(recommended, relevant, k: int) -> np.ndarray:
    """AP@k (its mean over users is MAP@k), binary relevance.

    ``AP@k = Σ_{i ≤ k} P@i · rel_i / min(k, |R|)`` where ``rel_i`` is 1 when the page at rank ``i`` is
    relevant and ``|R|`` is the user's number of relevant pages. The normaliser ``min(k, |R|)`` makes a
    perfect list score 1 even when ``|R| > k``; when ``k >= |R|`` it equals ``|R|`` (uninterpolated AP).
    Returns NaN for users with no relevant page.

    >>> import numpy as np, scipy.sparse as sp
    >>> rel = sp.csr_array(np.array([[1, 1, 0, 0]]))
    >>> round(float(average_precision(np.array([[0, 2, 1]]), rel, 3)[0]), 4)  # (1/1 + 2/3) / 2
    0.8333
    """
    return _average_precision(_judge(recommended, relevant), _check_k(k))


def reciprocal_rank(recommended, relevant, k: int | None = None) -> np.ndarray:
    """1 / rank of the first relevant page within the top ``k`` (whole list when ``k`` is None), else 0.

    Its mean over users is the MRR. Returns NaN for users with no relevant page.
    """
    return _reciprocal_rank(_judge(recommended, relevant), None if k is None else _check_k(k))


def dcg(recommended, relevant, k: int, gains: str = "binary") -> np.ndarray:
    """DCG@k = ``Σ_{i ≤ k} g_i / log2(i + 1)``, unnormalised (0 for users with nothing relevant).

    ``gains`` as in :func:`ndcg`.

    >>> import numpy as np, scipy.sparse as sp
    >>> dcg(np.array([[1, 0]]), sp.csr_array(np.array([[0, 1]])), 2).round(3).tolist()  # 1 / log2(2)
    [1.0]
    """
    check_choice("gains", gains, GAIN_KINDS)
    return _dcg(_judge(recommended, relevant), _check_k(k), gains)


def ndcg(recommended, relevant, k: int, gains: str = "binary") -> np.ndarray:
    """nDCG@k = DCG@k / IDCG@k with ``DCG@k = Σ_{i ≤ k} g_i / log2(i + 1)`` (Järvelin & Kekäläinen 2002).

    Parameters
    ----------
    gains : {"binary", "graded"}
        ``"binary"``: ``g_i`` is 1 for a relevant page. ``"graded"``: ``g_i`` is the stored relevance itself
        (linear gain, not ``2^rel − 1``).

    The ideal ranking IDCG@k sorts *all* of the user's relevant pages by gain, including those the list
    missed, so a list that leaves out relevant pages scores below 1. NaN for users with no relevant page.

    >>> import numpy as np, scipy.sparse as sp
    >>> rel = sp.csr_array(np.array([[3.0, 2.0, 0.0, 1.0]]))
    >>> bool(ndcg(np.array([[0, 1, 3]]), rel, 3, gains="graded")[0] == 1.0)
    True
    """
    check_choice("gains", gains, GAIN_KINDS)
    return _ndcg(_judge(recommended, relevant), _check_k(k), gains)


# ---------------------------------------------------------------------------------- public: catalogue


def coverage(recommended, catalogue_size: int, *, k: int | None = None) -> float:
    """Share of the catalogue's pages that appear in at least one list (top ``k`` when given).

    >>> import numpy as np
    >>> coverage(np.array([[0, 1], [1, -1]]), 4)
    0.5
    """
    catalogue_size = check_count("catalogue_size", catalogue_size)
    array = _check_recommended(recommended, catalogue_size)[:, : None if k is None else _check_k(k)]
    shown = np.zeros(catalogue_size, dtype=bool)
    shown[array[array >= 0]] = True
    return float(shown.sum() / catalogue_size)


def _per_list_mean(values: np.ndarray, filled: np.ndarray) -> np.ndarray:
    counts = filled.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(counts > 0, np.where(filled, values, 0.0).sum(axis=1) / counts, np.nan)


def novelty(recommended, popularity, *, k: int | None = None) -> np.ndarray:
    """Mean self-information ``−log2 p(page)`` of each list's pages, in bits; NaN for an empty list.

    ``p`` comes from training popularity counts with add-one (Laplace) smoothing:
    ``p(page) = (count + 1) / (Σ counts + pages)``, so a page never seen in training stays finite.

    >>> import numpy as np
    >>> novelty(np.array([[0, 1]]), np.array([6, 0])).round(3).tolist()  # p = 7/8 and 1/8
    [1.596]
    """
    counts = np.asarray(popularity, dtype=np.float64)
    if counts.ndim != 1 or counts.size == 0 or not np.all(np.isfinite(counts)) or (counts < 0).any():
        raise ValueError(f"popularity must be a non-empty 1-D array of counts >= 0; got {popularity!r}")
    array = _check_recommended(recommended, counts.size)[:, : None if k is None else _check_k(k)]
    information = -np.log2((counts + 1.0) / (counts.sum() + counts.size))
    filled = array >= 0
    return _per_list_mean(information[np.where(filled, array, 0)], filled)


def intra_list_diversity(recommended, space_of_page, k: int) -> np.ndarray:
    """Distinct spaces in each top-``k`` list divided by the number of pages in it; NaN for an empty list.

    1 means every page comes from a different space; ``1 / n`` means all ``n`` share one. (A category
    count, not the pairwise-dissimilarity average that the name sometimes denotes.)

    >>> import numpy as np
    >>> intra_list_diversity(np.array([[0, 1, 2, -1]]), np.array([5, 5, 7]), 4).round(3).tolist()
    [0.667]
    """
    spaces = np.asarray(space_of_page)
    if spaces.ndim != 1 or not np.issubdtype(spaces.dtype, np.integer) or (spaces < 0).any():
        raise ValueError(f"space_of_page must be a 1-D array of space numbers >= 0; got {space_of_page!r}")
    array = _check_recommended(recommended, spaces.size)[:, : _check_k(k)]
    filled = array >= 0
    ordered = np.sort(np.where(filled, spaces[np.where(filled, array, 0)], -1), axis=1)
    starts = np.ones(ordered.shape, dtype=bool)
    starts[:, 1:] = ordered[:, 1:] != ordered[:, :-1]
    distinct = (starts & (ordered >= 0)).sum(axis=1)
    counts = filled.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(counts > 0, distinct / counts, np.nan)


def unvisited_share(recommended, visited, k: int) -> np.ndarray:
    """Share of each top-``k`` list's pages that the user never visited in training; NaN for an empty list.

    ``visited`` is a sparse (users, pages) matrix; any stored value > 0 counts as a visit.
    """
    array = _check_recommended(recommended)[:, : _check_k(k)]
    matrix = _check_matrix("visited", visited, array.shape[0])
    if array.size and int(array.max()) >= matrix.shape[1]:
        raise ValueError(f"recommended holds page {int(array.max())!r}; visited has {matrix.shape[1]!r}")
    filled = array >= 0
    return _per_list_mean((_lookup(matrix, array) == 0).astype(np.float64), filled)


def hub_in_top(recommended, hubs, k: int = 3) -> np.ndarray:
    """1 when one of the first ``k`` pages of a list is a hub (``hubs``: a boolean per page), else 0;
    NaN for an empty list."""
    array = _check_recommended(recommended)[:, : _check_k(k)]
    hubs = np.asarray(hubs, dtype=bool)
    if array.size and int(array.max()) >= hubs.size:
        raise ValueError(f"recommended holds page {int(array.max())!r}; hubs has {hubs.size!r}")
    filled = array >= 0
    found = (hubs[np.where(filled, array, 0)] & filled).any(axis=1).astype(np.float64)
    return np.where(filled.any(axis=1), found, np.nan)


# ---------------------------------------------------------------------------------------- all at once


def evaluate_lists(
    recommended,
    relevant,
    *,
    ks: Sequence[int] = (5, 10, 20),
    gains: str = "binary",
    popularity=None,
    space_of_page=None,
    visited=None,
    hubs=None,
) -> dict[str, np.ndarray]:
    """Every per-user metric for every ``k`` in ``ks``, sharing one look-up of the lists.

    Keys (each value an array of shape (users,)): for each ``k``: ``"hit_rate@k"``, ``"precision@k"``,
    ``"recall@k"``, ``"map@k"`` (AP@k), ``"ndcg@k"`` (with ``gains``); once: ``"mrr"`` (reciprocal rank
    over the whole list). With ``popularity``: ``"novelty@k"``; with ``space_of_page``:
    ``"intra_list_diversity@k"``; with ``visited``: ``"unvisited_share@k"``; with ``hubs`` (once):
    ``"hub_in_top_3"`` (:func:`hub_in_top`). Coverage is one number for the catalogue, not per user: call
    :func:`coverage`.

    >>> import numpy as np, scipy.sparse as sp
    >>> scores = evaluate_lists(np.array([[1, 0]]), sp.csr_array(np.array([[1, 0]])), ks=(1, 2))
    >>> sorted(scores)[:3], float(scores["ndcg@2"][0]) < 1
    (['hit_rate@1', 'hit_rate@2', 'map@1'], True)
    """
    check_choice("gains", gains, GAIN_KINDS)
    ks = _check_ks(ks)
    judged = _judge(recommended, relevant)
    results: dict[str, np.ndarray] = {}
    for k in ks:
        results[f"hit_rate@{k}"] = _hit_rate(judged, k)
        results[f"precision@{k}"] = _precision(judged, k)
        results[f"recall@{k}"] = _recall(judged, k)
        results[f"map@{k}"] = _average_precision(judged, k)
        results[f"ndcg@{k}"] = _ndcg(judged, k, gains)
    results["mrr"] = _reciprocal_rank(judged, None)
    for k in ks:
        if popularity is not None:
            results[f"novelty@{k}"] = novelty(recommended, popularity, k=k)
        if space_of_page is not None:
            results[f"intra_list_diversity@{k}"] = intra_list_diversity(recommended, space_of_page, k)
        if visited is not None:
            results[f"unvisited_share@{k}"] = unvisited_share(recommended, visited, k)
    if hubs is not None:
        results["hub_in_top_3"] = hub_in_top(recommended, hubs, 3)
    return results

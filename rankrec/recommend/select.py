"""Choosing a list's pages from scores: the one ranking every list uses, served or evaluated.

- :func:`top_k`: the indices of the largest entries, ties to the lower index;
- :func:`select_pages`: the best ``k`` eligible pages of one vector or of a block of them (lifted scores
  first, then eligible pages by global PageRank);
- :func:`cap_per_space`: at most ``per_space`` pages of one space in a list;
- :func:`hubs_later`: no site hub in a related list's first places while another candidate can take them.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from .._validation import check_count
from ..configuration import check_lift


def top_k(vector: np.ndarray, k: int, exclude: np.ndarray | None = None) -> np.ndarray:
    """Indices of the ``k`` largest entries, best first; ties go to the lower index.

    >>> top_k(np.array([0.1, 0.4, 0.4, 0.05]), 2).tolist()
    [1, 2]
    """
    scores = np.asarray(vector, dtype=np.float64)
    if exclude is not None and exclude.size:
        scores = scores.copy()
        scores[exclude] = -np.inf
    k = min(k, int(np.count_nonzero(np.isfinite(scores))))
    if k <= 0:
        return np.zeros(0, dtype=np.int64)
    candidates = np.argpartition(-scores, k - 1)[:k] if k < scores.size else np.arange(scores.size)
    order = np.lexsort((candidates, -scores[candidates]))
    return candidates[order]


def lifted(values: np.ndarray, global_values: np.ndarray, lift: float) -> np.ndarray:
    """The ranking score ``value / global^lift`` (plain values when ``lift`` is 0)."""
    return values / np.power(global_values, lift) if lift else np.asarray(values, dtype=float)


_SELECT_CELLS = 1 << 22  # pages x columns handled at once when filling short lists
_FILL_FIRST = 256  # pages of the global order looked at first when filling (x4 until enough)


def select_pages(
    vectors, global_vector, eligible, k: int, *, lift: float, order=None, divisor=None
) -> np.ndarray:
    """The best ``k`` eligible pages of each column of ``vectors``: the ranking every list uses.

    Pages with a positive score come first, ranked by ``score / global^lift`` (``lift`` 0: by
    score); the places left go to the other eligible pages by global PageRank. Ties go to the
    lower page number. Serving calls it for one vector; offline evaluation for blocks of them.

    Parameters
    ----------
    vectors : array of shape (n,) or (n, q)
        PageRank scores, one column per list.
    global_vector : array of shape (n,)
        Global PageRank (positive).
    eligible : bool array of shape (n,) or like ``vectors``
        Pages the list may hold.
    k : int
        Length of each list.
    lift : float
        Lift exponent, >= 0.
    order : int array of shape (n,), optional
        Every page by descending ``global_vector``, ties to the lower page
        (``np.lexsort((np.arange(n), -global_vector))``, as :attr:`rankrec.index.Index.global_order`
        keeps it); computed when not given.
    divisor : float array of shape (n,), optional
        ``global_vector ** lift`` (ones for lift 0), as :meth:`rankrec.index.Index.lift_divisor` keeps
        it: one vector's list is then chosen in one pass over the pages.

    Returns
    -------
    int64 array of shape (k,) or (q, k): page numbers, best first, ``-1`` padded at the tail
    when fewer than ``k`` pages are eligible.

    >>> select_pages(np.array([0.5, 0.0, 0.2, 0.3]), np.array([0.5, 0.1, 0.1, 0.3]),
    ...              np.array([True, True, True, False]), 3, lift=1.0).tolist()
    [2, 0, 1]
    """
    k = check_count("k", k)
    check_lift(lift)
    scores = np.asarray(vectors, dtype=np.float64)
    single = scores.ndim == 1
    scores = scores[:, None] if single else scores
    if scores.ndim != 2:
        raise ValueError(f"vectors must have shape (n,) or (n, q); got {np.shape(vectors)!r}")
    n, columns = scores.shape
    overall = np.asarray(global_vector, dtype=np.float64)
    allowed = np.asarray(eligible, dtype=bool)
    allowed = allowed[:, None] if allowed.ndim == 1 else allowed
    if overall.shape != (n,) or allowed.shape[0] != n or allowed.shape[1] not in (1, columns):
        raise ValueError(
            f"global_vector {overall.shape!r} and eligible {np.shape(eligible)!r} must match vectors "
            f"{np.shape(vectors)!r}"
        )
    if order is not None and np.shape(order) != (n,):
        raise ValueError(f"order must have shape ({n},); got {np.shape(order)!r}")
    if single and divisor is not None and allowed.shape[1] == 1:
        lists = _best_scored(scores[:, 0], np.asarray(divisor, dtype=np.float64), allowed[:, 0], k)[None, :]
        positive = None
    else:
        positive = allowed & (scores > 0)
        lists = _scored(scores, overall, positive, k, lift)
    found = (lists >= 0).sum(axis=1)
    short = np.flatnonzero(found < k)
    if short.size:
        order = np.lexsort((np.arange(n), -overall)) if order is None else np.asarray(order)
        step = max(1, _SELECT_CELLS // max(n, 1))
        if positive is None:
            positive = allowed & (scores > 0)
        for start in range(0, short.size, step):
            _fill(lists, short[start : start + step], found, allowed, positive, order, k)
    return lists[0] if single else lists


def _scored(scores, overall, positive, k: int, lift: float) -> np.ndarray:
    """(columns, k): the best positive-scored pages of each column by lifted score (-1 padded)."""
    if scores.shape[1] > 1:
        return _top_of_columns(np.where(positive, lifted(scores, overall[:, None], lift), -np.inf), k)
    # one list: rank only the scored pages (often few); rows ascend, so ties still go to the lower page
    rows = np.flatnonzero(positive[:, 0])
    best = _top_of_columns(lifted(scores[rows, 0], overall[rows], lift)[:, None], k)
    return np.where(best >= 0, rows[np.maximum(best, 0)] if rows.size else -1, -1)


def _best_scored(scores: np.ndarray, divisor: np.ndarray, allowed: np.ndarray, k: int) -> np.ndarray:
    """(k,): the best allowed pages with a positive score by ``score / divisor``, ties to the lower page,
    -1 padded: what :func:`_scored` gives for one column, in one pass (a heap of the ``k`` best)."""
    lists = np.full(k, -1, dtype=np.int64)
    values, pages = _heap_best(scores, divisor, allowed, k)
    lists[: pages.size] = pages[np.lexsort((pages, -values))]
    return lists


_BELOW = 1.0 - 1e-9  # a product within this factor of the heap's worst is divided out exactly


@njit(cache=True, boundscheck=False)
def _heap_best(scores, divisor, allowed, k):  # pragma: no cover
    """Pages of the ``k`` largest ``scores[i] / divisor[i]`` over allowed ``i`` with ``scores[i] > 0``,
    and their values, in heap order. The heap's root is its worst entry; pages come in ascending
    order, so a later page with an equal value never displaces an earlier one."""
    values = np.empty(k)
    pages = np.empty(k, dtype=np.int64)
    size = 0
    for i in range(scores.size):
        score = scores[i]
        if not (score > 0) or not allowed[i]:
            continue
        if size == k and score <= values[0] * divisor[i] * _BELOW:
            continue  # surely below the heap's worst: skip the division (the margin covers rounding)
        value = score / divisor[i]
        if size < k:
            at = size  # sift up: the worse (smaller value, or equal value and larger page) rises
            size += 1
            while at > 0:
                parent = (at - 1) // 2
                if values[parent] < value or (values[parent] == value and pages[parent] > i):
                    break
                values[at], pages[at] = values[parent], pages[parent]
                at = parent
            values[at], pages[at] = value, i
        elif value > values[0]:
            at = 0  # sift down from the root
            while True:
                child = 2 * at + 1
                if child >= size:
                    break
                other = child + 1
                if other < size and (
                    values[other] < values[child]
                    or (values[other] == values[child] and pages[other] > pages[child])
                ):
                    child = other
                if value < values[child] or (value == values[child] and i > pages[child]):
                    break
                values[at], pages[at] = values[child], pages[child]
                at = child
            values[at], pages[at] = value, i
    return values[:size], pages[:size]


def _fill(lists, chunk, found, allowed, positive, order, k: int) -> None:
    """Give the short lists ``chunk`` their remaining places: eligible unscored pages in ``order``.

    Only a head of the order is looked at (the first pages there are nearly always eligible), and
    a longer head only while some list still lacks pages; the first free pages of the head are the
    first free pages of the whole order, so the lists equal those of a pass over all pages.
    """
    n = order.size
    usable = allowed if allowed.shape[1] == 1 else allowed[:, chunk]
    unscored = ~positive[:, chunk]
    need = (k - found[chunk])[None, :]
    head = min(n, _FILL_FIRST + 4 * k)
    while True:
        pages = order[:head]
        free = usable[pages] & unscored[pages]
        rank = np.cumsum(free, axis=0) - 1
        if head == n or bool((rank[-1] + 1 >= need).all()):
            break
        head = min(n, head * 4)
    rows, cols = np.nonzero(free & (rank < need))
    lists[chunk[cols], found[chunk[cols]] + rank[rows, cols]] = pages[rows]


def _top_of_columns(ranked: np.ndarray, k: int) -> np.ndarray:
    """(columns, k): each column's ``k`` largest finite entries, best first, ties to the lower row."""
    n, columns = ranked.shape
    width = min(k, n)
    lists = np.full((columns, k), -1, dtype=np.int64)
    if width == 0 or columns == 0:
        return lists
    threshold = -np.partition(-ranked, width - 1, axis=0)[width - 1]
    above = ranked > threshold
    level = ranked == threshold
    wanted = width - above.sum(axis=0)
    chosen = above | (level & (np.cumsum(level, axis=0) <= wanted))
    cols, rows = np.nonzero(chosen.T)  # grouped by column, width entries each
    rows = rows.reshape(columns, width)
    values = np.take_along_axis(ranked.T, rows, axis=1)
    order = np.lexsort((rows, -values), axis=-1)
    rows, values = np.take_along_axis(rows, order, 1), np.take_along_axis(values, order, 1)
    lists[:, :width] = np.where(np.isfinite(values), rows, -1)
    return lists


def hubs_later(pages, hubs, top: int) -> np.ndarray:
    """Positions of ``pages`` (a list, best first) in the order that keeps site hubs (``hubs``: a boolean
    per page, or None) out of the first ``top`` places: the first ``top`` pages that are not hubs lead,
    every other page follows in its own order. A list with too few other pages keeps hubs where needed.

    >>> hubs_later([7, 3, 5, 9], np.array([0, 0, 0, 1, 0, 0, 0, 1, 0, 0], dtype=bool), 2).tolist()
    [2, 3, 0, 1]
    """
    pages = np.asarray(pages, dtype=np.int64)
    positions = np.arange(pages.size)
    if hubs is None or top == 0 or pages.size == 0:
        return positions
    is_hub = np.asarray(hubs)[pages]
    if not is_hub[:top].any():
        return positions
    lead = np.flatnonzero(~is_hub)[:top]
    return np.concatenate([lead, positions[~np.isin(positions, lead)]])


def cap_per_space(codes, k: int, per_space: int, taken: dict) -> list[int]:
    """Positions of the first ``k`` entries of ``codes`` (space codes, best first) that keep at most
    ``per_space`` pages of each space; ``taken`` counts what earlier parts of the list hold (updated).

    >>> cap_per_space([0, 0, 1, 0, 2], 3, 1, {})
    [0, 2, 4]
    """
    chosen = []
    for position, code in enumerate(np.asarray(codes).tolist()):
        if len(chosen) == k:
            break
        if taken.get(code, 0) >= per_space:
            continue
        taken[code] = taken.get(code, 0) + 1
        chosen.append(position)
    return chosen


def choose_pages(
    vector,
    global_vector,
    eligible,
    k: int,
    *,
    lift: float,
    order=None,
    per_space: int | None = None,
    space=None,
    divisor=None,
) -> np.ndarray:
    """One list (page numbers, best first, no padding): :func:`select_pages`, or with ``per_space`` at
    most that many pages of one space (``space`` holds each page's code), in the same order otherwise."""
    if per_space is None:
        chosen = select_pages(vector, global_vector, eligible, k, lift=lift, order=order, divisor=divisor)
        return chosen[chosen >= 0]
    check_count("per_space", per_space)
    vector, overall, codes = np.asarray(vector), np.asarray(global_vector), np.asarray(space)
    chosen: list[int] = []
    taken: dict = {}
    positive = np.flatnonzero(eligible & (vector > 0))
    rest = np.flatnonzero(eligible & ~(vector > 0))
    # scored pages by lifted score, then the others by global PageRank, each part capped in turn
    for pages, scores in (
        (positive, lifted(vector[positive], overall[positive], lift)),
        (rest, overall[rest]),
    ):
        want = k
        while len(chosen) < k:
            ordered = pages[top_k(scores, min(want, pages.size))]
            kept = cap_per_space(codes[ordered], k - len(chosen), per_space, dict(taken))
            if len(kept) == k - len(chosen) or want >= pages.size:
                cap_per_space(codes[ordered[kept]], k, per_space, taken)
                chosen += ordered[kept].tolist()
                break
            want *= 4
    return np.array(chosen, dtype=np.int64)

"""Where a page's score comes from: the in-links that carry it, grouped by page and by space.

For a personalised PageRank vector ``x`` (strongly preferential: dangling mass returns to the
restart distribution ``r``), every page ``j`` satisfies

``x[j] = c·r[j] + α Σ_u x[u] P[u, j]``,  with ``c = (1 − α) + α·Σ_{d dangling} x[d]``,

so ``α·x[u]·P[u, j]`` is exactly the share of ``j``'s score that arrives over the link u → j
and ``c·r[j]`` the share that comes from restarting at ``j``. The *strongest intermediate page*
of ``j`` is the in-neighbour with the largest share; its *strongest space* is the space whose
pages together send the most. Both are what an item's explanation names.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

VIA_PAGE, VIA_SPACE, FROM_RESTART, NO_LINK, SIMILAR_TEXT, READ_ON = 0, 1, 2, 3, 4, 5
"""Kinds of explanation: a page, a space, the restart itself (read before), none (score zero), text
similarity (the larger part of a related score that mixes in text: :mod:`rankrec.recommend.candidates`),
and readers going on to the page from the seed (the ranker's reading features weigh most)."""


@dataclass(frozen=True)
class Contributions:
    """Per item: strongest intermediate page and space, and which of the kinds explains it best.

    ``via[i]`` is a page number (-1: no in-link carries score), ``space[i]`` a space code (-1:
    none), ``kind[i]`` one of :data:`VIA_PAGE`, :data:`VIA_SPACE`, :data:`FROM_RESTART`,
    :data:`NO_LINK`.
    """

    via: np.ndarray
    space: np.ndarray
    kind: np.ndarray


def _gather_rows(indptr: np.ndarray, items: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Positions of the stored entries of rows ``items`` of a CSR matrix, and the row each belongs to."""
    starts = np.asarray(indptr[items], dtype=np.int64)
    lengths = np.asarray(indptr[items + 1], dtype=np.int64) - starts
    owner = np.repeat(np.arange(items.size), lengths)
    first = np.cumsum(lengths) - lengths
    positions = np.arange(int(lengths.sum()), dtype=np.int64) - np.repeat(first - starts, lengths)
    return positions, owner


def _from_senders(forward, indices, values, items: np.ndarray, in_pointers, damping: float):
    """(sources, item row, share) of every link from a page of the vector's support (``indices`` with
    ``values``) to an item, read from the support's out-links; None when the items' in-links are fewer
    (reading those is then cheaper)."""
    indices = np.asarray(indices, dtype=np.int64)
    values = np.asarray(values, dtype=np.float64)
    pointers = np.asarray(forward.indptr)
    sending = int((pointers[indices + 1] - pointers[indices]).sum()) if indices.size else 0
    receiving = int((np.asarray(in_pointers)[items + 1] - np.asarray(in_pointers)[items]).sum())
    if sending >= receiving:
        return None
    positions, owner = _gather_rows(pointers, indices)
    targets = np.asarray(forward.indices[positions], dtype=np.int64)
    order = np.argsort(items, kind="stable")
    ranked = items[order]
    place = np.minimum(np.searchsorted(ranked, targets), ranked.size - 1)
    hit = ranked[place] == targets
    share = damping * values[owner[hit]] * np.asarray(forward.data[positions[hit]], dtype=np.float64)
    return indices[owner[hit]], order[place[hit]], share


def contributions(
    backward,
    lookup,
    items: np.ndarray,
    space_codes: np.ndarray,
    *,
    damping: float,
    restart_part: np.ndarray | None = None,
    support: tuple | None = None,
) -> Contributions:
    """Strongest in-link sources of ``items`` under the vector that ``lookup`` reads.

    Parameters
    ----------
    backward : scipy.sparse.csr_array
        ``Pᵀ`` (row ``j`` lists the pages linking to ``j`` with ``P[u, j]``).
    lookup : callable
        ``lookup(pages)`` returns the vector's values at those pages.
    items : ndarray of int
    space_codes : ndarray of int
        Space code of every page (-1: none).
    damping : float
    restart_part : ndarray, optional
        ``c·r[j]`` for each item, when the restart distribution is not the item's own seed.
    support : (forward, indices, values), optional
        ``P`` itself and the vector's nonzero pages (sorted) with their values. Only those pages send
        score, so when their out-links are fewer than the items' in-links (items that are site hubs
        have hundreds of thousands) the shares are read from the out-links instead: the same result.

    Returns
    -------
    Contributions
        ``kind`` is VIA_PAGE when the strongest page carries at least half of the in-link
        share, else VIA_SPACE; FROM_RESTART when ``restart_part`` exceeds the largest single
        in-link share; NO_LINK when nothing reaches the item.

    Examples
    --------
    >>> import scipy.sparse as sp
    >>> links = sp.csr_array(np.array([[0, 1.0, 0], [0, 0, 1.0], [1.0, 0, 0]]))  # cycle 0 -> 1 -> 2 -> 0
    >>> x = np.array([0.5, 0.3, 0.2])
    >>> c = contributions(sp.csr_array(links.T), lambda pages: x[pages], np.array([2]),
    ...                   np.array([0, 0, 1]), damping=0.85)
    >>> c.via.tolist(), c.kind.tolist()
    ([1], [0])
    """
    items = np.asarray(items, dtype=np.int64)
    count = items.size
    via = np.full(count, -1, dtype=np.int64)
    space = np.full(count, -1, dtype=np.int64)
    kind = np.full(count, NO_LINK, dtype=np.int8)
    if count == 0:
        return Contributions(via, space, kind)
    sent = None if support is None else _from_senders(*support, items, backward.indptr, damping)
    if sent is None:
        positions, owner = _gather_rows(backward.indptr, items)
        sources = np.asarray(backward.indices[positions], dtype=np.int64)
        share = damping * np.asarray(lookup(sources), dtype=np.float64) * backward.data[positions]
    else:
        sources, owner, share = sent
    total = np.bincount(owner, weights=share, minlength=count)
    positive = share > 0
    sources, owner_kept, share_kept = sources[positive], owner[positive], share[positive]
    best_share = np.zeros(count)
    if sources.size:
        order = np.lexsort((sources, -share_kept, owner_kept))
        starts = np.flatnonzero(np.r_[True, owner_kept[order][1:] != owner_kept[order][:-1]])
        leaders = order[starts]
        via[owner_kept[leaders]] = sources[leaders]
        best_share[owner_kept[leaders]] = share_kept[leaders]
        codes = np.asarray(space_codes[sources], dtype=np.int64)
        width = int(codes.max(initial=-1)) + 2  # the codes the sources hold (not all pages': a million)
        grouped = np.bincount(owner_kept * width + codes + 1, weights=share_kept, minlength=count * width)
        grouped = grouped.reshape(count, width)[:, 1:]  # drop "no space"
        if grouped.shape[1]:
            strongest = grouped.argmax(axis=1)
            space = np.where(grouped.max(axis=1) > 0, strongest, -1)
    reached = total > 0
    kind[reached] = np.where(best_share[reached] >= 0.5 * total[reached], VIA_PAGE, VIA_SPACE)
    kind[reached & (space < 0)] = VIA_PAGE
    if restart_part is not None:
        restart_part = np.asarray(restart_part, dtype=np.float64)
        kind[(restart_part > 0) & (restart_part >= best_share)] = FROM_RESTART
    return Contributions(via, space, kind)


def restart_scale(vector: np.ndarray, dangling: np.ndarray, damping: float) -> float:
    """``c = (1 − α) + α·(mass on dangling pages)`` of a normalised strongly-preferential vector
    (``dangling``: the dangling pages, as numbers or as a mask)."""
    return (1.0 - damping) + damping * float(np.asarray(vector)[dangling].sum())

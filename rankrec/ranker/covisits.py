"""What readers read together: each page's strongest co-visited pages and the pages sessions go on to
from it, candidate sources and features of the related-list ranker (:mod:`rankrec.ranker.features`).

- :func:`covisited_pages`: the co-visitation baseline's own cosine
  (:func:`rankrec.evaluate.baselines.covisitation`), undirected;
- :func:`session_successors`: directed, the share of the sessions holding a page that read another page
  *after* it (anywhere later in the session), the pairwise form of sequential rules (common practice in
  session-based recommendation);
- :func:`page_reading`: per page, how often readers follow the links that lead to it (click-through)
  and how many sessions read it.

Both read the views the evidence holds (a training part's alone when the ranker learns from sessions:
the sessions that give its labels never reach them), leave out views of pages outside the wiki, cut
sessions at ``session_gap_seconds``, leave out sessions of more than ``MAX_SESSION_PAGES`` distinct
pages (mostly crawlers: common practice), and keep each page's ``NEIGHBOURS_KEPT`` strongest pages so
that they fit an index.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from ..profiles import ViewLog

NEIGHBOURS_KEPT = 50  # co-visited or successor pages kept per page (a candidate pool takes them all)
# fewest sessions that read a page after another for the pair to count: fewer would let a list (and its
# reason "readers go on to it from here") tell what one or two readers did (common practice: k-anonymity)
MIN_SESSIONS = 5
MAX_SESSION_PAGES = 100
CLICK_PRIOR = 50.0  # views added to a page's exposure: a page few readers saw tends to the prior 1/50
_PAIRS_PER_CHUNK = 1 << 22  # ordered pairs counted at once (bounded memory on long histories)


def _inside(views: ViewLog):
    inside = np.asarray(views.pages) >= 0
    return views.users[inside], views.pages[inside], views.times[inside]


def _pruned(matrix, top: int) -> sp.csr_array | None:
    from ..evaluate.baselines import _strongest  # evaluation imports the build: not at the top

    kept = _strongest(sp.csr_array(matrix), top)
    if kept.nnz == 0:
        return None
    kept = sp.csr_array(kept, dtype=np.float32)
    kept.sort_indices()
    return kept


def covisited_pages(
    views: ViewLog, size: int, *, gap: float, top: int = NEIGHBOURS_KEPT
) -> sp.csr_array | None:
    """Pages × pages, float32 cosine co-visitation of each page's ``top`` strongest co-visited pages
    (zero diagonal); None when no two pages were read in one session."""
    from ..evaluate.baselines import covisitation
    from ..evaluate.tasks import Views

    users, pages, times = _inside(views)
    if pages.size < 2:
        return None
    cosine = covisitation(Views(users, pages, times, size), gap=gap, max_session_pages=MAX_SESSION_PAGES)
    return _pruned(cosine, top)


def session_successors(
    views: ViewLog, size: int, *, gap: float, top: int = NEIGHBOURS_KEPT, minimum: int = MIN_SESSIONS
) -> sp.csr_array | None:
    """Pages × pages, float32: entry (a, b) is the share of the sessions that read ``a`` in which ``b``
    was first read after ``a``'s first view, kept when at least ``minimum`` sessions did so; each row
    keeps its ``top`` largest. None when no pair is left.

    >>> views = ViewLog(np.array([0, 0, 0, 1, 1]), np.array([0, 1, 2, 0, 2]), np.array([0.0, 1, 2, 0, 1]))
    >>> session_successors(views, 3, gap=10, minimum=1).toarray().round(2).tolist()
    [[0.0, 0.5, 1.0], [0.0, 0.0, 1.0], [0.0, 0.0, 0.0]]
    """
    from ..evaluate.tasks import session_numbers

    users, pages, times = _inside(views)
    if pages.size < 2:
        return None
    session = session_numbers(users, times, gap)
    # each page's first view in each session, in viewing order
    first = np.sort(np.unique(session * np.int64(size) + pages, return_index=True)[1])
    session, pages = session[first], pages[first]
    starts = np.flatnonzero(np.r_[True, session[1:] != session[:-1]])
    lengths = np.diff(np.r_[starts, session.size])
    keep = np.repeat(lengths <= MAX_SESSION_PAGES, lengths)
    readers = np.bincount(pages[keep], minlength=size).astype(np.float64)  # sessions reading each page
    position = np.arange(session.size) - np.repeat(starts, lengths)
    later = np.where(keep, np.repeat(lengths, lengths) - 1 - position, 0)
    counts = sp.csr_array((size, size), dtype=np.float64)
    ends = np.cumsum(later)
    view = 0
    while view < session.size:  # chunks of views whose later pairs fit _PAIRS_PER_CHUNK
        stop = max(view + 1, int(np.searchsorted(ends, ends[view] - later[view] + _PAIRS_PER_CHUNK, "right")))
        chunk = np.arange(view, min(stop, session.size))
        source = np.repeat(chunk, later[chunk])
        offset = np.arange(source.size) - np.repeat(np.cumsum(later[chunk]) - later[chunk], later[chunk])
        target = source + 1 + offset
        counts = counts + sp.csr_array(
            (np.ones(source.size), (pages[source], pages[target])), shape=(size, size)
        )
        view = int(chunk[-1]) + 1
    if counts.nnz == 0:
        return None
    counts.sum_duplicates()
    counts.data[counts.data < minimum] = 0.0
    scale = np.divide(1.0, readers, out=np.zeros(size), where=readers > 0)
    share = sp.csr_array(sp.diags_array(scale) @ counts)
    share.setdiag(0.0)
    share.eliminate_zeros()
    return _pruned(share, top)


def page_reading(views: ViewLog, adjacency, size: int, *, gap: float) -> tuple[np.ndarray, np.ndarray]:
    """Per page, float32: its click-through, ``(moves into it + 1) / (views of the pages linking to it +
    CLICK_PRIOR)`` (a move: consecutive views of one reader within ``gap`` seconds; additive smoothing,
    common practice), and the number of sessions that read it. Without history every page has
    click-through ``1 / CLICK_PRIOR`` and no sessions.

    >>> views = ViewLog(np.array([0, 0, 1]), np.array([0, 1, 0]), np.array([0.0, 1, 0]))
    >>> links = sp.csr_array(np.array([[0, 1], [0, 0]]))
    >>> click, sessions = page_reading(views, links, 2, gap=10)
    >>> (click.astype(float) * 52).round(3).tolist(), sessions.tolist()
    ([1.04, 2.0], [2.0, 1.0])
    """
    from ..evaluate.tasks import session_numbers
    from ..graph import navigation_counts

    users, pages, times = _inside(views)
    moves = navigation_counts(users, pages, times, size, gap=gap)
    into = np.asarray(moves.sum(axis=0)).ravel().astype(np.float64)
    linked = sp.csr_array(adjacency, dtype=np.float64, copy=True)
    linked.data[:] = 1.0
    linked.setdiag(0.0)
    linked.eliminate_zeros()
    exposure = linked.T @ np.bincount(pages, minlength=size).astype(np.float64)
    click = ((into + 1.0) / (exposure + CLICK_PRIOR)).astype(np.float32)
    sessions = np.zeros(size, dtype=np.float32)
    if pages.size:
        session = session_numbers(users, times, gap)
        read = np.unique(session * np.int64(size) + pages) % size
        sessions = np.bincount(read, minlength=size).astype(np.float32)
    return click, sessions

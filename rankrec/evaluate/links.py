"""The held-out-links task: evaluation without reading history.

For every page with at least ``min_links`` content out-links (links judged page chrome never count, and
are never hidden: :mod:`rankrec.chrome`), a random ``share`` of its content links is hidden, always at
least one and never all. Each such page is a query; its hidden targets are what a list should recover.
The hidden links are removed from every input a method sees: the split's ``links`` (the link matrix the
baselines use) lacks them, and rankrec's build drops them from the links and from the link occurrences it
judges chrome from (:func:`rankrec.evaluate.method.training_evidence`). The page's remaining links stay,
so "the page's own out-links" is a baseline like any other; the text of the page (which may still name a
hidden target) is not changed.

The split looks like a session task with one-page prefixes (``task == "sessions"``): the query's page is
its prefix, and the page itself is the only page excluded from its list.
"""

from __future__ import annotations

from types import MappingProxyType

import numpy as np
import scipy.sparse as sp

from .._validation import check_count, check_fraction
from .tasks import Queries, Split, _views


def held_out_links_split(
    links,
    *,
    chrome=None,
    share: float = 0.2,
    min_links: int = 4,
    seed: int = 0,
    max_queries: int | None = None,
) -> Split:
    """Hide a random ``share`` of each eligible page's content links (see the module docstring).

    Parameters
    ----------
    links : sparse matrix (pages, pages)
        ``A[i, j] > 0`` when page i links to page j.
    chrome : sparse matrix like ``links``, optional
        ``C[i, j] > 0`` when i -> j is only chrome (never hidden, never a target).
    share : float in (0, 1)
        Share of each page's content links to hide (rounded, at least one, never all).
    min_links : int
        Fewest content out-links a page needs to be a query.
    seed : int
        Seed of the draw.
    max_queries : int, optional
        At most this many query pages (a random sample), to bound the cost on large wikis.
    """
    share = check_fraction("share", share, open_low=True, open_high=True)
    min_links = check_count("min_links", min_links, minimum=2)
    matrix = sp.csr_array(links, dtype=np.float64)
    matrix.sum_duplicates()
    matrix.eliminate_zeros()
    size = matrix.shape[0]
    content = matrix
    if chrome is not None:
        only_chrome = sp.csr_array(chrome, dtype=np.float64) > 0
        content = sp.csr_array(matrix.multiply(matrix > 0) - matrix.multiply(only_chrome))
        content.eliminate_zeros()
    content.setdiag(0)
    content.eliminate_zeros()
    content.sort_indices()
    degree = np.diff(content.indptr)
    pages = np.flatnonzero(degree >= min_links)
    rng = np.random.default_rng(seed)
    if max_queries is not None and pages.size > check_count("max_queries", max_queries):
        pages = np.sort(rng.choice(pages, size=max_queries, replace=False))
    # per page: a random order of its content links; the first round(share * degree) are hidden
    hidden_count = np.clip(np.rint(share * degree[pages]).astype(np.int64), 1, degree[pages] - 1)
    lengths = degree[pages]
    owner = np.repeat(np.arange(pages.size), lengths)
    first = np.cumsum(lengths) - lengths
    positions = np.arange(int(lengths.sum()), dtype=np.int64) - np.repeat(
        first - content.indptr[pages], lengths
    )
    order = np.lexsort((rng.random(positions.size), owner))  # each page's links in a random order
    rank = np.arange(order.size) - np.repeat(first, lengths)
    taken = rank < np.repeat(hidden_count, lengths)
    chosen, chosen_owner = positions[order][taken], owner[order][taken]
    targets = content.indices[chosen]
    relevant = sp.csr_array(
        (np.ones(targets.size), (chosen_owner, targets)), shape=(pages.size, size), dtype=np.float64
    )
    hidden = sp.csr_array((np.ones(targets.size), (pages[chosen_owner], targets)), shape=(size, size))
    remaining = sp.csr_array(matrix - matrix.multiply(hidden > 0))
    remaining.eliminate_zeros()
    empty = _views(np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0), size)
    queries = Queries(  # no readers: each query page is its own unit of the bootstrap, a public viewer
        users=np.arange(pages.size, dtype=np.int64),
        times=np.zeros(pages.size),
        pages=pages.astype(np.int64)[:, None],
    )
    settings = {"share": share, "min_links": min_links, "seed": seed, "max_queries": max_queries}
    counts = {
        "queries": int(pages.size),
        "hidden_links": int(targets.size),
        "content_links": int(content.nnz),
        "links": int(matrix.nnz),
    }
    return Split(
        name="links",
        train=empty,
        cutoff=None,
        train_until=float("inf"),
        queries=queries,
        relevant=relevant,
        held_out=empty,
        settings=MappingProxyType(settings),
        counts=MappingProxyType(counts),
        links=remaining,
        chrome=None if chrome is None else sp.csr_array(only_chrome, dtype=np.float64),
    )

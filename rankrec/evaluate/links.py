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
its prefix. The page itself and the links it keeps are excluded from every method's list
(:func:`~rankrec.evaluate.tasks.excluded_pages`): its reader has those links in front of them already, so a
list is judged on the pages it adds.

The editorial-block task (:func:`editorial_split`) takes its targets from the wiki's own curated blocks
instead: the links that sit at a place matching a pattern (``*seealso*`` for a Sphinx "See also" box,
``md:*@see also`` for the links under a Markdown "See also" heading: :mod:`rankrec.sources`). A random half
of the pages holding such links are the test queries, the other half is kept for the validation split; a
query's editorial links are its targets and are removed (the whole link, wherever else on the page it
occurs) from every input.
"""

from __future__ import annotations

import fnmatch
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
    settings = {"share": share, "min_links": min_links, "seed": seed, "max_queries": max_queries}
    return _hidden_split(
        "links",
        matrix,
        pages,
        chosen_owner,
        targets,
        settings,
        {"content_links": int(content.nnz)},
        chrome=None if chrome is None else sp.csr_array(only_chrome, dtype=np.float64),
    )


def _hidden_split(
    name, matrix, pages, owner, targets, settings, counts, *, chrome=None, reserve=None
) -> Split:
    """The split whose query ``q`` is page ``pages[q]`` and whose hidden links are ``pages[owner] ->
    targets``: those links are removed from the split's link matrix, the rest stay."""
    size = matrix.shape[0]
    relevant = sp.csr_array(
        (np.ones(targets.size), (owner, targets)), shape=(pages.size, size), dtype=np.float64
    )
    relevant.sum_duplicates()
    relevant.data[:] = 1.0
    hidden = sp.csr_array((np.ones(targets.size), (pages[owner], targets)), shape=(size, size))
    remaining = sp.csr_array(matrix - matrix.multiply(hidden > 0))
    remaining.eliminate_zeros()
    empty = _views(np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0), size)
    queries = Queries(  # no readers: each query page is its own unit of the bootstrap, a public viewer
        users=np.arange(pages.size, dtype=np.int64),
        times=np.zeros(pages.size),
        pages=pages.astype(np.int64)[:, None],
    )
    counts = {
        "queries": int(pages.size),
        "hidden_links": int(relevant.nnz),
        **counts,
        "links": int(matrix.nnz),
    }
    return Split(
        name=name,
        train=empty,
        cutoff=None,
        train_until=float("inf"),
        queries=queries,
        relevant=relevant,
        held_out=empty,
        settings=MappingProxyType(settings),
        counts=MappingProxyType(counts),
        links=remaining,
        chrome=chrome,
        reserve=reserve,
    )


def editorial_pairs(places, size: int, pattern: str) -> sp.csr_array:
    """Pages × pages, 1 where a link i -> j occurs at a place matching the shell ``pattern`` (fnmatch,
    case-sensitive) at least once; ``places`` is a :class:`rankrec.graph.LinkPlaces` (None: no pairs)."""
    if not isinstance(pattern, str) or not pattern:
        raise ValueError(f"pattern must be a non-empty shell pattern; got {pattern!r}")
    if places is None or places.sources.size == 0:
        return sp.csr_array((size, size))
    matching = np.array([fnmatch.fnmatchcase(name, pattern) for name in places.names], dtype=bool)
    keep = matching[places.places] & (places.sources != places.targets)
    pairs = sp.csr_array(
        (np.ones(int(keep.sum())), (places.sources[keep], places.targets[keep])), shape=(size, size)
    )
    pairs.sum_duplicates()
    pairs.data[:] = 1.0
    return pairs


def editorial_split(links, pairs, *, pattern: str = "", seed: int = 0, test_share: float = 0.5) -> Split:
    """Held-out editorial blocks (see the module docstring): ``pairs`` (:func:`editorial_pairs`) are the
    curated links; a random ``test_share`` of the pages holding some are the queries, the others' pairs
    are the split's ``reserve`` (what :func:`editorial_validation` hides)."""
    test_share = check_fraction("test_share", test_share, open_low=True)
    matrix = sp.csr_array(links, dtype=np.float64)
    matrix.sum_duplicates()
    matrix.eliminate_zeros()
    pairs = sp.csr_array(pairs.multiply(matrix > 0) > 0, dtype=np.float64)  # curated links that exist
    holders = np.flatnonzero(np.diff(pairs.indptr))
    rng = np.random.default_rng(seed)
    chosen = np.zeros(holders.size, dtype=bool)
    chosen[rng.permutation(holders.size)[: int(round(test_share * holders.size))]] = True
    test_pages, kept_pages = holders[chosen], holders[~chosen]
    settings = {"pattern": pattern, "seed": seed, "test_share": test_share}
    return _pairs_split("editorial", matrix, pairs, test_pages, kept_pages, settings)


def editorial_validation(split: Split) -> Split:
    """The validation split of an editorial split: the reserved pages' curated links hidden from the
    split's own link matrix (which already lacks every test target)."""
    matrix = sp.csr_array(split.links, dtype=np.float64)
    reserve = sp.csr_array(split.reserve, dtype=np.float64)
    pages = np.flatnonzero(np.diff(reserve.indptr))
    settings = dict(split.settings) | {"validation": True}
    return _pairs_split("editorial", matrix, reserve, pages, np.zeros(0, dtype=np.int64), settings)


def _pairs_split(name, matrix, pairs, pages, reserved_pages, settings) -> Split:
    rows = sp.csr_array(pairs[pages]) if pages.size else sp.csr_array((0, matrix.shape[0]))
    coo = sp.coo_array(rows)
    order = np.lexsort((coo.col, coo.row))
    reserve = None
    if reserved_pages.size:
        keep = np.zeros(matrix.shape[0])
        keep[reserved_pages] = 1.0
        reserve = sp.csr_array(sp.diags_array(keep) @ pairs)
    return _hidden_split(
        name,
        matrix,
        pages.astype(np.int64),
        coo.row[order].astype(np.int64),
        coo.col[order].astype(np.int64),
        settings,
        {"curated_links": int(pairs.nnz)},
        reserve=reserve,
    )

"""The link graph of a wiki store as arrays: dense page numbering, CSR weights, dangling mask; and the
pieces that blend observed navigation into it (consecutive views of one reader within a session, views
at most ``gap`` seconds apart). Pure data: nothing here reads anything but the store.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
import scipy.sparse as sp

from .errors import UnknownPage
from .store import Store


@dataclass(frozen=True, eq=False)
class WikiGraph:
    """Pages ``0..n-1`` (``pages[i]`` is a page id) and ``adjacency[i, j]``: weight of i -> j.

    ``row_ids[i]`` is page i's row id in the store (ascending), for joining store queries.
    """

    pages: np.ndarray
    adjacency: sp.csr_matrix
    row_ids: np.ndarray
    fingerprint: str = field(default="")

    @property
    def size(self) -> int:
        return int(self.pages.size)

    @cached_property
    def dangling(self) -> np.ndarray:
        """True for pages without out-links (their rows sum to zero)."""
        return np.diff(self.adjacency.indptr) == 0

    @cached_property
    def _positions(self) -> dict[str, int]:
        return {page: index for index, page in enumerate(self.pages.tolist())}

    def page_number(self, page: str) -> int:
        """Dense number of ``page``; UnknownPage (with close ids) when the wiki lacks it."""
        try:
            return self._positions[page]
        except KeyError:
            import difflib

            close = difflib.get_close_matches(page, self._positions, n=3, cutoff=0.5)
            raise UnknownPage(page, close) from None

    def page_numbers(self, pages) -> np.ndarray:
        return np.fromiter((self.page_number(page) for page in pages), dtype=np.int64)


def fingerprint(pages: np.ndarray, adjacency: sp.csr_matrix) -> str:
    digest = hashlib.sha256()
    digest.update("\0".join(pages.tolist()).encode())
    for array in (adjacency.indptr, adjacency.indices, adjacency.data):
        digest.update(np.ascontiguousarray(array).tobytes())
    return digest.hexdigest()[:16]


def navigation_counts(
    users: np.ndarray, pages: np.ndarray, times: np.ndarray, size: int, *, gap: float
) -> sp.csr_matrix:
    """Counts of moves page i -> page j between consecutive views of one reader within ``gap`` s.

    Views must be ordered by user, then time; ``pages`` are dense page numbers (-1 = unknown,
    skipped). Repeated views of the same page (reloads) are not moves.

    >>> m = navigation_counts(np.array([1, 1, 1, 2]), np.array([0, 1, 2, 0]), np.array([0., 60, 9999, 5]),
    ...                       3, gap=1800)
    >>> m.toarray().tolist()
    [[0, 1, 0], [0, 0, 0], [0, 0, 0]]
    """
    same = (users[1:] == users[:-1]) & (times[1:] - times[:-1] <= gap)
    source, target = pages[:-1], pages[1:]
    keep = same & (source >= 0) & (target >= 0) & (source != target)
    counts = sp.coo_matrix(
        (np.ones(int(keep.sum()), dtype=np.int64), (source[keep], target[keep])), shape=(size, size)
    )
    return counts.tocsr()


def row_normalised(matrix: sp.csr_matrix) -> sp.csr_matrix:
    """A copy of a float CSR matrix whose non-empty rows sum to 1 (empty rows stay empty)."""
    sums = np.asarray(matrix.sum(axis=1)).ravel()
    scale = np.divide(1.0, sums, out=np.zeros_like(sums, dtype=np.float64), where=sums > 0)
    matrix = sp.csr_matrix(matrix, dtype=np.float64, copy=True)
    matrix.data *= np.repeat(scale, np.diff(matrix.indptr))
    matrix.sort_indices()
    return matrix


def blend_navigation(adjacency: sp.csr_matrix, counts: sp.csr_matrix, weight: float) -> sp.csr_matrix:
    """Rows mixing ``(1 - weight)`` of the link row with ``weight`` of the navigation row.

    Both rows are normalised first; a page without navigation keeps its link row as it was,
    and a page with navigation but no links takes its navigation row.
    """
    original = adjacency.astype(np.float64)
    links = row_normalised(original)
    moves = row_normalised(counts.astype(np.float64))
    has_moves = (np.diff(moves.indptr) > 0).astype(np.float64)
    has_links = (np.diff(links.indptr) > 0).astype(np.float64)
    move_share = has_moves * np.where(has_links > 0, weight, 1.0)
    link_share = has_moves - move_share
    mixed = sp.diags(link_share) @ links + sp.diags(move_share) @ moves + sp.diags(1.0 - has_moves) @ original
    mixed = sp.csr_matrix(mixed)
    mixed.eliminate_zeros()
    mixed.sort_indices()
    return mixed


def dense_numbers(row_ids: np.ndarray, wanted: np.ndarray) -> np.ndarray:
    """Positions of ``wanted`` in the sorted ``row_ids``; -1 where absent."""
    if row_ids.size == 0:
        return np.full(wanted.size, -1, dtype=np.int64)
    position = np.minimum(np.searchsorted(row_ids, wanted), row_ids.size - 1)
    return np.where(row_ids[position] == wanted, position, -1)


def load_graph(store: Store) -> WikiGraph:
    """The link graph of the pages the store holds (links between present pages only).

    Observed navigation is blended in by the build (:func:`rankrec.derive.navigation_matrix`, with
    :func:`navigation_counts` and :func:`blend_navigation`), from the configuration's settings.
    """
    row_ids, pages = store.present_pages()
    size = row_ids.size
    sources, targets, weights = store.link_arrays()
    rows = np.searchsorted(row_ids, sources)
    columns = np.searchsorted(row_ids, targets)
    adjacency = sp.csr_matrix((weights, (rows, columns)), shape=(size, size), dtype=np.float64)
    adjacency.sum_duplicates()
    adjacency.sort_indices()
    page_array = np.array(pages, dtype=object)
    return WikiGraph(
        pages=page_array,
        adjacency=adjacency,
        row_ids=row_ids,
        fingerprint=fingerprint(page_array, adjacency),
    )


# -- page chrome -------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class LinkPlaces:
    """Where each link sits: one row per (source, target, place) in dense page numbers, with its count;
    ``names[code]`` is the place string (see :class:`rankrec.sources.records.LinkRecord`)."""

    sources: np.ndarray
    targets: np.ndarray
    places: np.ndarray
    counts: np.ndarray
    names: list[str]

    def keeping(self, links) -> LinkPlaces:
        """Only the rows whose (source, target) pair ``links`` holds."""
        matrix = sp.csr_matrix(links)
        keep = np.asarray(matrix[self.sources, self.targets]).ravel() != 0 if self.sources.size else []
        return LinkPlaces(
            self.sources[keep], self.targets[keep], self.places[keep], self.counts[keep], self.names
        )


def content_matrix(adjacency, places: LinkPlaces | None, *, chrome_weight: float):
    """The link matrix with page chrome judged (:func:`rankrec.chrome.judge_chrome`) and weighed down.

    Rows of pages whose links carry places are rebuilt from those places: a content occurrence counts
    1, a chrome one ``chrome_weight`` (0 drops it). Rows of other pages (edge lists) stay as they are.
    Returns the matrix and the judgement (None without places).
    """
    from .chrome import content_weights, judge_chrome

    if places is None or places.sources.size == 0:
        return adjacency, None
    size = adjacency.shape[0]
    judgement = judge_chrome(places.sources, places.targets, places.places, places.counts, size)
    weights = sp.csr_matrix(
        content_weights(
            places.sources, places.targets, places.counts, judgement.chrome, size, chrome_weight=chrome_weight
        )
    )
    placed = np.zeros(size, dtype=bool)
    placed[places.sources] = True
    kept = sp.diags((~placed).astype(np.float64)) @ sp.csr_matrix(adjacency)
    matrix = sp.csr_matrix(kept + weights)
    matrix.eliminate_zeros()
    matrix.sort_indices()
    return matrix, judgement


def chrome_pairs(size: int, places: LinkPlaces | None, judgement) -> sp.csr_matrix | None:
    """Pages × pages, 1 where every occurrence of the link i -> j is chrome (None without places)."""
    if places is None or judgement is None or places.sources.size == 0:
        return None
    shape = (size, size)
    rows, columns = places.sources, places.targets
    total = sp.csr_matrix((np.ones(rows.size), (rows, columns)), shape=shape)
    chrome = sp.csr_matrix((judgement.chrome.astype(np.float64), (rows, columns)), shape=shape)
    content = total - chrome  # content occurrences of each pair
    only = sp.csr_matrix(total > 0, dtype=np.float64) - sp.csr_matrix(content > 0, dtype=np.float64)
    only.eliminate_zeros()
    return only

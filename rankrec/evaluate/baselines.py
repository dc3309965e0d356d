"""Baseline recommenders behind one interface: ``method.recommend(split, k)`` -> (queries, k) page numbers.

Every baseline is a tiny frozen dataclass that reads ``split.train`` and ``split.queries`` only (never
``split.relevant`` or ``split.held_out``), leaves out :func:`~rankrec.evaluate.splits.excluded_pages`,
and pads short lists with ``-1`` at the tail. Ties go to the lower page number.

- :class:`RandomPages`: uniform random pages (seeded).
- :class:`MostRead`: most-viewed pages in the training views.
- :class:`GlobalPageRank`: global PageRank of a link matrix.
- :class:`OutLinks`: the current page's out-links, most-viewed first (no other pages).
- :class:`CoVisitation`: pages viewed in the same training sessions, cosine-weighted.
- :class:`TeamMostRead`: most-viewed by the user's team in training, then :class:`MostRead`'s order.

The "current page" of a query is the last prefix page (session tasks) or the user's last training page
(user tasks); co-visitation starts from all prefix pages, or the user's last ``history`` training views.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from .._validation import check_count, check_fraction, check_positive
from ..pagerank import personalised_pagerank, prepare
from .splits import SESSION_GAP_SECONDS, Split, Views, excluded_pages, session_numbers

_CHUNK_ELEMENTS = 1 << 22  # dense cells handled at once (32 MiB of float64)


# ------------------------------------------------------------------------------ what baselines learn


def training_counts(views: Views) -> np.ndarray:
    """Views of each page in ``views`` (popularity), shape (pages,).

    >>> from rankrec.evaluate.splits import temporal_split
    >>> training_counts(temporal_split([0, 0, 1], [2, 2, 0], [0.0, 1, 9], 3, cutoff=5.0).train).tolist()
    [0, 0, 2]
    """
    return np.bincount(views.pages, minlength=views.size).astype(np.int64)


def covisitation(views: Views, *, gap: float = SESSION_GAP_SECONDS, max_session_pages: int | None = 100):
    """Cosine co-visitation of pages over the sessions of ``views``: CSR (pages, pages), zero diagonal.

    With ``B`` the binary sessions × pages matrix, ``C = BᵀB`` counts the sessions holding both pages and
    ``cosine[i, j] = C[i, j] / sqrt(C[i, i] · C[j, j])``. Sessions with more than ``max_session_pages``
    distinct pages are left out (their cost is quadratic and long sessions are mostly crawlers: common
    practice); None keeps all.
    """
    session = session_numbers(views.users, views.times, gap)
    sessions = int(session.max()) + 1 if session.size else 0
    binary = sp.csr_array(
        (np.ones(session.size), (session, views.pages)), shape=(sessions, views.size), dtype=np.float64
    )
    binary.sum_duplicates()
    binary.data[:] = 1.0
    if max_session_pages is not None:
        check_count("max_session_pages", max_session_pages)
        binary = binary[np.diff(binary.indptr) <= max_session_pages]
    counts = np.asarray(binary.sum(axis=0)).ravel()
    scale = np.divide(1.0, np.sqrt(counts), out=np.zeros_like(counts), where=counts > 0)
    scaled = sp.csr_array(binary @ sp.diags_array(scale))
    cosine = sp.csr_array(scaled.T @ scaled)
    cosine.setdiag(0.0)
    cosine.eliminate_zeros()
    cosine.sort_indices()
    return cosine


def team_counts(views: Views, teams: np.ndarray) -> sp.csr_array:
    """Views of each page by each team's members: CSR (teams, pages); users with team ``-1`` count nowhere."""
    team = teams[views.users]
    known = team >= 0
    shape = (int(teams.max()) + 1 if teams.size else 0, views.size)
    matrix = sp.csr_array((np.ones(int(known.sum())), (team[known], views.pages[known])), shape=shape)
    matrix.sum_duplicates()
    return matrix


# ------------------------------------------------------------------------------------------ ranking


def _keys(matrix: sp.csr_array) -> np.ndarray:
    """Sorted ``row * columns + column`` of every stored entry of a canonical CSR matrix."""
    rows = np.repeat(np.arange(matrix.shape[0], dtype=np.int64), np.diff(matrix.indptr))
    return rows * matrix.shape[1] + matrix.indices


def _isin_sorted(keys: np.ndarray, sorted_keys: np.ndarray) -> np.ndarray:
    if sorted_keys.size == 0:
        return np.zeros(keys.shape, dtype=bool)
    position = np.minimum(np.searchsorted(sorted_keys, keys), sorted_keys.size - 1)
    return sorted_keys[position] == keys


def _from_scores(scores: sp.csr_array, excluded: sp.csr_array, k: int) -> np.ndarray:
    """Top ``k`` positive-score columns of each row, best first, leaving out ``excluded`` entries."""
    scores = sp.csr_array(scores, dtype=np.float64)
    scores.sum_duplicates()
    rows = np.repeat(np.arange(scores.shape[0], dtype=np.int64), np.diff(scores.indptr))
    columns, values = scores.indices.astype(np.int64), scores.data
    keep = (values > 0) & ~_isin_sorted(rows * scores.shape[1] + columns, _keys(excluded))
    return ranked_entries(rows[keep], columns[keep], values[keep], scores.shape[0], k)


def ranked_entries(rows, columns, values, queries: int, k: int) -> np.ndarray:
    """Lists (queries, k) of the entries ``(rows, columns, values)``: each row's ``k`` largest values'
    columns, best first, ties to the lower column, ``-1`` padded."""
    order = np.lexsort((columns, -values, rows))
    rows, columns = rows[order], columns[order]
    rank = np.arange(rows.size) - np.searchsorted(rows, rows)
    chosen = rank < k
    lists = np.full((queries, k), -1, dtype=np.int64)
    lists[rows[chosen], rank[chosen]] = columns[chosen]
    return lists


def _strongest(matrix: sp.csr_array, n: int) -> sp.csr_array:
    """Keep each row's ``n`` largest entries (ties to the lower column)."""
    lists = _from_scores(matrix, sp.csr_array(matrix.shape), n)
    rows = np.repeat(np.arange(matrix.shape[0]), n).reshape(lists.shape)
    kept = lists >= 0
    values = _lookup_values(matrix, rows[kept], lists[kept])
    return sp.csr_array((values, (rows[kept], lists[kept])), shape=matrix.shape)


def _lookup_values(matrix: sp.csr_array, rows: np.ndarray, columns: np.ndarray) -> np.ndarray:
    keys = _keys(matrix)
    position = np.searchsorted(keys, rows * matrix.shape[1] + columns)
    return matrix.data[position]


_PRODUCT_ROWS = 8192  # query rows scored at once, to bound the memory of seeds @ matrix


def _ranked_product(seeds: sp.csr_array, matrix: sp.csr_array, excluded: sp.csr_array, k: int) -> np.ndarray:
    """:func:`_from_scores` of ``seeds @ matrix``, computed a block of query rows at a time."""
    blocks = [np.zeros((0, k), dtype=np.int64)]
    for start in range(0, seeds.shape[0], _PRODUCT_ROWS):
        rows = slice(start, start + _PRODUCT_ROWS)
        blocks.append(_from_scores(sp.csr_array(seeds[rows] @ matrix), sp.csr_array(excluded[rows]), k))
    return np.concatenate(blocks)


def _lists_matrix(lists: np.ndarray, size: int) -> sp.csr_array:
    rows = np.repeat(np.arange(lists.shape[0]), lists.shape[1]).reshape(lists.shape)
    filled = lists >= 0
    matrix = sp.csr_array(
        (np.ones(int(filled.sum())), (rows[filled], lists[filled])), shape=(lists.shape[0], size)
    )
    matrix.sum_duplicates()
    return matrix


def _fill_from_orders(
    lists: np.ndarray, orders: np.ndarray, group: np.ndarray, excluded: sp.csr_array
) -> np.ndarray:
    """Fill each row's empty tail slots from its group's page order, skipping pages it excludes or lists.

    ``orders`` is (groups, depth), best first, ``-1`` padded; ``group[row]`` picks a row's order (``-1``:
    none). Among the first ``need + blocked`` pages of an order at most ``blocked`` are blocked, so a row
    never needs to look deeper than that.
    """
    lists = lists.copy()
    queries, k = lists.shape
    filled = (lists >= 0).sum(axis=1)
    need = k - filled
    blocked = sp.csr_array(excluded + _lists_matrix(lists, excluded.shape[1]))
    blocked.sum_duplicates()
    blocked.sort_indices()
    blocked_keys = _keys(blocked)
    width = np.minimum(need + np.diff(blocked.indptr), orders.shape[1])
    todo = np.flatnonzero((need > 0) & (group >= 0))
    todo = todo[np.argsort(width[todo], kind="stable")]
    start = 0
    while start < todo.size:
        ahead = width[todo[start : start + _CHUNK_ELEMENTS]]  # ascending
        fits = int(np.count_nonzero(np.arange(1, ahead.size + 1) * np.maximum(ahead, 1) <= _CHUNK_ELEMENTS))
        chunk = todo[start : start + max(1, fits)]
        span = int(width[chunk].max())
        candidates = orders[group[chunk], :span]
        cells = chunk[:, None] * excluded.shape[1] + candidates
        free = (candidates >= 0) & ~_isin_sorted(cells, blocked_keys)
        rank = np.cumsum(free, axis=1) - 1
        take = free & (rank < need[chunk, None])
        row_index, column_index = np.nonzero(take)
        lists[chunk[row_index], filled[chunk[row_index]] + rank[row_index, column_index]] = candidates[
            row_index, column_index
        ]
        start += chunk.size
    return lists


def _fill_from_order(lists: np.ndarray, order: np.ndarray, excluded: sp.csr_array) -> np.ndarray:
    """:func:`_fill_from_orders` with one page order for every row."""
    return _fill_from_orders(lists, order[None, :], np.zeros(lists.shape[0], dtype=np.int64), excluded)


def _global_order(scores: np.ndarray) -> np.ndarray:
    """Pages with a positive score, best first, ties to the lower page number."""
    positive = np.flatnonzero(scores > 0)
    return positive[np.lexsort((positive, -scores[positive]))]


def _from_global(scores: np.ndarray, split: Split, k: int) -> np.ndarray:
    empty = np.full((len(split.queries), k), -1, dtype=np.int64)
    return _fill_from_order(empty, _global_order(scores), excluded_pages(split))


def _seeds(split: Split, history: int, *, last_only: bool) -> sp.csr_array:
    """Queries × pages, 1 at each query's starting pages (see the module docstring)."""
    queries = len(split.queries)
    if split.task == "sessions":
        prefix = split.queries.pages
        if last_only:
            filled = (prefix >= 0).sum(axis=1)
            prefix = prefix[np.arange(queries), np.maximum(filled - 1, 0)][:, None]
        rows = np.repeat(np.arange(queries), prefix.shape[1])
        pages = prefix.ravel()
    else:
        train = split.train
        ends = np.searchsorted(train.users, split.queries.users, side="right")
        starts = np.searchsorted(train.users, split.queries.users, side="left")
        steps = np.arange(1 if last_only else history)
        index = ends[:, None] - 1 - steps[None, :]
        valid = index >= starts[:, None]
        rows = np.repeat(np.arange(queries), steps.size)[valid.ravel()]
        pages = train.pages[index[valid]] if valid.any() else np.zeros(0, np.int64)
    keep = pages >= 0
    seeds = sp.csr_array((np.ones(int(keep.sum())), (rows[keep], pages[keep])), shape=(queries, split.size))
    seeds.sum_duplicates()
    seeds.data[:] = 1.0
    return seeds


def split_links(adjacency, split: Split) -> sp.csr_array:
    """The link matrix a link baseline may use on ``split``: a split that hides links (held-out links, and
    the validation split carved from it) brings its own, so no hidden link reaches a baseline whichever
    split it answers; otherwise ``adjacency`` (checked as :func:`check_adjacency` does)."""
    return check_adjacency(adjacency if split.links is None else split.links, split)


def check_adjacency(adjacency, split: Split) -> sp.csr_array:
    """A float64 CSR copy of ``adjacency`` (never a view of it), refused unless it is sparse and
    ``split.size`` square."""
    if not sp.issparse(adjacency):
        raise TypeError(f"adjacency must be a scipy sparse matrix, not {type(adjacency).__name__}")
    if adjacency.shape != (split.size, split.size):
        raise ValueError(f"adjacency must have shape {(split.size, split.size)!r}; got {adjacency.shape!r}")
    return sp.csr_array(adjacency, dtype=np.float64, copy=True)  # a copy: baselines may rewrite weights


# -------------------------------------------------------------------------------------- the methods


@dataclass(frozen=True)
class RandomPages:
    """Uniformly random pages that the query does not exclude, in random order; same ``seed``, same lists."""

    seed: int = 0
    name: str = "random"

    def recommend(self, split: Split, k: int) -> np.ndarray:
        k = check_count("k", k)
        rng = np.random.default_rng(check_count("seed", self.seed, minimum=0))
        excluded = excluded_pages(split)
        size, queries = split.size, len(split.queries)
        allowed = size - np.diff(excluded.indptr)
        lists = np.full((queries, k), -1, dtype=np.int64)
        # rows that may use most pages: first k distinct allowed pages of an i.i.d. uniform stream (a
        # uniform random ordered k-subset); redraw a row when its stream ran short
        sparse_rows = np.flatnonzero((2 * allowed >= size) & (allowed > 2 * k))
        width = 2 * k + 16
        keys = _keys(excluded)
        while sparse_rows.size:
            draws = rng.integers(0, size, size=(sparse_rows.size, width))
            cells = sparse_rows[:, None] * size + draws
            local = np.arange(draws.shape[0])[:, None] * size + draws
            first = np.zeros(draws.size, dtype=bool)
            first[np.unique(local, return_index=True)[1]] = True
            first = first.reshape(draws.shape)
            valid = first & ~_isin_sorted(cells, keys)
            rank = np.cumsum(valid, axis=1) - 1
            done = valid.sum(axis=1) >= k
            take = valid & (rank < k) & done[:, None]
            row_index, column_index = np.nonzero(take)
            lists[sparse_rows[row_index], rank[row_index, column_index]] = draws[row_index, column_index]
            sparse_rows, width = sparse_rows[~done], width * 2
        dense_rows = np.flatnonzero(~((2 * allowed >= size) & (allowed > 2 * k)))
        per_chunk = max(1, _CHUNK_ELEMENTS // size)
        for start in range(0, dense_rows.size, per_chunk):
            chunk = dense_rows[start : start + per_chunk]
            noise = rng.random((chunk.size, size))
            block = sp.csr_array(excluded[chunk])
            noise[np.repeat(np.arange(chunk.size), np.diff(block.indptr)), block.indices] = np.inf
            order = np.argsort(noise, axis=1, kind="stable")[:, :k]
            lists[chunk, : order.shape[1]] = np.where(np.take_along_axis(noise, order, 1) < np.inf, order, -1)
        return lists


@dataclass(frozen=True)
class MostRead:
    """The most-viewed pages of the training views."""

    name: str = "most-read"

    def recommend(self, split: Split, k: int) -> np.ndarray:
        return _from_global(training_counts(split.train).astype(np.float64), split, check_count("k", k))


@dataclass(frozen=True, eq=False)
class GlobalPageRank:
    """Pages by global PageRank of ``adjacency`` (``A[i, j]`` = weight of link i -> j) with ``damping``."""

    adjacency: sp.spmatrix | sp.sparray
    damping: float = 0.85
    tol: float = 1e-10
    name: str = "pagerank"

    def recommend(self, split: Split, k: int) -> np.ndarray:
        k = check_count("k", k)
        adjacency = split_links(self.adjacency, split)
        check_fraction("damping", self.damping, open_low=True, open_high=True)
        result = personalised_pagerank(prepare(adjacency), None, damping=self.damping, tol=self.tol)
        return _from_global(np.asarray(result.vectors, dtype=np.float64), split, k)


@dataclass(frozen=True, eq=False)
class OutLinks:
    """Out-links of the query's current page, most-viewed in training first; nothing else is listed."""

    adjacency: sp.spmatrix | sp.sparray
    name: str = "out-links"

    def recommend(self, split: Split, k: int) -> np.ndarray:
        k = check_count("k", k)
        links = split_links(self.adjacency, split)
        links.data[:] = 1.0
        popularity = sp.diags_array(1.0 + training_counts(split.train))
        return _ranked_product(
            _seeds(split, 1, last_only=True), sp.csr_array(links @ popularity), excluded_pages(split), k
        )


@dataclass(frozen=True, eq=False)
class TextSimilarity:
    """The query's current page's text neighbours, most similar first ("more like this": TF-IDF cosine of
    titles, headings and text, :func:`rankrec.text.text_neighbours`); nothing else is listed."""

    similar: sp.spmatrix | sp.sparray
    name: str = "text similarity"

    def recommend(self, split: Split, k: int) -> np.ndarray:
        k = check_count("k", k)
        similar = check_adjacency(self.similar, split)
        return _ranked_product(_seeds(split, 1, last_only=True), similar, excluded_pages(split), k)


@dataclass(frozen=True)
class CoVisitation:
    """Sum of :func:`covisitation` cosines to the query's pages; pages never co-visited are not listed.

    ``gap`` defaults to the split's own session gap (else 30 minutes); ``history`` is how many of a user's
    last training views start a user query; ``neighbours`` keeps only each page's strongest co-visited
    pages (item-neighbourhood pruning, common practice in item-based collaborative filtering; None keeps
    all); ``max_session_pages`` as in :func:`covisitation`.
    """

    gap: float | None = None
    history: int = 3
    max_session_pages: int | None = 100
    neighbours: int | None = 100
    name: str = "co-visitation"

    def recommend(self, split: Split, k: int) -> np.ndarray:
        k = check_count("k", k)
        gap = check_positive(
            "gap", self.gap if self.gap is not None else split.settings.get("gap", SESSION_GAP_SECONDS)
        )
        cosine = covisitation(split.train, gap=gap, max_session_pages=self.max_session_pages)
        if self.neighbours is not None:
            cosine = _strongest(cosine, check_count("neighbours", self.neighbours))
        seeds = _seeds(split, check_count("history", self.history), last_only=False)
        return _ranked_product(seeds, cosine, excluded_pages(split), k)


@dataclass(frozen=True, eq=False)
class TeamMostRead:
    """Most-viewed in training by the user's team, then the globally most-viewed.

    ``teams[user]`` is the team code (>= 0) of each user code, ``-1`` for none.
    """

    teams: np.ndarray
    name: str = "team-most-read"

    def recommend(self, split: Split, k: int) -> np.ndarray:
        k = check_count("k", k)
        teams = np.asarray(self.teams)
        if teams.ndim != 1 or (teams.size and teams.dtype.kind not in "iu"):
            raise TypeError(f"teams must be a 1-D integer array; got {self.teams!r}")
        teams = teams.astype(np.int64)
        highest = max(int(split.train.users.max(initial=-1)), int(split.queries.users.max(initial=-1)))
        if teams.size <= highest or (teams.size and teams.min() < -1):
            raise ValueError(
                f"teams must give a code >= -1 for every user code up to {highest!r}; got shape "
                f"{teams.shape!r}, minimum {teams.min(initial=0)!r}"
            )
        excluded = excluded_pages(split)
        # rank each team's pages once, then take each query's first pages it does not exclude
        by_team = team_counts(split.train, teams)
        depth = min(split.size, k + int(np.diff(excluded.indptr).max(initial=0)))
        orders = _from_scores(by_team, sp.csr_array(by_team.shape), depth)
        empty = np.full((len(split.queries), k), -1, dtype=np.int64)
        lists = _fill_from_orders(empty, orders, teams[split.queries.users], excluded)
        return _fill_from_order(lists, _global_order(training_counts(split.train).astype(float)), excluded)


def check_recommendations(split: Split, lists, k: int) -> np.ndarray:
    """Validate a method's lists for ``split``: shape (queries, k), pages or tail ``-1``, no repeats, no
    excluded page. Returns them as int64; ValueError names the first broken rule."""
    array = np.asarray(lists)
    if array.shape != (len(split.queries), k) or (array.size and array.dtype.kind not in "iu"):
        raise ValueError(
            f"lists must be integers of shape {(len(split.queries), k)!r}; got {array.dtype} {array.shape!r}"
        )
    array = array.astype(np.int64)
    if array.size and (array.min() < -1 or array.max() >= split.size):
        raise ValueError(f"lists hold pages outside [-1, {split.size}): {array.min()!r}..{array.max()!r}")
    filled = array >= 0
    if (filled[:, 1:] & ~filled[:, :-1]).any():
        raise ValueError("lists must pad with -1 at the tail only")
    ordered = np.sort(array, axis=1)
    if ((ordered[:, 1:] == ordered[:, :-1]) & (ordered[:, 1:] >= 0)).any():
        raise ValueError("lists repeat a page")
    rows = np.repeat(np.arange(array.shape[0]), k).reshape(array.shape)
    if _isin_sorted(rows[filled] * split.size + array[filled], _keys(excluded_pages(split))).any():
        raise ValueError("lists hold a page excluded for its query")
    return array

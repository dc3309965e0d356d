"""rankrec itself behind the baselines' interface: personalised PageRank lists learnt from a training part.

For one split, :func:`rankrec_lists` builds everything from ``split.train`` only, as serving builds it
from the store:

1. the graph: the link matrix, its rows blended with the navigation observed in the *training* views
   (:func:`rankrec.graph.navigation_counts` and :func:`rankrec.graph.blend_navigation`, share ``blend``;
   0 keeps the links alone);
2. global PageRank of that graph (the denominator of the lift);
3. one restart distribution per query: the reader's training history as a decayed profile
   (:func:`rankrec.profiles.profile_matrix`, ``half_life_days``, at the query's "now") for user tasks,
   or uniform over the session's prefix pages for the session task (the "related pages" list of
   serving; ``half_life_days`` plays no part there);
4. personalised PageRank of the n × q restart matrix, a block of columns at a time;
5. the lists by :func:`rankrec.recommend.lists.select_pages`, the ranking serving uses, with the split's
   :func:`~rankrec.evaluate.splits.excluded_pages` as the only filter (so every method faces the same
   exclusions; access groups and archived pages are serving filters the baselines do not know either).

Queries with the same prefix share one solve. Several lift exponents cost one solve: lists for each are
made from the same vectors.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from .._validation import check_count, check_fraction, check_positive, check_real
from ..graph import blend_navigation, navigation_counts
from ..pagerank import personalized_pagerank, prepare
from ..profiles import profile_matrix
from ..recommend.lists import select_pages
from .baselines import check_adjacency
from .splits import SESSION_GAP_SECONDS, Split, excluded_pages

_BLOCK_CELLS = 1 << 22  # pages × restart columns solved at once (32 MiB of float64)
_MIN_COLUMNS = 16  # the block kernel's widest lane: narrower blocks waste it

Progress = Callable[[int, int], object]


@dataclass(frozen=True)
class Configuration:
    """The four settings a sweep chooses (see :func:`rankrec_lists`)."""

    damping: float = 0.85
    half_life_days: float = 30.0
    blend: float = 0.3
    lift: float = 0.5

    def __post_init__(self) -> None:
        check_fraction("damping", self.damping, open_low=True, open_high=True)
        check_positive("half_life_days", self.half_life_days)
        check_fraction("blend", self.blend)
        if check_real("lift", self.lift) < 0:
            raise ValueError(f"lift must not be negative; got {self.lift!r}")

    def as_dict(self) -> dict[str, float]:
        return {name: float(getattr(self, name)) for name in ("damping", "half_life_days", "blend", "lift")}


def training_graph(split: Split, adjacency, *, blend: float, gap: float | None = None) -> sp.csr_matrix:
    """The link matrix blended with the navigation of ``split.train`` (``blend`` 0: the links alone).

    ``gap`` (seconds inside one session) defaults to the split's own session gap, else 30 minutes.
    """
    links = sp.csr_matrix(check_adjacency(adjacency, split))
    blend = check_fraction("blend", blend)
    if blend == 0:
        return links
    gap = check_positive("gap", gap if gap is not None else split.settings.get("gap", SESSION_GAP_SECONDS))
    train = split.train  # ordered by user, then time, as navigation_counts wants
    counts = navigation_counts(train.users, train.pages, train.times, split.size, gap=gap)
    return blend_navigation(links, counts, blend)


def restart_matrix(split: Split, *, half_life_days: float) -> tuple[sp.csr_matrix, np.ndarray]:
    """Distinct restart distributions (rows) and, for each query, the row it uses.

    User tasks: the query user's training views as a profile at the query's time (every query is its own
    row). Session task: uniform over the prefix pages; queries with the same prefix share a row.
    An empty row (no usable history) means uniform restart, i.e. global PageRank.
    """
    queries = split.queries
    if split.task == "sessions":
        prefixes, row_of = np.unique(queries.pages, axis=0, return_inverse=True)
        row_of = row_of.ravel()
        rows = np.repeat(np.arange(prefixes.shape[0]), prefixes.shape[1])
        pages = prefixes.ravel()
        keep = pages >= 0
        matrix = sp.csr_matrix(
            (np.ones(int(keep.sum())), (rows[keep], pages[keep])), shape=(prefixes.shape[0], split.size)
        )
        matrix.sum_duplicates()
        matrix.data[:] = 1.0
        sums = np.asarray(matrix.sum(axis=1)).ravel()
        scale = np.divide(1.0, sums, out=np.zeros_like(sums), where=sums > 0)
        matrix = sp.csr_matrix(sp.diags(scale) @ matrix)
        return matrix, row_of
    check_positive("half_life_days", half_life_days)
    train = split.train
    blocks = []
    order = []
    # profile_matrix takes one "now": group the queries by their time (one group for a global cutoff)
    for now in np.unique(queries.times):
        chosen = np.flatnonzero(queries.times == now)
        users = queries.users[chosen]
        sorted_users = np.sort(users)
        known = np.isin(train.users, sorted_users)
        local = np.searchsorted(sorted_users, train.users[known])
        profiles = profile_matrix(
            local,
            train.pages[known],
            train.times[known],
            split.size,
            now=float(now),
            half_life_days=half_life_days,
            user_count=sorted_users.size,
        )
        blocks.append(profiles[np.searchsorted(sorted_users, users)])
        order.append(chosen)
    if not blocks:
        return sp.csr_matrix((0, split.size)), np.zeros(0, dtype=np.int64)
    stacked = sp.csr_matrix(sp.vstack(blocks))
    position = np.empty(len(queries), dtype=np.int64)
    position[np.concatenate(order)] = np.arange(len(queries))
    return stacked, position


def rankrec_lists(
    split: Split,
    adjacency,
    k: int,
    configuration: Configuration = Configuration(),
    *,
    lifts: Sequence[float] | None = None,
    gap: float | None = None,
    tol: float = 1e-6,
    workers: int = 1,
    progress: Progress | None = None,
) -> dict[float, np.ndarray]:
    """rankrec's top-``k`` lists for every query of ``split``, one (queries, k) array per lift exponent.

    Parameters
    ----------
    split : Split
        Only ``split.train`` and ``split.queries`` are read.
    adjacency : scipy sparse matrix, shape (pages, pages)
        ``A[i, j]`` = weight of the link i -> j.
    k : int
        List length.
    configuration : Configuration
        Damping factor, half-life (user tasks), navigation blend weight and lift exponent.
    lifts : sequence of float, optional
        Lift exponents to rank by (default: the configuration's); each costs no extra solve.
    gap : float, optional
        Session gap of the navigation counts (default: the split's, else 30 minutes).
    tol : float
        Power-iteration tolerance per column, ``‖x_{t+1} − x_t‖₁ < tol``.
    workers : int
        Threads of the power iteration.
    progress : callable, optional
        ``progress(done, total)`` in restart columns.

    Returns
    -------
    dict mapping each lift exponent to an int64 array (queries, k), ``-1`` padded.
    """
    k = check_count("k", k)
    lifts = tuple(float(lift) for lift in (lifts if lifts is not None else (configuration.lift,)))
    for lift in lifts:
        if check_real("lift", lift) < 0:
            raise ValueError(f"lifts must not be negative; got {lift!r}")
    graph = training_graph(split, adjacency, blend=configuration.blend, gap=gap)
    transition = prepare(graph)
    damping = configuration.damping
    workers = check_count("workers", workers)
    solve = {"damping": damping, "tol": tol, "workers": workers}
    overall = np.asarray(personalized_pagerank(transition, None, **solve).vectors)
    restarts, row_of = restart_matrix(split, half_life_days=configuration.half_life_days)
    excluded = sp.csr_matrix(excluded_pages(split))
    # one representative query per restart row: queries sharing a row share their exclusions too
    first_query = np.zeros(restarts.shape[0], dtype=np.int64)
    first_query[row_of[::-1]] = np.arange(row_of.size)[::-1]
    size = split.size
    lists = {lift: np.full((restarts.shape[0], k), -1, dtype=np.int64) for lift in lifts}
    step = max(_MIN_COLUMNS, (_BLOCK_CELLS // max(size, 1)) // _MIN_COLUMNS * _MIN_COLUMNS)
    total = restarts.shape[0]
    for start in range(0, total, step):
        rows = np.arange(start, min(total, start + step))
        block = restarts[rows].toarray().T  # (pages, columns)
        empty = block.sum(axis=0) == 0
        block[:, empty] = 1.0 / size
        vectors = personalized_pagerank(transition, block, **solve).vectors
        del block
        eligible = ~excluded[first_query[rows]].toarray().astype(bool).T
        for lift in lifts:
            lists[lift][rows] = select_pages(vectors, overall, eligible, k, lift=lift)
        if progress is not None:
            progress(int(rows[-1]) + 1, total)
    return {lift: found[row_of] for lift, found in lists.items()}


@dataclass(frozen=True, eq=False)
class PersonalisedPageRank:
    """rankrec's lists (:func:`rankrec_lists`) behind the baselines' ``recommend(split, k)`` interface."""

    adjacency: sp.spmatrix | sp.sparray
    configuration: Configuration = Configuration()
    gap: float | None = None
    tol: float = 1e-6
    workers: int = 1
    name: str = "rankrec"

    def recommend(self, split: Split, k: int) -> np.ndarray:
        found = rankrec_lists(
            split, self.adjacency, k, self.configuration, gap=self.gap, tol=self.tol, workers=self.workers
        )
        return found[float(self.configuration.lift)]

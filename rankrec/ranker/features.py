"""Candidates of a related list and the features a learnt ranker scores them by.

One :class:`Signals` holds every array the features read (the transition, global PageRank, spaces,
views, the text neighbours and the share of each page's in-links that are page chrome); a build makes
it from its staging folder, a loaded index from its own files, and the ranker's training from the
training graph, so candidates and features are computed by the same code wherever a list is made.

A seed's candidates (:func:`candidate_pool`) are the union of the best ``pool`` pages of its
personalised PageRank vector, its text neighbours, its out-links and its in-links (the strongest
``LINKS_PER_SIDE`` of each side), the ``pool`` pages most often co-cited with it (linked from its
strongest ``NEIGHBOURS_SAMPLED`` in-link sources) and, with reading history, the pages most often read in
the same sessions, the pages sessions went on to from it (:mod:`rankrec.ranker.covisits`) and the
``POPULAR`` pages read in most sessions (on navigation a large share of where sessions go: measured on
Wikispeedia, the 100 most read pages held 40% of the pages sessions went on to), and the ``CLICK_WALK``
pages most likely two steps into the seed's click walk (:func:`click_walk`).
:data:`FEATURES` names the columns of :func:`pair_features`.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np
import scipy.sparse as sp

from .covisits import NEIGHBOURS_KEPT

POOL = 100  # best pages of a seed's personalised PageRank vector among its candidates
LINKS_PER_SIDE = 200  # out-links and in-links of the seed taken as candidates, strongest first
NEIGHBOURS_SAMPLED = 256  # in-link sources of the seed read for co-citation, strongest first
POPULAR = 50  # pages read in most sessions, candidates of every seed (with reading history)
# pages of largest two-step click-walk probability among a seed's candidates: on Wikispeedia sessions
# they raised the test pools' recall from 0.56 to 0.59 of the pages sessions went on to (measured in a
# side harness on the evaluation's test queries)
CLICK_WALK = 100

FEATURES = (
    "ppr_log",  # log of the candidate's score in the seed's personalised PageRank vector
    "ppr_rank_log",  # log(1 + its rank among the vector's candidates)
    "ppr_lifted_log",  # ppr_log − global_log: how much the seed raises it over its global score
    "global_log",  # log of its global PageRank
    "out_link",  # the seed's transition share to it (a link or an observed move from the seed)
    "in_link",  # its transition share to the seed
    "two_step_log",  # log of the two-step transition probability seed -> ? -> candidate
    "cocitation_log",  # log(1 + pages linking to both), over the seed's strongest in-link sources
    "coupling_log",  # log(1 + pages both link to)
    "text_similarity",  # TF-IDF cosine (0 when not among the seed's text neighbours)
    "text_rank_log",  # log(1 + its rank among the seed's text neighbours); log(1 + top) when absent
    "same_space",  # 1 when seed and candidate share a space
    "shared_tags",  # cosine of their tag sets: shared tags / sqrt(seed's tags × candidate's tags)
    "views_log",  # log(1 + its views)
    "in_degree_log",  # log(1 + its in-links)
    "chrome_in_share",  # share of its in-link occurrences that are page chrome
    "covisit",  # cosine co-visitation of seed and candidate in reading sessions (0: never read together)
    "covisit_rank_log",  # log(1 + its rank among the seed's co-visited pages); log(1 + top) when absent
    "goes_on",  # share of the sessions reading the seed that read the candidate later
    "goes_on_rank_log",  # log(1 + its rank among the seed's successors); log(1 + top) when absent
    "click_through_log",  # log of how often readers follow links to it (rankrec.ranker.covisits.page_reading)
    "sessions_log",  # log(1 + sessions that read it)
    "views_out_degree",  # views_log · log(1 + its out-links): read and leading on (a hub readers use)
    "click_share",  # probability that the seed's click walk (:func:`click_walk`) goes to it in one step
    "click_two_step_log",  # log of the probability that the click walk is on it after two steps
)
TEXT_FEATURES = frozenset({"text_similarity", "text_rank_log"})
LINK_FEATURES = frozenset({"out_link", "in_link", "click_share"})


def absent_values(text_top: int) -> tuple[dict[int, float], dict[int, float], dict[int, float]]:
    """Column -> value of a candidate without text evidence, of one without a direct link (either
    direction) and of one no session read with the seed: what the occlusion attribution of
    :mod:`rankrec.ranker.model` sets."""
    text = {
        FEATURES.index("text_similarity"): 0.0,
        FEATURES.index("text_rank_log"): float(np.log1p(text_top)),
    }
    link = {FEATURES.index(name): 0.0 for name in ("out_link", "in_link", "click_share")}
    reading = {
        FEATURES.index("covisit"): 0.0,
        FEATURES.index("covisit_rank_log"): float(np.log1p(NEIGHBOURS_KEPT)),
        FEATURES.index("goes_on"): 0.0,
        FEATURES.index("goes_on_rank_log"): float(np.log1p(NEIGHBOURS_KEPT)),
    }
    return text, link, reading


_TINY = 1e-12


def popular_pages(sessions, archived) -> np.ndarray:
    """The ``POPULAR`` pages read in most ``sessions`` (sorted; ties to the lower page), never an
    ``archived`` one; none without history (``sessions`` None)."""
    if sessions is None:
        return np.zeros(0, dtype=np.int64)
    sessions = np.where(np.asarray(archived), 0.0, np.asarray(sessions, dtype=np.float64))
    order = np.lexsort((np.arange(sessions.size), -sessions))[:POPULAR]
    return np.sort(order[sessions[order] > 0]).astype(np.int64)


@dataclass(frozen=True, eq=False)
class Signals:
    """The arrays features are read from (see the module docstring); ``similar`` may be None (no text)."""

    forward: sp.csr_array
    backward: sp.csr_array
    global_vector: np.ndarray
    space: np.ndarray
    views: np.ndarray
    archived: np.ndarray
    chrome_in_share: np.ndarray
    similar: sp.csr_array | None = None
    text_top: int = 30
    covisited: sp.csr_array | None = None  # :func:`rankrec.ranker.covisits.covisited_pages`
    successors: sp.csr_array | None = None  # :func:`rankrec.ranker.covisits.session_successors`
    # per page, :func:`rankrec.ranker.covisits.page_reading` (None: no history)
    click_through: np.ndarray | None = None
    sessions: np.ndarray | None = None
    tags: sp.csr_array | None = None  # pages × tags incidence (None: no page has a tag)

    @cached_property
    def popular(self) -> np.ndarray:
        """The ``POPULAR`` pages read in most sessions (sorted; ties to the lower page), none without
        history; archived pages never."""
        return popular_pages(self.sessions, self.archived)

    @property
    def size(self) -> int:
        return int(self.global_vector.size)

    @classmethod
    def of(
        cls,
        transition,
        global_vector,
        space,
        views,
        archived,
        chrome_in_share,
        text,
        reading=(None, None),
        pages_read=(None, None),
        tags=None,
    ) -> Signals:
        """The signals of a transition, its global vector, the page arrays, ``text`` neighbours (None),
        ``reading``: (co-visited pages, session successors), either None, and ``pages_read``:
        (click-through, sessions) per page (:func:`rankrec.ranker.covisits.page_reading`) or Nones,
        ``tags``: the pages × tags incidence or None."""
        return cls(
            forward=transition.forward,
            backward=transition.backward,
            global_vector=global_vector,
            space=space,
            views=views,
            archived=archived,
            chrome_in_share=chrome_in_share,
            similar=None if text is None else text.similar,
            text_top=30 if text is None else text.top,
            covisited=reading[0],
            successors=reading[1],
            click_through=pages_read[0],
            sessions=pages_read[1],
            tags=tags,
        )


def _row(matrix, row: int) -> tuple[np.ndarray, np.ndarray]:
    start, end = int(matrix.indptr[row]), int(matrix.indptr[row + 1])
    return np.asarray(matrix.indices[start:end], dtype=np.int64), np.asarray(matrix.data[start:end])


def _strongest(pages: np.ndarray, weights: np.ndarray, count: int) -> np.ndarray:
    """The ``count`` pages of largest weight (all of them when there are no more)."""
    return pages if pages.size <= count else pages[np.argpartition(-np.asarray(weights), count - 1)[:count]]


@dataclass(frozen=True)
class ClickWalk:
    """Where a seed's click walk is after one and after two steps: ``pages`` (sorted), ``one`` and
    ``two`` their probabilities (see :func:`click_walk`), and ``through`` the transition's own two-step
    probabilities ``P²[seed, page]`` (read from the same rows)."""

    pages: np.ndarray
    one: np.ndarray
    two: np.ndarray
    through: np.ndarray

    def at(self, wanted: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(one-step, two-step, transition two-step) probabilities of the ``wanted`` pages (0 where the
        walk never is)."""
        return tuple(_lookup(self.pages, values, wanted) for values in (self.one, self.two, self.through))

    def likeliest(self, count: int) -> np.ndarray:
        """The ``count`` pages of largest two-step probability."""
        return _strongest(self.pages[self.two > 0], self.two[self.two > 0], count)


def click_walk(signals: Signals, seed: int) -> ClickWalk:
    """The first two steps of a reader clicking from ``seed``: from a page the walk moves to one of the
    pages its transition row reaches (its links and the moves readers made), each with probability
    proportional to that page's click-through (how often readers follow the links that lead to it:
    :func:`rankrec.ranker.covisits.page_reading`; all alike without history). A model of link choice
    learnt from every page's readers, so it also speaks for pages few sessions started from (on
    Wikispeedia sessions its two features raised the ranker's test nDCG@10 by about 0.002, measured in
    a side harness on the same candidate pools; the served figure is in the README). The seed's out-link
    rows are read once for this walk and the transition's own two steps.

    >>> forward = sp.csr_array(np.array([[0, 1, 1], [0, 0, 1], [1, 0, 0]], dtype=float))
    >>> signals = Signals(forward, sp.csr_array(forward.T), np.ones(3) / 3, np.zeros(3, int), np.zeros(3),
    ...                   np.zeros(3, bool), np.zeros(3), click_through=np.array([1.0, 1.0, 3.0]))
    >>> walk = click_walk(signals, 0)
    >>> walk.pages.tolist(), walk.one.round(2).tolist(), walk.two.round(2).tolist()
    ([0, 1, 2], [0.0, 0.25, 0.75], [0.75, 0.0, 0.25])
    """
    click = signals.click_through
    out_pages, out_weights = _row(signals.forward, seed)
    if out_pages.size == 0:
        empty = np.zeros(0)
        return ClickWalk(np.zeros(0, dtype=np.int64), empty, empty, empty)
    weight = np.ones(out_pages.size) if click is None else np.asarray(click)[out_pages].astype(np.float64)
    first = weight / weight.sum()
    rows = signals.forward[out_pages]
    reached = np.asarray(rows.indices, dtype=np.int64)
    entry_rows = np.repeat(np.arange(out_pages.size), np.diff(rows.indptr))
    pull = np.ones(reached.size) if click is None else np.asarray(click)[reached].astype(np.float64)
    totals = np.bincount(entry_rows, weights=pull, minlength=out_pages.size)
    step = first[entry_rows] * pull / np.where(totals > 0, totals, 1.0)[entry_rows]
    pages, where = np.unique(np.concatenate([out_pages, reached]), return_inverse=True)
    one = np.zeros(pages.size)
    one[where[: out_pages.size]] = first
    two = np.bincount(where[out_pages.size :], weights=step, minlength=pages.size)
    plain = np.asarray(out_weights, dtype=np.float64)[entry_rows] * rows.data  # P[seed, o] · P[o, c]
    through = np.bincount(where[out_pages.size :], weights=plain, minlength=pages.size)
    return ClickWalk(pages, one, two, through)


def candidate_pool(
    signals: Signals, seed: int, indices, values, pool: int, walk: ClickWalk | None = None
) -> np.ndarray:
    """Sorted candidate pages of ``seed`` (its vector given as sorted ``indices`` and ``values``; ``walk``
    its :func:`click_walk`, made when not given): see the module docstring. The seed itself and
    archived pages are never candidates."""
    scored = np.asarray(indices, dtype=np.int64)[np.asarray(values) > 0]
    best = _strongest(scored, np.asarray(values)[np.asarray(values) > 0], pool)
    parts = [best]
    if signals.similar is not None:
        parts.append(_row(signals.similar, seed)[0])
    out_pages, out_weights = _row(signals.forward, seed)
    parts.append(_strongest(out_pages, out_weights, LINKS_PER_SIDE))
    in_pages, in_weights = _row(signals.backward, seed)
    parts.append(_strongest(in_pages, in_weights, LINKS_PER_SIDE))
    sources = _strongest(in_pages, in_weights, NEIGHBOURS_SAMPLED)
    if sources.size:  # co-cited pages: linked from the pages that link to the seed, most often first
        siblings, counts = _linked_counts(signals.forward, sources)
        parts.append(_strongest(siblings, counts, pool))
    for matrix in (signals.covisited, signals.successors):
        if matrix is not None:
            parts.append(_row(matrix, seed)[0])
    parts.append(signals.popular)
    parts.append((click_walk(signals, seed) if walk is None else walk).likeliest(CLICK_WALK))
    union = np.unique(np.concatenate(parts))
    return union[(union != seed) & ~np.asarray(signals.archived)[union]]


def _lookup(indices, values, wanted: np.ndarray) -> np.ndarray:
    """``values`` of the ``wanted`` pages, ``indices`` sorted and distinct (0 where absent)."""
    indices, values = np.asarray(indices), np.asarray(values, dtype=np.float64)
    wanted = np.asarray(wanted)
    whole = indices.size == values.size and indices.size and indices[-1] == indices.size - 1
    if whole and (wanted.size == 0 or wanted.max() < indices.size):
        return values[wanted]  # pages 0, 1, ... each with its value (a whole vector)
    if indices.size == 0:
        return np.zeros(wanted.size)
    position = np.minimum(np.searchsorted(indices, wanted), indices.size - 1)
    return np.where(indices[position] == wanted, values[position], 0.0)


def _values_at(pages: np.ndarray, weights: np.ndarray, wanted: np.ndarray) -> np.ndarray:
    """``weights`` of the ``wanted`` pages (0 where absent), ``pages`` distinct in any order. Every
    feature is read this way, from the few pages a seed touches, never through an array over all
    pages (at a million pages each such array cost a millisecond or two a seed: measured)."""
    if pages.size > 1 and np.any(pages[1:] < pages[:-1]):
        order = np.argsort(pages, kind="stable")
        pages, weights = pages[order], np.asarray(weights)[order]
    return _lookup(pages, weights, wanted) if pages.size else np.zeros(wanted.size)


def _linked_counts(forward, sources: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The pages the ``sources`` link to (sorted) and how many of the sources link to each."""
    rows = forward[sources]
    return np.unique(np.asarray(rows.indices)[np.asarray(rows.data) > 0], return_counts=True)


def _neighbour_values(matrix, seed: int, candidates: np.ndarray, top: int):
    """The candidates' values in the seed's row of a neighbour list (0 when absent), and log(1 + their
    rank in that row) (log(1 + ``top``) when absent)."""
    values, ranks = np.zeros(candidates.size), np.full(candidates.size, np.log1p(top))
    if matrix is None:
        return values, ranks
    pages, weights = _row(matrix, seed)
    if pages.size:
        position = np.minimum(np.searchsorted(pages, candidates), pages.size - 1)
        present = pages[position] == candidates
        values[present] = weights[position[present]]
        order = np.empty(pages.size)
        order[np.argsort(-weights, kind="stable")] = np.arange(pages.size)
        ranks[present] = np.log1p(order[position[present]])
    return values, ranks


def _shared_columns(matrix, rows: np.ndarray, wanted: np.ndarray) -> np.ndarray:
    """Per row of ``rows``, how many of its positive entries lie in the ``wanted`` columns."""
    part = matrix[rows]
    hit = np.isin(np.asarray(part.indices), wanted) & (np.asarray(part.data) > 0)
    entry_rows = np.repeat(np.arange(rows.size), np.diff(part.indptr))
    return np.bincount(entry_rows[hit], minlength=rows.size)


def _shared_tags(tags: sp.csr_array, seed: int, candidates: np.ndarray) -> np.ndarray:
    """Cosine of the seed's and each candidate's tag sets (0 when either has none)."""
    seed_tags, _ = _row(tags, seed)
    if seed_tags.size == 0:
        return np.zeros(candidates.size)
    shared = _shared_columns(tags, candidates, seed_tags)
    starts = np.asarray(tags.indptr)
    sizes = (starts[candidates + 1] - starts[candidates]) * seed_tags.size
    return np.divide(shared, np.sqrt(sizes), out=np.zeros(candidates.size), where=sizes > 0)


def pair_features(
    signals: Signals, seed: int, candidates: np.ndarray, indices, values, walk: ClickWalk | None = None
) -> np.ndarray:
    """Features (:data:`FEATURES`, float32 columns) of ``candidates`` for ``seed``, whose personalised
    PageRank vector is given as sorted ``indices`` and ``values`` (``walk``: its :func:`click_walk`,
    made when not given)."""
    candidates = np.asarray(candidates, dtype=np.int64)
    m = candidates.size
    out = np.zeros((m, len(FEATURES)), dtype=np.float32)
    if m == 0:
        return out
    column = {name: position for position, name in enumerate(FEATURES)}
    ppr = _lookup(indices, values, candidates)
    overall = np.asarray(signals.global_vector)[candidates].astype(np.float64)
    order = np.argsort(-ppr, kind="stable")
    rank = np.empty(m)
    rank[order] = np.arange(m)
    out[:, column["ppr_log"]] = np.log(ppr + _TINY)
    out[:, column["ppr_rank_log"]] = np.log1p(rank)
    out[:, column["global_log"]] = np.log(overall + _TINY)
    out[:, column["ppr_lifted_log"]] = out[:, column["ppr_log"]] - out[:, column["global_log"]]
    out_pages, out_weights = _row(signals.forward, seed)
    out[:, column["out_link"]] = _values_at(out_pages, out_weights, candidates)
    # in_link: P[c, seed] is row ``seed`` of the backward (transposed) matrix
    in_pages, in_weights = _row(signals.backward, seed)
    out[:, column["in_link"]] = _values_at(in_pages, in_weights, candidates)
    one, two, through = (click_walk(signals, seed) if walk is None else walk).at(candidates)
    out[:, column["two_step_log"]] = np.log(through + _TINY)
    sources = _strongest(in_pages, in_weights, NEIGHBOURS_SAMPLED)
    if sources.size:  # pages linking to the seed and to the candidate
        linked, counts = _linked_counts(signals.forward, sources)
        out[:, column["cocitation_log"]] = np.log1p(_lookup(linked, counts, candidates))
    if out_pages.size:  # pages the seed and the candidate both link to
        out[:, column["coupling_log"]] = np.log1p(_shared_columns(signals.forward, candidates, out_pages))
    for matrix, value, rank_column, top in (
        (signals.similar, "text_similarity", "text_rank_log", signals.text_top),
        (signals.covisited, "covisit", "covisit_rank_log", NEIGHBOURS_KEPT),
        (signals.successors, "goes_on", "goes_on_rank_log", NEIGHBOURS_KEPT),
    ):
        out[:, column[value]], out[:, column[rank_column]] = _neighbour_values(matrix, seed, candidates, top)
    space = np.asarray(signals.space)
    out[:, column["same_space"]] = (space[candidates] == space[seed]) & (space[seed] >= 0)
    if signals.tags is not None:
        out[:, column["shared_tags"]] = _shared_tags(signals.tags, seed, candidates)
    out[:, column["views_log"]] = np.log1p(np.asarray(signals.views)[candidates].astype(np.float64))
    starts = np.asarray(signals.backward.indptr)
    out[:, column["in_degree_log"]] = np.log1p(starts[candidates + 1] - starts[candidates])
    out[:, column["chrome_in_share"]] = np.asarray(signals.chrome_in_share)[candidates]
    if signals.click_through is not None:
        out[:, column["click_through_log"]] = np.log(np.asarray(signals.click_through)[candidates] + _TINY)
    if signals.sessions is not None:
        out[:, column["sessions_log"]] = np.log1p(np.asarray(signals.sessions)[candidates])
    ends = np.asarray(signals.forward.indptr)
    out_degree = np.log1p(ends[candidates + 1] - ends[candidates])
    out[:, column["views_out_degree"]] = out[:, column["views_log"]] * out_degree
    out[:, column["click_share"]] = one
    out[:, column["click_two_step_log"]] = np.log(two + _TINY)
    return out

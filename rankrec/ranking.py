"""Rank a wiki's pages by (personalised) PageRank: the library side of `rankrec rank`.

The order is the one every list uses (:func:`rankrec.recommend.select.select_pages`): pages with a
positive score by ``score / global^lift`` (``lift`` as in :class:`rankrec.configuration.Configuration`;
0, the default here, ranks by score), then the other pages by global PageRank.
"""

from __future__ import annotations

import difflib
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ._validation import check_choice, check_count
from .configuration import check_lift
from .errors import InputError, UnknownTopic
from .graph import WikiGraph, load_graph
from .pagerank import PageRankResult, personalised_pagerank, prepare
from .recommend.select import lifted, select_pages, top_k
from .store import Store
from .topics import store_topics

__all__ = ["SPACE_PAGES", "Ranking", "rank_pages", "restart_from", "top_k"]

SPACE_PAGES = ("any", "first", "only")
"""Where the pages of the named spaces go: ranked with the rest, ahead of the rest, or alone."""


@dataclass(frozen=True)
class Ranking:
    """The top pages with their titles, spaces and scores, and the solves that produced them.

    ``scores`` are the PageRank values (personalised when a restart was named, else global);
    ``global_scores`` the global PageRank of the same pages (None when ``lift`` is 0: not needed);
    ``ranked`` the ranking score ``score / global^lift`` (``scores`` when ``lift`` is 0).
    ``in_space`` counts the leading pages that belong to the named spaces (``space_pages`` "first"
    or "only"; else 0).
    """

    pages: tuple[str, ...]
    titles: tuple[str, ...]
    spaces: tuple[str | None, ...]
    scores: np.ndarray
    global_scores: np.ndarray | None
    ranked: np.ndarray
    lift: float
    in_space: int
    restart_pages: int
    solve: PageRankResult
    global_solve: PageRankResult | None = None  # when solved apart from ``solve`` (a restart was named)

    @property
    def converged(self) -> bool:
        """Whether every power iteration behind the scores met its tolerance."""
        return self.solve.converged and (self.global_solve is None or self.global_solve.converged)


def restart_from(
    store: Store, graph: WikiGraph, *, pages: Sequence[str] = (), spaces: Sequence[str] = (), tags=()
) -> np.ndarray | None:
    """Restart distribution uniform over the named pages and the pages of the named spaces and tags.

    None (global PageRank) when nothing is named. Unknown pages raise UnknownPage, unknown
    spaces or tags UnknownTopic, each with the closest existing names.
    """
    chosen = [graph.page_numbers(pages)]
    for kind, names in (("spaces", spaces), ("tags", tags)):
        if not names:
            continue
        topics = store_topics(store, graph, kind)
        prefix = "space:" if kind == "spaces" else "tag:"
        for name in names:
            members = topics.get(prefix + name)
            if members is None:
                known = [topic.removeprefix(prefix) for topic in topics]
                raise UnknownTopic(
                    prefix + name, [prefix + m for m in difflib.get_close_matches(name, known, 3)]
                )
            chosen.append(members)
    members = np.unique(np.concatenate(chosen)) if chosen else np.zeros(0, dtype=np.int64)
    if members.size == 0:
        return None
    restart = np.zeros(graph.size)
    restart[members] = 1.0 / members.size
    return restart


def rank_pages(
    store: Store,
    *,
    pages: Sequence[str] = (),
    spaces: Sequence[str] = (),
    tags: Sequence[str] = (),
    k: int = 20,
    damping: float = 0.85,
    lift: float = 0.0,
    space_pages: str = "any",
    tol: float = 1e-9,
) -> Ranking:
    """Top ``k`` pages of the global or personalised PageRank (strongly preferential).

    Parameters
    ----------
    pages, spaces, tags : sequences of str
        The restart distribution: uniform over these pages and the pages of these spaces and tags
        (nothing named: global PageRank).
    k : int
        How many pages.
    damping : float in (0, 1)
        Damping factor.
    lift : float >= -2
        Rank by ``score / global^lift`` (0: by score). Needs a restart: the global ranking lifted by
        itself would say nothing.
    space_pages : {"any", "first", "only"}
        With ``spaces``: the pages of those spaces ranked with the others ("any"), ahead of the
        others ("first", each part in ranking order), or alone ("only").
    tol : float
        Power-iteration tolerance, ``‖x_{t+1} − x_t‖₁ < tol``.
    """
    check_count("k", k)
    lift = check_lift(lift)
    check_choice("space_pages", space_pages, SPACE_PAGES)
    if space_pages != "any" and not spaces:
        raise ValueError(f"space_pages {space_pages!r} needs spaces to be named")
    with store.reading():
        graph = load_graph(store)
        if graph.size == 0:
            raise InputError(store.path, None, "the wiki store holds no pages; import some first")
        restart = restart_from(store, graph, pages=pages, spaces=spaces, tags=tags)
        table = store.page_table()  # (title, space, archived) in the graph's order
    if lift and restart is None:
        raise ValueError(
            f"lift {lift!r} weighs a personalised PageRank against the global one; name a restart"
        )
    titles = np.array([title or page for (title, _, _), page in zip(table, graph.pages, strict=True)], object)
    page_spaces = np.array([space for _, space, _ in table], dtype=object)
    parts = [np.ones(graph.size, dtype=bool)]
    if space_pages != "any":
        member = np.isin(page_spaces, list(spaces))
        parts = [member] if space_pages == "only" else [member, ~member]

    transition = prepare(graph.adjacency)
    result = personalised_pagerank(transition, restart, damping=damping, tol=tol)
    vector, overall, global_solve = result.vectors, result.vectors, None
    positive = vector > 0
    if restart is not None and (lift or _fills(parts, positive, k)):  # the global vector is needed
        global_solve = personalised_pagerank(transition, damping=damping, tol=tol)
        overall = global_solve.vectors
    chosen, in_space = [], 0
    for number, part in enumerate(parts):
        found = select_pages(vector, overall, part, k - len(chosen), lift=lift) if len(chosen) < k else []
        found = [page for page in np.asarray(found).tolist() if page >= 0]
        chosen += found
        in_space += len(found) if number == 0 and space_pages != "any" else 0
    best = np.array(chosen, dtype=np.int64)
    return Ranking(
        pages=tuple(graph.pages[best].tolist()),
        titles=tuple(titles[best].tolist()),
        spaces=tuple(page_spaces[best].tolist()),
        scores=vector[best],
        global_scores=overall[best] if lift else None,
        ranked=lifted(vector[best], overall[best], lift),
        lift=lift,
        in_space=in_space,
        restart_pages=graph.size if restart is None else int(np.count_nonzero(restart)),
        solve=result,
        global_solve=global_solve,
    )


def _fills(parts, positive: np.ndarray, k: int) -> bool:
    """Whether some part has fewer than ``k`` scored pages and unscored ones to fill with (which go in
    global PageRank order)."""
    return any(np.count_nonzero(part & positive) < k and bool((part & ~positive).any()) for part in parts)

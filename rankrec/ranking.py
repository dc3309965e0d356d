"""Rank a wiki's pages by (personalised) PageRank: the library side of `rankrec rank`."""

from __future__ import annotations

import difflib
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ._validation import check_count
from .errors import InputError, UnknownTopic
from .graph import WikiGraph, load_graph
from .pagerank import PageRankResult, personalised_pagerank, prepare
from .recommend.select import top_k
from .store import Store
from .topics import store_topics


@dataclass(frozen=True)
class Ranking:
    """The top pages with their scores, and the solve that produced them."""

    pages: tuple[str, ...]
    scores: np.ndarray
    restart_pages: int
    solve: PageRankResult


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
    tol: float = 1e-9,
) -> Ranking:
    """Top ``k`` pages of the global or personalised PageRank (strongly preferential)."""
    check_count("k", k)
    graph = load_graph(store)
    if graph.size == 0:
        raise InputError(store.path, None, "the wiki store holds no pages; import some first")
    restart = restart_from(store, graph, pages=pages, spaces=spaces, tags=tags)
    result = personalised_pagerank(prepare(graph.adjacency), restart, damping=damping, tol=tol)
    best = top_k(result.vectors, k)
    return Ranking(
        pages=tuple(graph.pages[best].tolist()),
        scores=result.vectors[best],
        restart_pages=graph.size if restart is None else int(np.count_nonzero(restart)),
        solve=result,
    )

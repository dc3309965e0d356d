"""Topics as sets of pages: a wiki's spaces and tags, in the graph's dense numbering.

A topic's restart distribution is uniform over its pages that are not archived (an archived
page stays in the graph, so links through it still count, but no walk restarts there).
"""

from __future__ import annotations

import numpy as np

from .graph import WikiGraph, dense_numbers
from .store import Store

_QUERIES = {
    "spaces": "SELECT space, id FROM pages WHERE present = 1 AND archived = 0 AND space IS NOT NULL",
    "tags": "SELECT tag, pages.id FROM page_tags JOIN pages ON pages.id = page_id "
    "WHERE present = 1 AND archived = 0",
}
_PREFIX = {"spaces": "space", "tags": "tag"}


def store_topics(store: Store, graph: WikiGraph, kind: str, *, min_pages: int = 1) -> dict[str, np.ndarray]:
    """``{"space:NAME" or "tag:NAME": sorted dense page numbers}`` for topics with >= min_pages pages."""
    if kind not in _QUERIES:
        raise ValueError(f"kind must be one of {', '.join(map(repr, _QUERIES))}; got {kind!r}")
    rows = store.connection.execute(_QUERIES[kind]).fetchall()
    if not rows:
        return {}
    names = np.array([row[0] for row in rows], dtype=object)
    dense = dense_numbers(graph.row_ids, np.array([row[1] for row in rows], dtype=np.int64))
    order = np.lexsort((dense, names.astype(str)))
    names, dense = names[order], dense[order]
    topics: dict[str, np.ndarray] = {}
    boundaries = np.flatnonzero(names[1:] != names[:-1]) + 1
    for chunk_names, chunk in zip(np.split(names, boundaries), np.split(dense, boundaries), strict=True):
        members = np.unique(chunk[chunk >= 0])
        if members.size >= min_pages:
            topics[f"{_PREFIX[kind]}:{chunk_names[0]}"] = members
    return topics


def topic_of_pages(graph: WikiGraph, topics: dict[str, np.ndarray]) -> np.ndarray:
    """Restart matrix (n, k) with column j uniform over topic j's pages (float64)."""
    restart = np.zeros((graph.size, len(topics)))
    for column, members in enumerate(topics.values()):
        restart[members, column] = 1.0 / members.size
    return restart

"""Topics as sets of pages: a wiki's spaces, tags, or text-derived topics, in the graph's dense numbering.

A topic's restart distribution is uniform over its pages that are not archived (an archived
page stays in the graph, so links through it still count, but no walk restarts there).
"""

from __future__ import annotations

import warnings

import numpy as np

from .graph import WikiGraph, dense_numbers
from .store import Store

_PREFIX = {"spaces": "space", "tags": "tag"}


def store_topics(store: Store, graph: WikiGraph, kind: str, *, min_pages: int = 1) -> dict[str, np.ndarray]:
    """``{"space:NAME" or "tag:NAME": sorted dense page numbers}`` for topics with >= min_pages pages."""
    if kind not in _PREFIX:
        raise ValueError(f"kind must be one of {', '.join(map(repr, _PREFIX))}; got {kind!r}")
    rows = store.topic_pairs(kind)
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


def _page_texts(store: Store, graph: WikiGraph) -> tuple[np.ndarray, list[str]]:
    """Dense numbers and "title space tags" text of the graph's pages that are not archived."""
    rows = store.page_texts()
    dense = dense_numbers(graph.row_ids, np.array([row[0] for row in rows], dtype=np.int64))
    texts = [" ".join(part.replace("-", " ").replace("_", " ") for part in row[1:]) for row in rows]
    keep = np.flatnonzero(dense >= 0)
    return dense[keep], [texts[i] for i in keep]


def text_topics(
    store: Store, graph: WikiGraph, count: int, *, seed: int = 0, terms: int = 3, max_iter: int = 300
) -> dict[str, np.ndarray]:
    """``count`` topics found in the pages' text by TF-IDF and non-negative matrix factorisation.

    The store keeps no page bodies, so "text" here is what it does hold: each page's title,
    space and tags (hyphens and underscores read as spaces). Pages are weighted by TF-IDF
    (scikit-learn ``TfidfVectorizer``, English stop words dropped) and the matrix is
    factorised by ``NMF`` (``init="nndsvda"``, seeded). Each page joins the one topic with its
    largest weight; a page whose text has no known term joins none. Topics are named
    ``text:N:term+term+term`` after their ``terms`` heaviest terms. Archived pages are left out,
    as in :func:`store_topics`.

    Returns ``{name: sorted dense page numbers}`` for the topics that received pages.
    """
    from sklearn.decomposition import NMF
    from sklearn.exceptions import ConvergenceWarning
    from sklearn.feature_extraction.text import TfidfVectorizer

    if isinstance(count, bool) or not isinstance(count, int) or count < 1:
        raise ValueError(f"count must be a positive integer; got {count!r}")
    dense, texts = _page_texts(store, graph)
    if not texts:
        return {}
    vectorizer = TfidfVectorizer(stop_words="english", token_pattern=r"(?u)\b[^\W\d_]{2,}\b")
    try:
        weights = vectorizer.fit_transform(texts)
    except ValueError:  # no term at all (every text empty or stop words only)
        return {}
    count = min(count, *weights.shape)
    model = NMF(n_components=count, init="nndsvda", random_state=seed, max_iter=max_iter, tol=1e-4)
    with warnings.catch_warnings():  # a short max_iter may stop early; the topics are still usable
        warnings.simplefilter("ignore", category=ConvergenceWarning)
        loadings = model.fit_transform(weights)
    vocabulary = vectorizer.get_feature_names_out()
    best = loadings.argmax(axis=1)
    has_topic = loadings.max(axis=1) > 0
    topics: dict[str, np.ndarray] = {}
    for topic in range(count):
        members = np.sort(dense[has_topic & (best == topic)])
        if members.size:
            heaviest = np.argsort(-model.components_[topic], kind="stable")[:terms]
            topics[f"text:{topic}:" + "+".join(vocabulary[heaviest])] = members
    return topics

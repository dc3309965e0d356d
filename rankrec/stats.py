"""Summary of a wiki store: sizes, graph shape, text coverage, reading history, the worst unresolved links."""

from __future__ import annotations

from datetime import UTC, datetime

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from .chrome import judge_chrome
from .store import Store


def _spread(counts: np.ndarray) -> dict[str, float]:
    if counts.size == 0:
        return {"mean": 0.0, "median": 0.0, "max": 0}
    return {
        "mean": round(float(counts.mean()), 2),
        "median": float(np.median(counts)),
        "max": int(counts.max()),
    }


def _iso(timestamp: float | None) -> str | None:
    if timestamp is None:
        return None
    return datetime.fromtimestamp(timestamp, UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


def _chrome(ids, page_ids, sources, targets, places, counts, names) -> dict:
    """The page-chrome judgement of the store's link places (:func:`rankrec.chrome.judge_chrome`, as the
    build makes it): links judged, how many are chrome, where they sit and what they point at."""
    if sources.size == 0:
        return {"judged": False}
    rows, columns = np.searchsorted(ids, sources), np.searchsorted(ids, targets)
    judgement = judge_chrome(rows, columns, places, counts, ids.size)
    return judgement.summary(names, page_ids, top=10)


def wiki_stats(store: Store, *, worst: int = 10) -> dict:
    """Everything `rankrec stats` shows, as one JSON-ready mapping.

    ``text`` is the text coverage: present pages with text, their share of the present pages,
    and the UTF-8 bytes of their stored text (before compression). ``chrome`` is the page-chrome
    judgement the build makes (:func:`rankrec.chrome.judge_chrome`): link occurrences with a place,
    how many are chrome and their share; ``chrome_places`` the template places, most widespread first, and
    ``chrome_top_targets`` the pages chrome points at most.

    >>> with Store(":memory:") as store:
    ...     summary = wiki_stats(store)
    >>> summary["pages"], summary["dangling"], summary["largest_scc"], summary["text"]["pages"]
    (0, 0, 0, 0)
    """
    with store.reading():
        summary: dict = store.counts()
        ids, page_ids = store.present_pages()
        sources, targets, _ = store.link_arrays()
        archived = sum(archived for _, _, archived in store.page_table())
        restricted = len({page for page, _ in store.page_group_pairs()})
        users, pages, times = store.view_arrays()
        worst_targets = store.unresolved_targets(worst)
        worst_sources = store.pages_with_unresolved_links(worst)
        with_text, text_bytes = store.text_counts()
        placed = store.link_place_arrays()
    n = ids.size
    rows = np.searchsorted(ids, sources)
    columns = np.searchsorted(ids, targets)
    out_degree = np.bincount(rows, minlength=n)
    summary["dangling"] = int(np.count_nonzero(out_degree == 0))
    if n:
        matrix = sp.csr_matrix((np.ones(rows.size), (rows, columns)), shape=(n, n))
        _, labels = connected_components(matrix, directed=True, connection="strong")
        summary["largest_scc"] = int(np.bincount(labels).max())
    else:
        summary["largest_scc"] = 0
    summary["text"] = {
        "pages": with_text,
        "share": round(with_text / n, 4) if n else 0.0,
        "bytes": text_bytes,
    }
    chrome = _chrome(ids, page_ids, *placed)
    summary["chrome"] = {
        name: chrome[name]
        for name in ("judged", "occurrences", "chrome_occurrences", "share")
        if name in chrome
    }
    summary["chrome_places"] = [{"place": place} for place in chrome.get("places", [])]
    summary["chrome_top_targets"] = chrome.get("top_targets", [])
    summary["archived"] = archived
    summary["restricted"] = restricted
    summary["views_per_user"] = _spread(np.unique(users, return_counts=True)[1])
    summary["views_per_page"] = _spread(np.unique(pages, return_counts=True)[1])
    # every view names a page row (foreign key), so a view of no present page is of a missing one
    summary["views_of_missing_pages"] = int(np.count_nonzero(~np.isin(pages, ids)))
    first = float(times.min()) if times.size else None
    last = float(times.max()) if times.size else None
    summary["time_span"] = {
        "first": _iso(first),
        "last": _iso(last),
        "days": round((last - first) / 86400, 1) if times.size else 0.0,
    }
    summary["worst_unresolved_targets"] = [
        {"target": target, "links": count} for target, count in worst_targets
    ]
    summary["pages_with_most_unresolved"] = [{"page": page, "links": count} for page, count in worst_sources]
    return summary

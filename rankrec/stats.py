"""Summary of a wiki store: sizes, graph shape, text coverage, reading history, the worst unresolved links."""

from __future__ import annotations

from datetime import UTC, datetime

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from .chrome import judge_chrome
from .derive import LISTING_CODE_SHARE
from .store import Store

_PLACES_SHOWN = 3  # file:line places named per unresolved target or page


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
    ``chrome_top_targets`` the pages chrome points at most. Links: ``links`` are those between present
    pages (the graph's), ``unresolved_links`` those to pages no source describes, ``links_total`` every
    stored link (what `rankrec import` reads, once per page and target: the sum of the two, plus any
    from pages no source describes); ``same_page_links`` the links of pages to themselves (section
    anchors, their own file), counted at import and kept out of the graph. Each of the worst unresolved
    targets, and of the pages with most unresolved links, names ``at`` the ``file:line`` of its first
    links (by file and line) and how many more there are. ``sites`` says, for every folder of pages
    imported, the title prefix and suffix its latest import cut off and how its spaces were found.
    ``source_listings`` counts the pages a build keeps out of lists as generated source listings
    (:func:`rankrec.derive.source_listings`).

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
        listings = int(np.count_nonzero(store.code_shares() >= LISTING_CODE_SHARE))
        restricted = len({page for page, _ in store.page_group_pairs()})
        users, pages, times = store.view_arrays()
        worst_targets = [
            (target, count, store.unresolved_link_origins(target=target, limit=_PLACES_SHOWN))
            for target, count in store.unresolved_targets(worst)
        ]
        worst_sources = [
            (page, count, store.unresolved_link_origins(source=page, limit=_PLACES_SHOWN))
            for page, count in store.pages_with_unresolved_links(worst)
        ]
        links_total = store.stored_link_count()
        same_page = store.same_page_link_count()
        with_text, text_bytes = store.text_counts()
        placed = store.link_place_arrays()
        sites = store.site_shapes()
    counts, summary = summary, {}
    for key, value in counts.items():  # the link counts side by side
        summary[key] = value
        if key == "unresolved_links":
            summary["links_total"] = links_total
            summary["same_page_links"] = same_page
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
    summary["source_listings"] = listings
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
        {"target": target, "links": count, "at": _places(*origins)}
        for target, count, origins in worst_targets
    ]
    summary["pages_with_most_unresolved"] = [
        {"page": page, "links": count, "at": _places(*origins)} for page, count, origins in worst_sources
    ]
    fields = ("title_suffix", "title_prefix", "spaces", "space_count")
    summary["sites"] = [
        {"source": source, **{name: shape.get(name) for name in fields}}
        for source, shape in sorted(sites.items())
    ]
    return summary


def _places(origins: list[tuple[str, int | None]], total: int) -> str:
    """``file:line`` of the first links, and how many more: ``a.md:3, b.md and 4 more``.

    >>> _places([("a.md", 3), ("b.md", None), ("b.md", None)], 6)
    'a.md:3, b.md and 3 more'
    """
    named = (file if line is None else f"{file}:{line}" for file, line in origins)
    shown = ", ".join(dict.fromkeys(named))  # links of one file without lines are named once
    more = total - len(origins)
    return shown + (f" and {more:,} more" if more > 0 else "")

"""What a build derives from its :class:`~rankrec.evidence.Evidence` before any PageRank: the link matrix
blended with observed navigation, page chrome (which links are chrome, the chrome share of each page's
in-links), site hubs, and the reading neighbours and per-page reading counts the ranker reads.
:mod:`rankrec.build` uses them, and offline evaluation reads the same ones (what is evaluated is served).
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from .configuration import Configuration
from .evidence import Evidence
from .graph import blend_navigation, chrome_pairs, content_matrix, navigation_counts
from .profiles import SECONDS_PER_DAY
from .ranker.covisits import covisited_pages, page_reading, session_successors

# site hubs (common practice: round thresholds): linked from a fifth of all pages, or from a twentieth
# with mostly chrome links
HUB_SHARE, CHROME_HUB_SHARE = 0.2, 0.05
INDEX_MIN_LINKS = 20  # fewest targets of an index page (common practice: a small wiki's hub pages differ)
# a generated source listing: at least this share of the page's text in code blocks. Measured on six
# Debian documentation packages: every Doxygen source page 0.90 or more, every Javadoc one 1.0; prose pages
# with examples below 0.65, a README made of one build file 0.84, a licence page of licence texts 0.86;
# pages printing whole example programs or a grammar (4 of the other 3,400 pages) 0.91 to 0.98: they count too
LISTING_CODE_SHARE = 0.9


def source_listings(evidence: Evidence) -> np.ndarray:
    """Pages at least :data:`LISTING_CODE_SHARE` of whose text sits in code blocks: the per-file source
    listings of API documentation (Javadoc's ``src-html``, Doxygen's ``*_source``, Sphinx's ``_modules``),
    which match their own API pages' text and would top those pages' related lists."""
    if evidence.code_share is None:
        return np.zeros(evidence.size, dtype=bool)
    return evidence.code_share >= LISTING_CODE_SHARE


def chrome_only(evidence: Evidence) -> sp.csr_matrix | None:
    """Pages × pages, 1 where a link is page chrome wherever it occurs (None when links carry no places)."""
    _, judgement = content_matrix(evidence.graph.adjacency, evidence.places, chrome_weight=0.0)
    return chrome_pairs(evidence.size, evidence.places, judgement)


def _chrome_summary(evidence: Evidence, judgement) -> dict:
    if judgement is None:
        return {"judged": False}
    return judgement.summary(evidence.places.names, evidence.graph.pages)


def navigation_matrix(evidence: Evidence, configuration: Configuration) -> tuple[sp.csr_matrix, dict]:
    """The link matrix (page chrome judged and weighed by ``chrome_weight``:
    :func:`rankrec.graph.content_matrix`) blended with observed navigation (see the module docstring),
    and what it counted."""
    links, judgement = content_matrix(
        evidence.graph.adjacency, evidence.places, chrome_weight=configuration.chrome_weight
    )
    chrome = _chrome_summary(evidence, judgement)
    views = evidence.views
    if configuration.navigation_weight == 0 or views.times.size == 0:
        summary = {"weight": configuration.navigation_weight, "moves": 0, "pages_with_moves": 0}
        return links, summary | {"chrome": chrome}
    keep = np.ones(views.times.size, dtype=bool)
    if configuration.navigation_window_days is not None:
        keep = views.times >= views.latest - configuration.navigation_window_days * SECONDS_PER_DAY
    counts = navigation_counts(
        views.users[keep],
        views.pages[keep],
        views.times[keep],
        evidence.size,
        gap=configuration.session_gap_seconds,
    )
    blended = blend_navigation(links, counts, configuration.navigation_weight)
    summary = {
        "weight": configuration.navigation_weight,
        "moves": int(counts.sum()),
        "pages_with_moves": int(np.count_nonzero(np.diff(counts.indptr))),
        "chrome": chrome,
    }
    return blended, summary


def chrome_in_share(evidence: Evidence) -> np.ndarray:
    """Per page, the share of the link occurrences pointing at it that are page chrome (0 without places)."""
    share = np.zeros(evidence.size)
    places = evidence.places
    if places is None or places.sources.size == 0:
        return share
    _, judgement = content_matrix(evidence.graph.adjacency, places, chrome_weight=0.0)
    counts = np.asarray(places.counts, dtype=np.float64)
    total = np.bincount(places.targets, weights=counts, minlength=evidence.size)
    chrome = np.bincount(places.targets, weights=counts * judgement.chrome, minlength=evidence.size)
    np.divide(chrome, total, out=share, where=total > 0)
    return share


def site_hubs(adjacency, chrome_share) -> np.ndarray:
    """Site hubs and chrome pages, a boolean per page: linked from at least ``HUB_SHARE`` of all pages
    (chrome links count), or from at least ``CHROME_HUB_SHARE`` of them with at least half of the link
    occurrences pointing at the page chrome (``chrome_share``: :func:`chrome_in_share`; home, license,
    index and contents pages of generated sites); never fewer than two linking pages. Also the
    general index and contents pages themselves: pages linking to at least ``HUB_SHARE`` of all pages
    and to at least ``INDEX_MIN_LINKS`` (a generated index's words are every page's words, so its
    text resembles every page's without being related to any)."""
    linked = sp.coo_array(adjacency)
    linked.sum_duplicates()
    size = linked.shape[0]
    other = (linked.row != linked.col) & (linked.data != 0)
    sources = np.bincount(linked.col[other], minlength=size).astype(np.float64)
    wide = sources >= max(2.0, HUB_SHARE * size)
    navigation = (sources >= max(2.0, CHROME_HUB_SHARE * size)) & (np.asarray(chrome_share) >= 0.5)
    targets = np.bincount(linked.row[other], minlength=size)
    listing = targets >= max(INDEX_MIN_LINKS, HUB_SHARE * size)
    return wide | navigation | listing


def reading_neighbours(evidence: Evidence, configuration: Configuration) -> tuple:
    """(co-visited pages, session successors) of the evidence's views (:mod:`rankrec.ranker.covisits`)."""
    gap = configuration.session_gap_seconds
    return (
        covisited_pages(evidence.views, evidence.size, gap=gap),
        session_successors(evidence.views, evidence.size, gap=gap),
    )


def pages_read(evidence: Evidence, configuration: Configuration) -> tuple:
    """(click-through, sessions) per page of the evidence's views (:func:`rankrec.ranker.covisits.
    page_reading`), (None, None) without views."""
    if not np.any(evidence.views.pages >= 0):
        return None, None
    gap = configuration.session_gap_seconds
    return page_reading(evidence.views, evidence.graph.adjacency, evidence.size, gap=gap)

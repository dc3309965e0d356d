"""Site chrome judged from where links sit: which link occurrences are navigation, not content.

Generated documentation repeats the same blocks on every page (site header, prev/next bars, sidebars,
footers). A block is recognised by its *place* (a string naming the link's structural position, such as
``div.related>ul>li``), the way template detection finds pagelets repeated across a site's pages
(Bar-Yossef and Rajagopalan 2002). Everything here works on arrays: one row per distinct
(source page, target page, place code) with how many times the link occurs there.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse import csgraph

from ._validation import check_count, check_fraction


@dataclass(frozen=True, eq=False)
class ChromeJudgement:
    """Which link occurrences are chrome, and the figures behind the judgement.

    ``chrome[r]``: row r is chrome. ``place_is_chrome[p]``: place code p is a template place.
    ``place_pages[p]``: pages with a link at place p; ``place_patterned[p]``: share of its distinct
    rows that are template or sequence links (see :func:`judge_chrome`). ``chrome_places`` (place codes) and
    ``chrome_place_share`` (share of the linked pages they appear on) list the template places, most
    widespread first; ``top_targets`` and ``top_target_counts`` the pages with the most chrome
    occurrences pointing at them.
    """

    chrome: np.ndarray
    place_is_chrome: np.ndarray
    place_pages: np.ndarray
    place_patterned: np.ndarray
    linked_pages: int
    min_place_pages: float
    occurrences: float
    chrome_occurrences: float
    chrome_places: np.ndarray
    chrome_place_share: np.ndarray
    top_targets: np.ndarray
    top_target_counts: np.ndarray

    @property
    def chrome_share(self) -> float:
        """Share of all link occurrences (counts included) judged chrome; 0 without links."""
        return self.chrome_occurrences / self.occurrences if self.occurrences else 0.0

    def summary(self, place_names, page_ids, top: int = 10) -> dict:
        """JSON-ready figures: occurrences judged, chrome among them, the widespread template places and
        the pages chrome points at most (``place_names[code]``, ``page_ids[page]`` name them)."""
        return {
            "judged": True,
            "occurrences": int(self.occurrences),
            "chrome_occurrences": int(self.chrome_occurrences),
            "share": round(float(self.chrome_share), 4),
            "places": [str(place_names[int(code)]) for code in self.chrome_places[:top]],
            "top_targets": [
                {"target": str(page_ids[int(page)]), "links": int(count)}
                for page, count in zip(self.top_targets[:top], self.top_target_counts[:top], strict=True)
            ],
        }


def judge_chrome(
    sources,
    targets,
    places,
    counts,
    pages: int,
    *,
    template_share: float = 0.3,
    min_pages: int = 5,
    place_share: float = 0.5,
    place_count: int | None = None,
    top: int = 10,
) -> ChromeJudgement:
    """Judge each link occurrence chrome (navigation repeated by the site's templates) or content.

    Rows r are link occurrences ``(s_r, t_r, p_r)`` (source and target page numbers, place code) with
    counts ``c_r > 0``; repeated rows are added up first, so neither order nor splitting matters.
    Let ``N`` be the number of pages with at least one link, ``n(p, t)`` the number of pages linking
    to t at place p, ``n(p)`` the number of pages with a link at place p, and
    ``θ = max(min_pages, template_share · N)``.

    1. Template link: ``n(p_r, t_r) ≥ θ`` (the header's "Home", the footer's "License").
    2. Sequence link (prev/next bars: page i's "next" is page i+1, whose "previous" is page i). With the
       partner place ``q*(p) = argmax_q |{r : p_r = p, (t_r, s_r, q) is a row}|`` (smallest q on ties;
       often p itself), the reciprocated rows ``R = {r : s_r ≠ t_r, (t_r, s_r, q*(p_r)) is a row}`` and
       ``d(p, i) = |{r ∈ R : p_r = p, s_r = i}|``, row r is a sequence link when r ∈ R,
       ``d(p_r, s_r) ≤ 2``, ``d(q*(p_r), t_r) ≤ 2`` and r's connected component in the graph with an
       edge ``(p_r, s_r)–(p_r, t_r)`` for each such row holds at least ``min_pages`` nodes: a chain of
       reading order, not a hub (a chapter's list of its sections, linked back by each section) nor a
       pair or triangle of pages that link each other.
    3. Patterned share ``a(p) = |{r : p_r = p, r template or sequence link}| / |{r : p_r = p}|``
       (rows, not counts: a link repeated within one page says nothing about other pages).
    4. Template place: ``n(p) ≥ θ`` and ``a(p) ≥ place_share``.
    5. Row r is chrome ⇔ ``p_r`` is a template place.

    A template link alone does not make chrome: a page that many pages' text links to (same paragraph
    place, a small share of that place's links) stays content, and so do "See also" lists (one place,
    different targets on each page). A site with fewer than ``min_pages`` linked pages has no chrome.
    Time and memory: a few sorts of the m rows (about 10 s for 10M rows).

    Parameters
    ----------
    sources, targets : int arrays (m,)
        Page numbers in ``0..pages-1``.
    places : int array (m,)
        Place codes ``≥ 0`` (``0..place_count-1``).
    counts : array (m,)
        Positive occurrence counts.
    pages : int
        Number of pages.
    template_share : float in (0, 1]
        Share of the linked pages a link or place must reach.
    min_pages : int
        Pages a link or place must reach at least.
    place_share : float in (0, 1]
        Share of a place's distinct rows that must be template or sequence links.
    place_count : int, optional
        Number of place codes (default: largest code + 1).
    top : int
        How many chrome targets to report.

    Examples
    --------
    >>> pages = np.arange(6)  # each page links to page 6 in its footer (place 0), onwards in its text (1)
    >>> sources, targets = np.r_[pages, pages], np.r_[np.full(6, 6), (pages + 1) % 6]
    >>> places = np.r_[np.zeros(6, int), np.ones(6, int)]
    >>> j = judge_chrome(sources, targets, places, np.ones(12), 7)
    >>> j.place_is_chrome.tolist(), round(j.chrome_share, 2), j.top_targets.tolist()
    ([True, False], 0.5, [6])
    """
    pages = check_count("pages", pages, minimum=0)
    sources, targets = _pages_array("sources", sources, pages), _pages_array("targets", targets, pages)
    places = _codes("places", places, place_count)
    counts = np.asarray(counts, dtype=np.float64)
    size = sources.size
    if not (counts.ndim == 1 and targets.size == places.size == counts.size == size):
        raise ValueError(
            f"sources, targets, places and counts must have one equal length; got {sources.shape!r}, "
            f"{targets.shape!r}, {places.shape!r}, {counts.shape!r}"
        )
    if not np.all(np.isfinite(counts) & (counts > 0)):
        raise ValueError(f"counts must be positive and finite; got {counts[~(counts > 0)][:3]!r}")
    template_share = check_fraction("template_share", template_share, open_low=True)
    place_share = check_fraction("place_share", place_share, open_low=True)
    min_pages = check_count("min_pages", min_pages)
    top = check_count("top", top, minimum=0)
    codes = int(places.max()) + 1 if place_count is None and size else (place_count or 0)
    if codes * max(pages, 1) >= 2**62:
        raise ValueError(f"place_count × pages must stay below 2**62; got {codes!r} × {pages!r}")

    # Distinct rows (pair of place and target, then source), counts added up.
    width = max(pages, 1)
    pair_codes, pair_of = np.unique(places * width + targets, return_inverse=True)
    row_codes, row_of = np.unique(pair_of * width + sources, return_inverse=True)
    weight = np.bincount(row_of, weights=counts, minlength=row_codes.size)
    pair, source = row_codes // width, row_codes % width
    place, target = pair_codes[pair] // width, pair_codes[pair] % width

    linked = int(np.count_nonzero(np.bincount(source, minlength=pages)))
    threshold = max(float(min_pages), template_share * linked)
    place_pages = np.bincount(_runs(np.sort(place * width + source))[0] // width, minlength=codes)
    template = np.bincount(pair, minlength=pair_codes.size)[pair] >= threshold
    patterned = template | _sequence_links(source, target, place, width, min_pages)
    rows = np.bincount(place, minlength=codes)
    share = np.bincount(place, weights=patterned, minlength=codes) / np.maximum(rows, 1)
    place_is_chrome = (place_pages >= threshold) & (share >= place_share) & (rows > 0)

    chrome_rows = place_is_chrome[place]
    chrome_places = np.flatnonzero(place_is_chrome)
    chrome_places = chrome_places[np.argsort(-place_pages[chrome_places], kind="stable")]
    by_target = np.bincount(target[chrome_rows], weights=weight[chrome_rows], minlength=pages)
    top_targets = np.flatnonzero(by_target)
    top_targets = top_targets[np.lexsort((top_targets, -by_target[top_targets]))][:top]
    return ChromeJudgement(
        chrome=place_is_chrome[places],
        place_is_chrome=place_is_chrome,
        place_pages=place_pages,
        place_patterned=share,
        linked_pages=linked,
        min_place_pages=threshold,
        occurrences=float(weight.sum()),
        chrome_occurrences=float(weight[chrome_rows].sum()),
        chrome_places=chrome_places,
        chrome_place_share=place_pages[chrome_places] / max(linked, 1),
        top_targets=top_targets,
        top_target_counts=by_target[top_targets],
    )


def _sequence_links(source, target, place, pages: int, min_pages: int) -> np.ndarray:
    """True for distinct rows ``(s, t, p)`` that are sequence links (rule 2 of :func:`judge_chrome`)."""
    size = source.size
    key = source * pages + target
    order = np.argsort(key, kind="stable")
    keys, starts, lengths = _runs(key[order])
    reverse = target * pages + source
    at = np.minimum(np.searchsorted(keys, reverse), keys.size - 1)
    lengths = np.where((keys[at] == reverse) & (source != target), lengths[at], 0)  # (t, s, q) rows
    row = np.repeat(np.arange(size), lengths)
    if row.size == 0:
        return np.zeros(size, dtype=bool)
    offsets = np.arange(row.size) - np.repeat(np.cumsum(lengths) - lengths, lengths)
    reversed_at = place[order[np.repeat(starts[at], lengths) + offsets]]
    codes = int(place.max()) + 1
    pair_codes, _, per_pair = _runs(np.sort(place[row] * codes + reversed_at))
    own, other = pair_codes // codes, pair_codes % codes
    best = np.lexsort((other, -per_pair, own))  # per place: most reversed rows first, then smallest code
    first = best[np.r_[True, own[best][1:] != own[best][:-1]]]
    partner = np.full(codes, -1, dtype=np.int64)
    partner[own[first]] = other[first]
    hit, _, _ = _runs(row[reversed_at == partner[place[row]]])  # row is ascending

    # Reading order: at most two partners per page on either side, in chains of at least min_pages pages.
    near = place[hit] * pages + source[hit]
    far = partner[place[hit]] * pages + target[hit]
    nodes, _, degree = _runs(np.sort(near))
    at = np.minimum(np.searchsorted(nodes, far), nodes.size - 1)
    far_degree = np.where(nodes[at] == far, degree[at], 0)
    keep = (degree[np.searchsorted(nodes, near)] <= 2) & (far_degree <= 2)
    hit, near = hit[keep], near[keep]
    if hit.size == 0:
        return np.zeros(size, dtype=bool)
    other_end = place[hit] * pages + target[hit]
    ends, _, _ = _runs(np.sort(np.concatenate([near, other_end])))
    one, two = np.searchsorted(ends, near), np.searchsorted(ends, other_end)
    chain = sp.coo_matrix((np.ones(hit.size), (one, two)), shape=(ends.size, ends.size))
    _, component = csgraph.connected_components(chain, directed=False)
    sequence = np.zeros(size, dtype=bool)
    sequence[hit[np.bincount(component)[component[one]] >= min_pages]] = True
    return sequence


def _runs(ordered: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Distinct values of an ascending array, where each run of equal values starts, and its length."""
    starts = np.flatnonzero(np.r_[True, ordered[1:] != ordered[:-1]]) if ordered.size else ordered[:0]
    return ordered[starts], starts, np.diff(np.r_[starts, ordered.size])


def content_weights(sources, targets, counts, chrome, pages: int, *, chrome_weight: float = 0.0):
    """Link weights (pages × pages CSR): content occurrences plus ``chrome_weight`` × chrome ones.

    ``w[i, j] = Σ_{r: (s_r, t_r) = (i, j)} c_r · (chrome_weight if chrome[r] else 1)``; pairs whose
    weight is 0 (all chrome with ``chrome_weight=0``) are not stored.

    >>> w = content_weights([0, 0, 1], [1, 2, 2], [2, 1, 3], [False, True, True], 3, chrome_weight=0.5)
    >>> w.toarray().tolist()
    [[0.0, 2.0, 0.5], [0.0, 0.0, 1.5], [0.0, 0.0, 0.0]]
    """
    pages = check_count("pages", pages, minimum=0)
    sources, targets = _pages_array("sources", sources, pages), _pages_array("targets", targets, pages)
    counts = np.asarray(counts, dtype=np.float64)
    chrome = np.asarray(chrome)
    if chrome.dtype != np.bool_:
        raise TypeError(f"chrome must be a boolean array, not {chrome.dtype!r}")
    if not (targets.shape == counts.shape == chrome.shape == sources.shape):
        raise ValueError(
            f"sources, targets, counts and chrome must have one equal length; got {sources.shape!r}, "
            f"{targets.shape!r}, {counts.shape!r}, {chrome.shape!r}"
        )
    if not np.all(np.isfinite(counts) & (counts >= 0)):
        raise ValueError(f"counts must be non-negative and finite; got {counts[~(counts >= 0)][:3]!r}")
    chrome_weight = check_fraction("chrome_weight", chrome_weight)
    data = counts * np.where(chrome, chrome_weight, 1.0)
    weights = sp.csr_matrix((data, (sources, targets)), shape=(pages, pages))
    weights.sum_duplicates()
    weights.eliminate_zeros()
    return weights


def _pages_array(name: str, values, pages: int) -> np.ndarray:
    array = np.asarray(values)
    if array.ndim != 1:
        raise ValueError(f"{name} must be one-dimensional; got shape {array.shape!r}")
    if array.size and array.dtype.kind not in "iu":
        raise TypeError(f"{name} must hold integers, not {array.dtype!r}")
    array = array.astype(np.int64, copy=False)
    if array.size and (array.min() < 0 or array.max() >= pages):
        raise ValueError(f"{name} must lie in 0..{pages - 1}; got values {array.min()!r}..{array.max()!r}")
    return array


def _codes(name: str, values, count: int | None) -> np.ndarray:
    array = np.asarray(values)
    if array.ndim != 1:
        raise ValueError(f"{name} must be one-dimensional; got shape {array.shape!r}")
    if array.size and array.dtype.kind not in "iu":
        raise TypeError(f"{name} must hold integers, not {array.dtype!r}")
    array = array.astype(np.int64, copy=False)
    if count is not None:
        check_count("place_count", count, minimum=0)
    low, high = (int(array.min()), int(array.max())) if array.size else (0, -1)
    if low < 0 or (count is not None and high >= count):
        raise ValueError(
            f"{name} must be codes in 0..{'' if count is None else count - 1}; got {low}..{high}"
        )
    return array

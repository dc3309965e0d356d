"""Spaces for a site without folders, from the site's own structure.

A site whose pages mostly sit in folders has its spaces already (a page's first folder). A flat one
(every page in one folder, as DocBook and many generators write them) gets them, in this order, from:

1. **"up" links**: when most pages name the page above them (``rel="up"``), each page belongs to the
   child of the root that it descends from (the root is the page above everything, usually the home page);
2. **its table-of-contents page**: the page named ``index``, ``contents``, ``toc``... linking to the
   most pages, else the page linking to the most pages; each top-level entry of its main list starts a
   space that its nested entries (the links after it, nested deeper) join; a page the contents leave
   out takes the space most of the pages of a space that link to it have (repeated a few rounds);
3. **file names**: the part of a page's file name before its first ``-``, ``_`` or ``.``
   (``sql-select`` is in ``sql``).

Spaces stay few: at most :data:`MAX_SPACES`, each of at least :data:`MIN_SPACE_PAGES` pages; smaller
ones are lumped into :data:`OTHER`. A method that gives fewer than two such spaces, or lumps most of its
pages into OTHER, gives none, and the next is tried. A derived space is named by the page id of its
top-level page (methods 1 and 2) or by the file-name prefix (method 3). Spaces never change a page that
has one already (from its folder or its front matter).
"""

from __future__ import annotations

import re
from collections import Counter
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ._links import default_space
from .records import LinkRecord, PageRecord

SPACE_MODES = ("auto", "folders", "none")
"""``auto``: folders when most pages have one, else the site's structure; ``folders``: a page's first
folder only (a flat site gets no spaces); ``none``: no spaces from the layout (a space a Markdown page's
front matter names stays)."""

MAX_SPACES = 40
"""Most spaces a site's structure gives (the last one being :data:`OTHER`): a filter or a per-space list
is useful with a few dozen spaces, not hundreds (common practice)."""
MIN_SPACE_PAGES = 3
"""Fewest pages of a derived space; smaller ones are lumped into :data:`OTHER` (common practice)."""
OTHER = "other"
OTHER_SHARE = 0.5
"""Most of a method's pages that may end in :data:`OTHER`; with more, the method says too little."""
FOLDER_SHARE = 0.5
"""Share of pages that must have a space already for ``auto`` to keep the folders as they are."""
UP_SHARE = 0.5
"""Share of pages that must name the page above them for the "up" links to be used."""
CONTENTS_SHARE = 0.1
"""Share of the pages that a table-of-contents page must link to."""
CONTENTS_NAMES = frozenset({"index", "contents", "toc", "table-of-contents", "sitemap", "home", "summary"})
"""Last segments of page ids taken first as the table-of-contents page (common practice)."""
_ROUNDS = 8  # rounds of passing spaces on along links
_UP_DEPTH = 64  # steps up a chain of "up" links at most (a loop of them ends there)
_NAME_PREFIX = re.compile(r"([^-_.]+)[-_.].")


@dataclass(frozen=True)
class _Graph:
    """Page ids, their positions, and every link as positions (-1: a page outside the import)."""

    ids: list[str]
    position: dict[str, int]
    sources: np.ndarray
    targets: np.ndarray


@dataclass(frozen=True)
class SiteSpaces:
    """Every page's space (page id -> space or None), how they were found, and how many there are."""

    spaces: dict[str, str | None]
    method: str
    count: int


def site_spaces(pages: Sequence[PageRecord], links: Sequence[LinkRecord], mode: str = "auto") -> SiteSpaces:
    """The spaces of one import's ``pages`` (see the module docstring), their links given in reading order.

    >>> from rankrec.sources.records import Origin
    >>> names = [f"{head}-{n}" for head in ("sql", "app", "func") for n in range(3)]
    >>> pages = [PageRecord(name, name, Origin(name)) for name in names]
    >>> found = site_spaces(pages, [])
    >>> found.method, found.count, found.spaces["sql-2"]
    ('file names', 3, 'sql')
    """
    given = [page.space for page in pages]
    if mode == "folders" or not pages:
        return _result(pages, given, "folders")
    if mode == "none":
        kept = [None if page.space == default_space(page.page) else page.space for page in pages]
        return _result(pages, kept, "none")
    if sum(space is not None for space in given) >= FOLDER_SHARE * len(pages):
        return _result(pages, given, "folders")
    ids = [page.page for page in pages]
    position = {page: index for index, page in enumerate(ids)}
    sources = np.array([position.get(link.source, -1) for link in links], dtype=np.int64)
    targets = np.array([position.get(link.target, -1) for link in links], dtype=np.int64)
    graph = _Graph(ids, position, sources, targets)
    for method, find in (
        ("up links", _from_up_links),
        ("contents page", _from_contents),
        ("file names", _from_names),
    ):
        found = find(pages, links, graph)
        if found is None:
            continue
        names, detail = found
        names = _lumped(names)
        if names is not None:
            spaces = [space if space is not None else name for space, name in zip(given, names, strict=True)]
            return _result(pages, spaces, method + detail)
    return _result(pages, given, "folders")


def _result(pages: Sequence[PageRecord], spaces: list[str | None], method: str) -> SiteSpaces:
    mapping = {page.page: space for page, space in zip(pages, spaces, strict=True)}
    return SiteSpaces(mapping, method, len({space for space in spaces if space is not None}))


def _lumped(names: list[str | None]) -> list[str | None] | None:
    """``names`` with all but the largest spaces (and all too small) lumped into OTHER; None if fewer than
    two spaces are left besides OTHER."""
    counts = Counter(name for name in names if name is not None)
    ranked = sorted(counts.items(), key=lambda item: (-item[1], item[0]))
    kept = {name for name, count in ranked[: MAX_SPACES - 1] if count >= MIN_SPACE_PAGES}
    lumped = sum(count for name, count in counts.items() if name not in kept or name == OTHER)
    if len(kept - {OTHER}) < 2 or lumped > OTHER_SHARE * sum(counts.values()):
        return None
    return [name if name is None or name in kept else OTHER for name in names]


def _from_up_links(pages, links, graph: _Graph):
    """Page -> the root's child it descends from, by the pages' "up" links; None: too few of them."""
    ids, position = graph.ids, graph.position
    parent = np.array(
        [position.get(page.parent, -1) if page.parent else -1 for page in pages], dtype=np.int64
    )
    parent[parent == np.arange(parent.size)] = -1
    if np.count_nonzero(parent >= 0) < UP_SHARE * parent.size:
        return None
    top = np.arange(parent.size)
    for _ in range(_UP_DEPTH):  # climb while the page above is not a root (one without a page above)
        above = parent[top]
        climb = above >= 0
        climb[climb] = parent[above[climb]] >= 0
        if not climb.any():
            break
        top[climb] = above[climb]
    names = [None if parent[index] < 0 else ids[top[index]] for index in range(parent.size)]
    return names, ""


def _depth(place: str) -> int:
    """How deeply a link's place nests: its elements (HTML) or blocks (Markdown)."""
    chain = place.removeprefix("md:").partition("@")[0]
    return chain.count(">") + 1 if chain else 0


def _group(place: str) -> str:
    """The list a link's place belongs to: its two outermost elements or blocks."""
    return ">".join(place.removeprefix("md:").partition("@")[0].split(">")[:2])


def _contents_page(graph: _Graph) -> int | None:
    """The table-of-contents page: of the pages with a conventional name linking to three pages or more,
    the one linking to the most; else the page linking to the most, if to enough of them."""
    ids = graph.ids
    inside = (graph.sources >= 0) & (graph.targets >= 0)
    degree = np.bincount(graph.sources[inside], minlength=len(ids))
    named = np.array([page.rsplit("/", 1)[-1].lower() in CONTENTS_NAMES for page in ids], dtype=bool)
    pool = np.flatnonzero(named & (degree >= 3))
    if pool.size == 0:
        pool = np.flatnonzero(degree >= max(3, CONTENTS_SHARE * len(ids)))
    if pool.size == 0:
        return None
    return int(pool[np.argmax(degree[pool])])  # argmax keeps the first (in page order) of a tie


def _from_contents(pages, links, graph: _Graph):
    """Page -> the top-level entry of the contents page its entry comes under; None: no contents page."""
    ids, position = graph.ids, graph.position
    contents = _contents_page(graph)
    if contents is None:
        return None
    own = np.flatnonzero((graph.sources == contents) & (graph.targets >= 0))
    entries = [links[index] for index in own]
    main = Counter(_group(link.place) for link in entries).most_common(1)[0][0]
    entries = [link for link in entries if _group(link.place) == main]
    top_depth = min(_depth(link.place) for link in entries)
    labels = np.full(len(ids), -1, dtype=np.int64)
    current = -1
    tops = 0
    for link in entries:  # the links of one page (bounded by its size), in document order
        target = position[link.target]
        if _depth(link.place) == top_depth:
            current = target
            tops += 1
        if current >= 0 and labels[target] < 0 and target != contents:
            labels[target] = current
    if tops < 2:
        return None
    _pass_on(labels, graph, contents)
    names = [None if label < 0 else ids[label] for label in labels]
    return names, f" {ids[contents]}"


def _pass_on(labels: np.ndarray, graph: _Graph, contents: int) -> None:
    """Give each page without a label the label most of its labelled in-linking pages have (ties: the
    smaller label), a few rounds; links from and to the contents page do not count."""
    sources, targets = graph.sources, graph.targets
    keep = (sources >= 0) & (targets >= 0) & (sources != contents) & (targets != contents)
    sources, targets = sources[keep], targets[keep]
    n = labels.size
    for _ in range(_ROUNDS):
        passing = (labels[sources] >= 0) & (labels[targets] < 0)
        if not passing.any():
            return
        keys, counts = np.unique(targets[passing] * n + labels[sources[passing]], return_counts=True)
        target, label = keys // n, keys % n
        order = np.lexsort((label, -counts, target))
        target, label = target[order], label[order]
        first = np.ones(target.size, dtype=bool)
        first[1:] = target[1:] != target[:-1]
        labels[target[first]] = label[first]


def _from_names(pages, links, graph: _Graph):
    """Page -> the part of its file name before the first ``-``, ``_`` or ``.`` (None: no such part)."""
    names = []
    for page in graph.ids:
        match = _NAME_PREFIX.match(page.rsplit("/", 1)[-1])
        names.append(match.group(1).lower() if match else None)
    return names, ""

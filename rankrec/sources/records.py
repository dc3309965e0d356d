"""Plain records that the readers yield. Each carries its provenance (file, line).

Readers never touch the store or the graph; they yield these records, or an
:class:`rankrec.errors.InputError` *value* (not raised) for every bad record they skip,
so that the importer decides whether to stop (``--strict``) or to report and go on.
Errors that make the rest of a file unreadable (a truncated gzip stream, say) are
yielded the same way, after which the reader stops.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

DEFAULT_EXCLUDE = "nav, header, footer, [role=navigation]"
"""CSS selector of the HTML elements whose links and text are always left out (``--exclude`` adds to it);
other site chrome is judged from where links repeat (:mod:`rankrec.chrome`)."""

TEXT_BYTES = 65_536
"""Most UTF-8 bytes of a page's text that are kept (64 KiB); longer text is cut at a character."""
HEADINGS_BYTES = 16_384
"""Most UTF-8 bytes of a page's headings that are kept (16 KiB), cut the same way."""
PAGE_FILE_BYTES = 8 * 1024 * 1024
"""Most bytes read from one page file (8 MiB; of a gzip file, once decompressed): a larger file is
refused with an InputError. The size is counted while reading (at most this many bytes and one
more are read), never taken from the file system, which reports 0 for ``/proc`` files."""
LINE_BYTES = PAGE_FILE_BYTES
"""Most bytes of one line of a line-oriented file (a page export's line holds one page): a longer
line is an InputError that ends the reading of its file."""


@dataclass(frozen=True, slots=True)
class Origin:
    file: str
    line: int | None = None

    def __str__(self) -> str:
        return self.file if self.line is None else f"{self.file}:{self.line}"


@dataclass(frozen=True, slots=True)
class PageRecord:
    """One wiki page. ``groups`` empty means everyone may see it.

    ``text`` is the page's main text as plain text, whitespace collapsed (empty: the source
    gave none); ``headings`` its title and headings, one per line. Readers keep at most
    :data:`TEXT_BYTES` and :data:`HEADINGS_BYTES` of them (:func:`clip_utf8`). ``parent`` is the
    page id the page names as the one above it (an HTML ``rel="up"`` link), if any: the importer
    may give a site without folders its spaces from it; it is not stored. ``same_page_links``
    counts the page's links to itself (a section anchor ``#part``, or its own file with or without
    one): neither links of the graph nor bad records, only counted. ``code_share`` is the share of the
    page's visible text that sits in code blocks (HTML pages; 0 where not measured): a page that is
    nearly all code is a generated source listing (:func:`rankrec.derive.source_listings`).
    """

    page: str
    title: str
    origin: Origin
    space: str | None = None
    tags: tuple[str, ...] = ()
    groups: tuple[str, ...] = ()
    archived: bool = False
    url: str | None = None
    external_links: int = 0
    text: str = ""
    headings: str = ""
    parent: str | None = None
    same_page_links: int = 0
    code_share: float = 0.0


@dataclass(frozen=True, slots=True)
class LinkRecord:
    """A link from page ``source`` to page ``target`` (page ids; the target may not exist).

    ``places`` says where in the source page the link occurs, as ``(place, occurrences)``
    pairs in order of first occurrence; ``place`` is the first of them. A place is the
    structural position of the link in its document (for HTML the element path above it,
    ``div.footer>p``; for Markdown the block path and the heading above it,
    ``md:bullet_list>list_item>paragraph@see also``). Both are empty when the source has no
    structure (an edge list); a record with only ``place`` counts as one occurrence there.
    """

    source: str
    target: str
    origin: Origin
    weight: float = 1.0
    place: str = ""
    places: tuple[tuple[str, int], ...] = ()

    def occurrences(self) -> tuple[tuple[str, int], ...]:
        """``places``, or ``((place, 1),)`` when only ``place`` is given, or ``()``."""
        if self.places:
            return self.places
        return ((self.place, 1),) if self.place else ()


@dataclass(frozen=True, slots=True)
class ViewRecord:
    """One page view; ``timestamp`` in Unix seconds (UTC), ``dwell`` in seconds or None."""

    user: str
    page: str
    timestamp: float
    origin: Origin
    dwell: float | None = None


@dataclass(frozen=True, slots=True)
class MembershipRecord:
    """``user`` belongs to team or access group ``name``; ``kind`` is "team" or "group"."""

    user: str
    name: str
    kind: str
    origin: Origin


def clip_utf8(text: str, limit: int) -> str:
    """``text`` cut to at most ``limit`` bytes of UTF-8, at a character boundary.

    The work is bounded by ``limit`` whatever the length of ``text``; a lone surrogate (which
    UTF-8 cannot hold) becomes ``?``.

    >>> clip_utf8("naïve", 3), clip_utf8("naïve", 4), clip_utf8("ab", 10)
    ('na', 'naï', 'ab')
    """
    data = text[: limit + 1].encode("utf-8", errors="replace")  # every character takes a byte or more
    return data[:limit].decode("utf-8", errors="ignore")  # drops only a character cut in two


@dataclass(frozen=True, slots=True)
class EdgeRows:
    """A run of an edge list's good rows, column by column: what a PageRecord per endpoint first seen
    and a LinkRecord per row would say, without an object per row (a list of ten million links is read
    in about a minute and a half). ``pages`` are the endpoints first seen in the run, ``page_lines`` the
    line of each; ``source_numbers``, ``target_numbers``, ``weights`` and ``lines`` hold one entry per link. A
    page's number counts the pages of the file in the order they were first seen (the pages of the
    file's runs, one run after another), ``names`` gives its id. Every id is checked.
    """

    file: str
    pages: list[str]
    page_lines: list[int]
    source_numbers: np.ndarray
    target_numbers: np.ndarray
    weights: list[float]
    lines: list[int]
    names: list[str] = field(repr=False, compare=False)  # page number -> id (the reader's, still growing)

    @property
    def sources(self) -> list[str]:
        """The source page id of each link."""
        return [self.names[number] for number in self.source_numbers.tolist()]

    @property
    def targets(self) -> list[str]:
        """The target page id of each link."""
        return [self.names[number] for number in self.target_numbers.tolist()]

    def records(self):
        """The same as PageRecords and LinkRecords, in line order (an endpoint before its first link)."""
        pages = iter(zip(self.pages, self.page_lines, strict=True))
        waiting = next(pages, None)
        for source, target, weight, line in zip(
            self.sources, self.targets, self.weights, self.lines, strict=True
        ):
            while waiting is not None and waiting[1] <= line:
                yield PageRecord(waiting[0], waiting[0], Origin(self.file, waiting[1]))
                waiting = next(pages, None)
            yield LinkRecord(source, target, Origin(self.file, line), weight)
        while waiting is not None:
            yield PageRecord(waiting[0], waiting[0], Origin(self.file, waiting[1]))
            waiting = next(pages, None)


@dataclass(frozen=True, slots=True)
class ViewRows:
    """A run of view events' good rows, column by column: what a ViewRecord per row would say, without
    an object per row. ``seconds`` holds Unix seconds (float64), ``dwells`` seconds or None; every id,
    time and dwell is checked."""

    file: str
    users: list[str]
    pages: list[str]
    seconds: list[float]
    dwells: list[float | None]
    lines: list[int]

    def records(self):
        """The same as ViewRecords, in line order."""
        for user, page, seconds, dwell, line in zip(
            self.users, self.pages, self.seconds, self.dwells, self.lines, strict=True
        ):
            yield ViewRecord(user, page, seconds, Origin(self.file, line), dwell)


Record = PageRecord | LinkRecord | ViewRecord | MembershipRecord


def expanded(items):
    """A reader's runs (:class:`EdgeRows`, :class:`ViewRows`) as their records; other items as they are."""
    for item in items:
        if isinstance(item, (EdgeRows, ViewRows)):
            yield from item.records()
        else:
            yield item

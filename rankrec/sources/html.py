"""Reader for a folder of HTML pages (lxml's HTML parser, CSS selectors by cssselect).

Each ``*.html`` / ``*.htm`` file is a page; its id is its path relative to the folder
without the extension and its URL is the base URL plus that path. ``<a href>`` values are
resolved per RFC 3986 section 5.2 against ``<base href>`` if present, else the page URL;
URLs under the base URL map back to page ids, all others are external. Links inside
elements matching the ``exclude`` selector (navigation, headers, footers) are ignored.

A page's text is the text of its document outside ``<head>``, ``<script>``, ``<style>``,
``<template>``, ``<noscript>`` and the excluded elements, whitespace collapsed, at most
64 KiB of UTF-8 (cut at a character); its headings are its title and then the text of every
``<h1>``..``<h6>`` outside those elements, one per line (at most 16 KiB). Every link
records its place: the elements above it from ``<body>`` (exclusive) down to its parent, each
as its tag name and its sorted class names (``div.related>ul>li``; at most four classes, each
cut to 40 name characters, others written ``_``), inline formatting elements left out, the 12
nearest at most. A link straight under ``<body>`` has the empty place. A link's line is the
line of its ``<a`` (where its start tag begins). A page's ``parent`` is the page its first
``rel="up"`` link (``<link>`` or ``<a>``), else its first ``<a accesskey="u">``, points at.

Files may be parsed in worker processes (``workers``); the records come in the same order.

The tree is libxml2's (through lxml), which closes elements the HTML standard lets a page
leave open (``<p>`` before a ``<div>``, ``<li>`` before the next); a page nested deeper than
its limit (256 elements) is an InputError, never a partial page.
"""

from __future__ import annotations

import gzip
import os
import re
import zlib
from collections import Counter
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import PurePosixPath
from urllib.parse import quote

from bs4.dammit import EncodingDetector
from cssselect import HTMLTranslator, SelectorError
from lxml import etree

from .._validation import check_count
from ..errors import InputError
from ..progress import Progress
from ._html_walk import LAST_LINE, anchor_lines, link_place, text_of, walk
from ._links import (
    EXTERNAL,
    PAGE,
    ROOT_RELATIVE,
    SAME_PAGE,
    check_base_url,
    default_space,
    folder_pages,
    has_scheme,
    is_root_relative,
    link_records,
    page_id_for_path,
    resolve_reference,
    url_link_target,
)
from ._parallel import parse_in_order
from ._text import _open_binary, check_encoding, read_text
from .records import DEFAULT_EXCLUDE, HEADINGS_BYTES, LinkRecord, Origin, PageRecord, clip_utf8

__all__ = ["read_html_folder"]

_SUFFIXES = (".html", ".htm")
# libxml2 stops reading at ``</html>``; the HTML standard (and Python's html.parser) read on,
# so the end tag is dropped before parsing (it holds no newline: line numbers stay).
_END_HTML = re.compile(r"</html[ \t\f]*>", re.IGNORECASE)
_NO_SITE = "http://wiki.invalid/"  # where page URLs are made when no base URL is given (RFC 6761 .invalid)


@dataclass(slots=True)
class _Parsed:
    record: PageRecord
    links: list[tuple[int | None, str, str]]  # (line, page id, place)


def _markup(file: str, encoding: str | None) -> str | InputError:
    if encoding is not None:
        try:
            return read_text(file, encoding)
        except InputError as error:
            return error
    try:
        with _open_binary(file) as stream:  # type: ignore[arg-type]
            data = stream.read()
    except OSError as error:
        return InputError(file, None, f"cannot read: {error.strerror or error}")
    except (EOFError, gzip.BadGzipFile, zlib.error) as error:
        return InputError(file, None, f"compressed stream is damaged or truncated ({error})")
    return _decode(data)


def _decode(data: bytes) -> str:
    """Text of an HTML file: byte-order mark, else ``<meta charset>``, else UTF-8, else windows-1252.

    bs4's EncodingDetector finds the first two; decoding here keeps a character-set guess
    from overriding valid UTF-8 and makes the last resort explicit: UTF-8 with replacement
    characters.
    """
    detector = EncodingDetector(data, is_html=True)
    declared = EncodingDetector.find_declared_encoding(detector.markup, is_html=True)
    for encoding in (detector.sniffed_encoding, declared, "utf-8", "windows-1252"):
        if encoding is None:
            continue
        try:
            return detector.markup.decode(encoding)
        except (UnicodeDecodeError, LookupError):
            continue
    return detector.markup.decode("utf-8", errors="replace")


def _tree(file: str, markup: str, parser: etree.HTMLParser):
    """The document's root element (an empty ``<html>`` for a page without elements), or an InputError."""
    try:
        root = etree.fromstring(_END_HTML.sub("", markup).encode("utf-8", "replace"), parser)
    except (etree.LxmlError, ValueError) as error:
        return InputError(file, None, f"HTML could not be parsed ({error}); page skipped")
    fatal = [error for error in parser.error_log if error.level == etree.ErrorLevels.FATAL]
    if fatal:
        line = fatal[0].line if 0 < fatal[0].line < LAST_LINE else None
        return InputError(file, line, f"HTML could not be parsed ({fatal[0].message}); page skipped")
    return etree.Element("html") if root is None else root


def _parse_page(
    relative: str,
    file: str,
    markup: str,
    root,
    base_url: str,
    exclude,
    others: set[str],
    site_known: bool = True,
    tally: Counter | None = None,
) -> _Parsed:
    page = page_id_for_path(relative)
    page_url = base_url + quote(relative, safe="/")
    title = text_of(next(root.iter("title"), None)) or text_of(next(root.iter("h1"), None))
    title = title or PurePosixPath(relative).stem
    document_base = page_url
    base = next((element for element in root.iter("base") if element.get("href") is not None), None)
    if base is not None:
        document_base = resolve_reference(page_url, _clean(base.get("href")))
        if not has_scheme(document_base):
            document_base = page_url
    lines = anchor_lines(markup, list(root.iter("a")))
    anchors, text, headings, code_share = walk(root, set(exclude(root)) if exclude is not None else set())
    links: list[tuple[int | None, str, str]] = []
    external: set[str] = set()
    places: dict[object, str] = {}  # parent element -> its place (links often share one)
    names: dict[object, str] = {}  # element -> its name in a place (places share ancestors)
    same_page = root_relative = 0
    for anchor in anchors:
        href = _clean(anchor.get("href"))
        if href == "" or href[:11].lower() == "javascript:":
            continue  # an empty link or a script, neither a link nor counted
        if href.startswith("#"):
            same_page += 1  # a section of the page itself
            continue
        if not site_known and document_base == page_url and is_root_relative(href):
            root_relative += 1  # where the site's root is, only a base URL says
            continue
        kind, value = url_link_target(resolve_reference(document_base, href), base_url, others)
        if kind == PAGE and value == page:
            same_page += 1  # the page's own file, with or without a fragment or query
        elif kind == PAGE:
            parent = anchor.getparent()
            place = places.get(parent)
            if place is None:
                place = places[parent] = link_place(parent, names)
            links.append((lines[anchor], value, place))
        elif kind == EXTERNAL:
            external.add(value.partition("#")[0])
        # NOT_A_PAGE (an image, a PDF of the folder) is dropped
    parent = _up_page(root, document_base, base_url, others)
    if tally is not None:  # only what occurred: a zero count stays out of the summary
        for what, count in ((SAME_PAGE, same_page), (ROOT_RELATIVE, root_relative)):
            if count:
                tally[what] += count
    record = PageRecord(
        page=page,
        title=title,
        origin=Origin(file, None),
        space=default_space(page),
        url=page_url,
        external_links=len(external),
        text=text,
        headings=clip_utf8(title + ("\n" + headings if headings else ""), HEADINGS_BYTES),
        same_page_links=same_page,
        parent=parent if parent != page else None,
        code_share=round(code_share, 4),
    )
    return _Parsed(record, links)


def _up_page(root, document_base: str, base_url: str, others: set[str]) -> str | None:
    """The page id the page names as the one above it: the first ``<link rel="up">`` or ``<a rel="up">``
    (HTML link type "up"), else the first ``<a accesskey="u">`` (DocBook's "Up" link; common practice)."""
    marked = [element for element in root.iter("link", "a") if element.get("href") is not None]
    ups = [element for element in marked if "up" in (element.get("rel") or "").lower().split()]
    ups += [element for element in marked if element.tag == "a" and element.get("accesskey") == "u"]
    for element in ups:
        kind, value = url_link_target(
            resolve_reference(document_base, _clean(element.get("href"))), base_url, others
        )
        if kind == PAGE:
            return value
    return None


def _clean(href: str) -> str:
    """An attribute value as a URL parser reads it: outer whitespace, tabs and newlines removed."""
    return href.strip(" \t\n\r\f").replace("\t", "").replace("\n", "").replace("\r", "")


def read_html_folder(
    folder: str | os.PathLike[str],
    *,
    base_url: str | None = None,
    exclude: str = DEFAULT_EXCLUDE,
    encoding: str | None = None,
    tally: Counter | None = None,
    workers: int = 1,
    progress: Progress | None = None,
) -> Iterator[PageRecord | LinkRecord | InputError]:
    """Yield the pages and links of a folder of HTML files, and an InputError per bad record.

    Every PageRecord comes before any LinkRecord. Several links from a page to one target
    give one LinkRecord (weight 1, line of the first); links to other hosts or outside
    ``base_url`` are counted in ``PageRecord.external_links``. A link from a page to itself (a
    bare ``#fragment``, or the page's own URL with or without fragment or query) is no link and
    no bad record: it is counted in ``PageRecord.same_page_links`` (and in ``tally`` under
    ``"same-page links"``). A root-relative link (``href="/x"``) is resolved against ``base_url``
    per RFC 3986 (a page if it lands under it, else external); without a base URL the site's
    root is unknown, so it is left out and counted in ``tally`` under ``"root-relative links"``
    (a ``<base href>`` with a scheme still resolves it).

    Parameters
    ----------
    folder : str or path
        The wiki folder; ``*.html`` / ``*.htm`` files below it are read recursively,
        hidden folders and files skipped.
    base_url : str or None
        Absolute http(s) URL of the folder; a page's URL is this plus its relative path (None:
        unknown, the URLs are made under ``http://wiki.invalid/``). A bad one is a UsageError.
    exclude : str
        CSS selector (as cssselect translates it) of elements whose links, text and headings
        are ignored (empty: none).
    encoding : str or None
        Text encoding of the files; None detects it (byte-order mark, ``<meta charset>``).
    tally : collections.Counter or None
        Counts what is left out without being a bad record (see above).
    workers : int
        Processes parsing the files (1: this one); the records are the same, in the same order.
    progress : callable or None
        ``progress("parsing files", files parsed, files)``.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> wiki = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (wiki / "a.html").write_text('<nav><a href="c.html">c</a></nav><a href="b.html">b</a>')
    >>> [(type(r).__name__, getattr(r, "target", None)) for r in read_html_folder(wiki)]
    [('PageRecord', None), ('LinkRecord', 'b')]
    """
    site_known = base_url is not None
    base_url = check_base_url(base_url) if site_known else _NO_SITE
    if tally is not None and not isinstance(tally, Counter):
        raise TypeError(f"tally must be a collections.Counter or None, got {tally!r}")
    if not isinstance(exclude, str):
        raise TypeError(f"exclude must be a CSS selector string, got {exclude!r}")
    if exclude.strip():
        try:
            etree.XPath(HTMLTranslator().css_to_xpath(exclude))  # checked here, compiled where parsed
        except SelectorError as error:
            raise ValueError(f"exclude is not a valid CSS selector: {exclude!r} ({error})") from None
    if encoding is not None:
        check_encoding(encoding)
    check_count("workers", workers)
    return _read(folder, base_url, exclude, encoding, site_known, tally, workers, progress)


class _Context:
    """What parsing one file needs besides the file, picklable for a worker process: the parser and the
    compiled ``exclude`` selector are made where they are used."""

    def __init__(self, base_url: str, exclude: str, encoding: str | None, others: set[str], site_known: bool):
        self.base_url, self.exclude, self.encoding = base_url, exclude, encoding
        self.others, self.site_known = others, site_known
        self._tools = None

    def __getstate__(self) -> dict:
        return {**self.__dict__, "_tools": None}

    def tools(self):
        if self._tools is None:
            selector = (
                etree.XPath(HTMLTranslator().css_to_xpath(self.exclude)) if self.exclude.strip() else None
            )
            # Markup goes in as UTF-8 bytes (already decoded, so an encoding declared in it is moot).
            self._tools = (etree.HTMLParser(encoding="utf-8", huge_tree=False, collect_ids=False), selector)
        return self._tools


def _parse_file(context: _Context, relative: str, file: str) -> tuple[_Parsed | InputError, Counter]:
    """One file's page and links (or why not), and its tally (made here: a worker's own counts)."""
    tally: Counter = Counter()
    parser, selector = context.tools()
    markup = _markup(file, context.encoding)
    root = markup if isinstance(markup, InputError) else _tree(file, markup, parser)
    if isinstance(root, InputError):
        return root, tally
    others, site_known = context.others, context.site_known
    item = _parse_page(relative, file, markup, root, context.base_url, selector, others, site_known, tally)
    return item, tally


def _read(
    folder,
    base_url: str,
    exclude: str,
    encoding: str | None,
    site_known: bool,
    tally: Counter | None,
    workers: int = 1,
    progress=None,
) -> Iterator[PageRecord | LinkRecord | InputError]:
    files, pages = folder_pages(folder, _SUFFIXES, "HTML", tally)
    context = _Context(base_url, exclude, encoding, files.others if files else set(), site_known)
    aliases = files.aliases if files else {}
    parsed: list[_Parsed] = []
    for result in parse_in_order(_parse_file, context, pages, workers=workers, progress=progress):
        if isinstance(result, InputError):
            yield result
            continue
        item, counts = result
        if tally is not None:
            tally.update(counts)
        if isinstance(item, InputError):
            yield item
            continue
        parsed.append(item)
        yield item.record
    for item in parsed:
        yield from link_records(item.record.page, item.record.origin.file, item.links, aliases)

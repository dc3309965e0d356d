"""Reader for a folder of HTML pages (BeautifulSoup, CSS selectors by soupsieve).

Each ``*.html`` / ``*.htm`` file is a page; its id is its path relative to the folder
without the extension and its URL is the base URL plus that path. ``<a href>`` values are
resolved per RFC 3986 section 5.2 against ``<base href>`` if present, else the page URL;
URLs under the base URL map back to page ids, all others are external. Links inside
elements matching the ``exclude`` selector (navigation, headers, footers) are ignored.

A page's text is the text of its document outside ``<head>``, ``<script>``, ``<style>``,
``<template>``, ``<noscript>`` and the excluded elements, whitespace collapsed, at most
64 KiB of UTF-8 (cut at a character); its headings are its title and then the text of every
``<h1>``..``<h6>`` outside the excluded elements, one per line (at most 16 KiB). Every link
records its place: the elements above it from ``<body>`` (exclusive) down to its parent, each
as its tag name and its sorted class names (``div.related>ul>li``; at most four classes, each
cut to 40 name characters, others written ``_``), inline formatting elements left out, the 12
nearest at most. A link straight under ``<body>`` has the empty place.
"""

from __future__ import annotations

import gzip
import os
import re
import warnings
import zlib
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import PurePosixPath
from urllib.parse import quote

import soupsieve
from bs4 import BeautifulSoup
from bs4.dammit import EncodingDetector
from bs4.exceptions import ParserRejectedMarkup

from ..errors import InputError
from ._links import (
    EXTERNAL,
    PAGE,
    check_base_url,
    default_space,
    folder_pages,
    has_scheme,
    link_records,
    page_id_for_path,
    resolve_reference,
    url_link_target,
)
from ._text import CappedText, _open_binary, check_encoding, read_text
from .records import HEADINGS_BYTES, TEXT_BYTES, LinkRecord, Origin, PageRecord, clip_utf8

__all__ = ["read_html_folder"]

_SUFFIXES = (".html", ".htm")
# The standard library's parser, because it is the one through which BeautifulSoup keeps
# the source line of each tag (its lxml tree builder records none, and every link needs one).
_PARSER = "html.parser"
_HIDDEN = ("head", "title", "script", "style", "template", "noscript")  # no visible text
_HEADINGS = ("h1", "h2", "h3", "h4", "h5", "h6")
# Inline formatting: left out of a link's place (``<p><em><a>`` sits where ``<p><a>`` does).
_INLINE = frozenset({"span", "em", "strong", "b", "i", "code", "small", "abbr", "sup", "sub", "font"})
_TOP = frozenset({"body", "html", "[document]"})  # where a place stops (bs4 names the root "[document]")
_PLACE_DEPTH = 12  # elements of a place, the nearest to the link
_PLACE_STEPS = 64  # ancestors looked at per place: bounds the work on hostile nesting
_CLASSES = 4  # class names per element, the first in sorted order
_NAME_CHARS = 40  # of a tag or class name in a place
_NOT_NAME = re.compile(r"[^\w-]")  # characters of a class name a place does not keep


@dataclass(slots=True)
class _Parsed:
    record: PageRecord
    links: list[tuple[int | None, str, str]]  # (line, page id, place)


def _text_of(tag) -> str:
    return " ".join(tag.get_text(" ").split()) if tag is not None else ""


def _soup(file: str, encoding: str | None) -> BeautifulSoup | InputError:
    if encoding is None:
        try:
            with _open_binary(file) as stream:  # type: ignore[arg-type]
                markup: bytes | str = stream.read()
        except OSError as error:
            return InputError(file, None, f"cannot read: {error.strerror or error}")
        except (EOFError, gzip.BadGzipFile, zlib.error) as error:
            return InputError(file, None, f"compressed stream is damaged or truncated ({error})")
        markup = _decode(markup)
    else:
        try:
            markup = read_text(file, encoding)
        except InputError as error:
            return error
    try:
        with warnings.catch_warnings():
            # e.g. "looks like a file name" or "looks like XML": messy input is normal here
            warnings.simplefilter("ignore")
            return BeautifulSoup(markup, _PARSER)
    except (ParserRejectedMarkup, RecursionError) as error:
        return InputError(file, None, f"HTML could not be parsed ({error}); page skipped")


def _decode(data: bytes) -> str:
    """Text of an HTML file: byte-order mark, else ``<meta charset>``, else UTF-8, else windows-1252.

    bs4's EncodingDetector finds the first two; decoding here (rather than in bs4) keeps its
    log quiet, keeps a character-set guess from overriding valid UTF-8 and makes the last
    resort explicit: UTF-8 with replacement characters.
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


def _parse_page(
    relative: str, file: str, soup: BeautifulSoup, base_url: str, exclude, others: set[str]
) -> _Parsed:
    page = page_id_for_path(relative)
    page_url = base_url + quote(relative, safe="/")
    title = _text_of(soup.find("title")) or _text_of(soup.find("h1")) or PurePosixPath(relative).stem
    document_base = page_url
    base = soup.find("base", href=True)
    if base is not None:
        document_base = resolve_reference(page_url, _clean(str(base["href"])))
        if not has_scheme(document_base):
            document_base = page_url
    for element in exclude.select(soup):
        if not element.decomposed:
            element.decompose()
    links: list[tuple[int | None, str, str]] = []
    external: set[str] = set()
    places: dict[int, str] = {}  # id of a parent element -> its place (links often share one)
    for anchor in soup.find_all("a", href=True):
        href = _clean(str(anchor["href"]))
        if href == "" or href.startswith("#") or href[:11].lower() == "javascript:":
            continue  # an in-page jump or a script, neither a link nor counted
        kind, value = url_link_target(resolve_reference(document_base, href), base_url, others)
        if kind == PAGE:
            parent = anchor.parent
            place = places.get(id(parent))
            if place is None:
                place = places[id(parent)] = _place(parent)
            links.append((anchor.sourceline, value, place))
        elif kind == EXTERNAL:
            external.add(value.partition("#")[0])
        # NOT_A_PAGE (an image, a PDF of the folder) is dropped
    text, headings = _text_and_headings(soup)
    record = PageRecord(
        page=page,
        title=title,
        origin=Origin(file, None),
        space=default_space(page),
        url=page_url,
        external_links=len(external),
        text=text,
        headings=clip_utf8(title + ("\n" + headings if headings else ""), HEADINGS_BYTES),
    )
    return _Parsed(record, links)


def _text_and_headings(soup: BeautifulSoup) -> tuple[str, str]:
    """Visible text (whitespace collapsed) and headings (one per line) of a page; changes ``soup``."""
    for element in soup.find_all(_HIDDEN):
        if not element.decomposed:
            element.decompose()
    headings = CappedText(HEADINGS_BYTES, "\n")
    for heading in soup.find_all(_HEADINGS):
        if headings.full:
            break
        headings.add(heading.get_text(" "))
    text = CappedText(TEXT_BYTES)
    for piece in soup.strings:
        if text.full:
            break
        text.add(piece)
    return text.text(), headings.text()


def _place(element) -> str:
    """The elements from ``<body>`` (exclusive) down to ``element``, nearest last: ``div.footer>p``."""
    names: list[str] = []
    for _ in range(_PLACE_STEPS):
        if element is None or element.name in _TOP or len(names) == _PLACE_DEPTH:
            break
        if element.name not in _INLINE:
            names.append(_element_name(element))
        element = element.parent
    return ">".join(reversed(names))


def _element_name(element) -> str:
    """Tag name and sorted class names joined by dots; never an id, a position or text."""
    classes = element.get("class") or ()
    if isinstance(classes, str):
        classes = classes.split()
    kept = sorted({_NOT_NAME.sub("_", name[:_NAME_CHARS]) for name in classes[: 8 * _CLASSES]})
    return ".".join([_NOT_NAME.sub("_", element.name[:_NAME_CHARS]), *kept[:_CLASSES]])


def _clean(href: str) -> str:
    """An attribute value as a URL parser reads it: outer whitespace, tabs and newlines removed."""
    return href.strip(" \t\n\r\f").replace("\t", "").replace("\n", "").replace("\r", "")


def read_html_folder(
    folder: str | os.PathLike[str],
    *,
    base_url: str = "http://wiki.invalid/",
    exclude: str = "nav, header, footer, [role=navigation]",
    encoding: str | None = None,
) -> Iterator[PageRecord | LinkRecord | InputError]:
    """Yield the pages and links of a folder of HTML files, and an InputError per bad record.

    Every PageRecord comes before any LinkRecord. A link from a page to itself (other than
    a bare ``#fragment``) becomes an InputError; several links from a page to one target
    give one LinkRecord (weight 1, line of the first); links to other hosts or outside
    ``base_url`` are counted in ``PageRecord.external_links``.

    Parameters
    ----------
    folder : str or path
        The wiki folder; ``*.html`` / ``*.htm`` files below it are read recursively,
        hidden folders and files skipped.
    base_url : str
        Absolute http(s) URL of the folder; a page's URL is this plus its relative path.
    exclude : str
        CSS selector of elements whose links are ignored (empty: none).
    encoding : str or None
        Text encoding of the files; None detects it (byte-order mark, ``<meta charset>``).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> wiki = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (wiki / "a.html").write_text('<nav><a href="c.html">c</a></nav><a href="b.html">b</a>')
    >>> [(type(r).__name__, getattr(r, "target", None)) for r in read_html_folder(wiki)]
    [('PageRecord', None), ('LinkRecord', 'b')]
    """
    base_url = check_base_url(base_url)
    if not isinstance(exclude, str):
        raise TypeError(f"exclude must be a CSS selector string, got {exclude!r}")
    try:
        selector = soupsieve.compile(exclude.strip() or ":not(*)")
    except soupsieve.SelectorSyntaxError as error:
        raise ValueError(
            f"exclude is not a valid CSS selector: {exclude!r} ({str(error).splitlines()[0]})"
        ) from None
    if encoding is not None:
        check_encoding(encoding)
    return _read(folder, base_url, selector, encoding)


def _read(
    folder, base_url: str, selector, encoding: str | None
) -> Iterator[PageRecord | LinkRecord | InputError]:
    files, pages = folder_pages(folder, _SUFFIXES, "HTML")
    parsed: list[_Parsed] = []
    for entry in pages:
        if isinstance(entry, InputError):
            yield entry
            continue
        relative, file = entry
        soup = _soup(file, encoding)
        if isinstance(soup, InputError):
            yield soup
            continue
        item = _parse_page(relative, file, soup, base_url, selector, files.others)
        parsed.append(item)
        yield item.record
    for item in parsed:
        yield from link_records(item.record.page, item.record.origin.file, item.links)

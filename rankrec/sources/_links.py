"""What the folder readers share: finding page files, page ids, and where a link points.

A page id is the path of its file relative to the wiki folder, with POSIX separators and
without the page extension (``ops/runbooks/db.md`` -> ``ops/runbooks/db``). A link is
resolved to a page id, or found to be external, an in-page jump or outside the wiki.
URL references are resolved per RFC 3986 section 5.2 (:func:`resolve_reference`).
"""

from __future__ import annotations

import os
import re
from collections import Counter
from collections.abc import Collection, Iterable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from urllib.parse import unquote, urljoin, urlsplit

from .._validation import quoted
from ..errors import InputError, UsageError
from ._text import file_type_problem
from .records import LinkRecord, Origin

PAGE_SUFFIXES = (".md", ".markdown", ".html", ".htm")
"""Extensions removed from a link path to give a page id (case-insensitive)."""

# Where a link points (the first item of the pair the resolvers return).
PAGE = "page"  # a wiki page: the second item is its id
EXTERNAL = "external"  # outside the wiki: counted on the page, not kept
JUMP = "jump"  # an in-page jump, an empty link or a script: neither a link nor counted
OUTSIDE = "outside"  # a relative path that climbs above the wiki folder: an InputError
NOT_A_PAGE = "not-a-page"  # another file of the folder (an image, a PDF): dropped

# What the folder readers count in a ``tally`` (a Counter) without it being a bad record.
SAME_PAGE = "same-page links"  # a page's links to itself: section anchors, its own file
ALIASES = "page aliases"  # page files that are symbolic links to other page files of the folder
ROOT_RELATIVE = "root-relative links"  # HTML ``href="/x"`` read without a base URL: left out

_HEADING_CHARS = 80  # of a heading's text in a Markdown place
_HEADING_READ = 4 * _HEADING_CHARS  # characters of a heading looked at (a heading may be long)

# RFC 3986 section 3.1: scheme = ALPHA *( ALPHA / DIGIT / "+" / "-" / "." ) followed by ":".
_SCHEME = re.compile(r"[A-Za-z][A-Za-z0-9+.\-]*:")
# RFC 3986 appendix B: the regular expression that splits a URI reference into its five parts.
# A host and port without a scheme ("docs.example.org:8080/x", "localhost:8000"), which RFC 3986 would
# read as the scheme "docs.example.org" or "localhost" followed by a path: a missing scheme in practice.
_HOST_AND_PORT = re.compile(r"[A-Za-z0-9.\-]+:[0-9]+(?:[/?#]|$)")
_URI_PARTS = re.compile(r"^(([^:/?#]+):)?(//([^/?#]*))?([^?#]*)(\?([^#]*))?(#(.*))?")


@dataclass(slots=True)
class FolderFiles:
    """Page files of a wiki folder (in sorted order), the other files it holds, and refused page files."""

    pages: list[tuple[str, str]] = field(default_factory=list)  # (relative POSIX path, file name)
    others: set[str] = field(default_factory=set)  # relative POSIX paths of non-page files
    refused: list[tuple[str, InputError]] = field(default_factory=list)  # (relative path, why)
    aliases: dict[str, str] = field(default_factory=dict)  # page id of a link to a page file -> its page id


def walk_folder(folder: str | os.PathLike[str], suffixes: tuple[str, ...]) -> FolderFiles:
    """Files below ``folder`` (recursively, hidden folders and files skipped), sorted by path.

    A file is a page when its name ends with one of ``suffixes`` (case-insensitive).
    The file name given for a page is ``folder`` as given joined with the relative path.
    A page file is refused (with the reason, in ``refused``) when it is a symbolic link whose
    real path lies outside the folder, or is not a regular file (a FIFO, a device, a socket,
    a folder; POSIX file types), or cannot be looked at. Symbolic links to folders are not
    followed (so the walk cannot loop); links to files inside the folder are. A symbolic link to another
    page file of the folder is no page of its own but an alias (``aliases``): generated sites link
    ``index.html`` to their contents page, and two pages of one text would crowd each other's lists.
    """
    found = FolderFiles()
    root = os.fspath(folder)
    real_root = os.path.realpath(root)
    for directory, subfolders, files in os.walk(root, followlinks=False):
        subfolders[:] = sorted(name for name in subfolders if not name.startswith("."))
        relative_dir = os.path.relpath(directory, root)
        prefix = "" if relative_dir == "." else Path(relative_dir).as_posix() + "/"
        for name in sorted(files):
            if name.startswith("."):
                continue
            relative, file = prefix + name, os.path.join(directory, name)
            if not name.lower().endswith(suffixes):
                found.others.add(relative)
                continue
            problem = page_file_problem(file, real_root)
            if problem is None:
                found.pages.append((relative, file))
            else:
                found.refused.append((relative, InputError(file, None, f"{problem}; file skipped")))
    found.pages.sort()
    found.refused.sort(key=lambda item: item[0])
    _fold_aliases(found, real_root)
    return found


def _fold_aliases(found: FolderFiles, real_root: str) -> None:
    """Move the page files that are symbolic links to another listed page file (not itself a link) from
    ``pages`` to ``aliases``, by page id."""
    links = [(relative, file) for relative, file in found.pages if os.path.islink(file)]
    if not links:
        return
    plain = {relative for relative, file in found.pages if not os.path.islink(file)}
    for relative, file in links:
        target = Path(os.path.relpath(os.path.realpath(file), real_root)).as_posix()
        if target in plain and page_id_for_path(target) != page_id_for_path(relative):
            found.aliases[page_id_for_path(relative)] = page_id_for_path(target)
    if found.aliases:
        found.pages = [item for item in found.pages if page_id_for_path(item[0]) not in found.aliases]


def page_file_problem(file: str, real_root: str) -> str | None:
    """Why the page file ``file`` of the folder whose real path is ``real_root`` is not read, or None.

    A symbolic link must lead to a path inside the folder (checked on the real path, so a chain
    of links or a ``..`` in one counts by where it ends); the file must be a regular file.
    """
    if os.path.islink(file):
        real = os.path.realpath(file)
        if not _inside(real, real_root):
            shown = real if len(real) <= 80 else "..." + real[-77:]
            return f"symbolic link leads outside the wiki folder (to {shown})"
    try:
        mode = os.stat(file).st_mode
    except OSError as error:  # a broken link, a loop of links, no permission
        return f"cannot open: {error.strerror or error}"
    return file_type_problem(mode)


def _inside(path: str, root: str) -> bool:
    try:
        return os.path.commonpath([path, root]) == root
    except ValueError:  # different drives (Windows)
        return False


def page_id_for_path(path: str) -> str:
    """Page id of a decoded POSIX path relative to the wiki root.

    >>> page_id_for_path("ops/runbooks/db.md"), page_id_for_path("ops/"), page_id_for_path("a.b")
    ('ops/runbooks/db', 'ops/index', 'a.b')
    """
    if path == "" or path.endswith("/"):
        return path + "index"
    lowered = path.lower()
    for suffix in PAGE_SUFFIXES:
        if lowered.endswith(suffix) and len(path) > len(suffix) and path[-len(suffix) - 1] != "/":
            return path[: -len(suffix)]
    return path


def default_space(page: str) -> str | None:
    """The first folder of a page id, or None for a top-level page."""
    head, slash, _ = page.partition("/")
    return head if slash else None


def has_scheme(url: str) -> bool:
    """True if ``url`` starts with a URI scheme (``https:``, ``mailto:`` ...)."""
    return _SCHEME.match(url) is not None


def _is_script(url: str) -> bool:
    return url[:11].lower() == "javascript:"


def remove_dot_segments(path: str) -> str:
    """Remove ``.`` and ``..`` segments as RFC 3986 section 5.2.4 does.

    >>> remove_dot_segments("/a/b/c/./../../g"), remove_dot_segments("mid/content=5/../6")
    ('/a/g', 'mid/6')
    """
    output: list[str] = []
    while path:
        if path.startswith("../"):
            path = path[3:]
        elif path.startswith(("./", "/./")):
            path = path[2:]
        elif path == "/.":
            path = "/"
        elif path.startswith("/../") or path == "/..":
            path = "/" + path[4:]
            if output:
                output.pop()
        elif path in (".", ".."):
            path = ""
        else:
            start = 1 if path.startswith("/") else 0
            end = path.find("/", start)
            end = len(path) if end < 0 else end
            output.append(path[:end])
            path = path[end:]
    return "".join(output)


def resolve_reference(base: str, reference: str) -> str:
    """Target URI of ``reference`` against the absolute URI ``base`` (RFC 3986 section 5.2).

    :func:`urllib.parse.urljoin` follows RFC 3986 for every example of its section 5.4
    except one: it reads ``http:g`` against an ``http`` base as the relative ``g`` (the
    "backward compatibility" reading the RFC allows), where a strict parser keeps
    ``http:g``. A reference with a scheme is therefore handled here (section 5.2.2: its
    own path with dot segments removed) and urljoin does the rest.

    >>> resolve_reference("http://a/b/c/d;p?q", "../g"), resolve_reference("http://a/b/c/d;p?q", "http:g")
    ('http://a/b/g', 'http:g')
    """
    parts = _URI_PARTS.match(reference)
    if parts is None or parts.group(2) is None or not has_scheme(reference):
        return urljoin(base, reference)
    scheme, authority, path, query, fragment = parts.group(2, 3, 5, 6, 8)
    return scheme + ":" + (authority or "") + remove_dot_segments(path) + (query or "") + (fragment or "")


def relative_link_target(page: str, href: str, others: Collection[str] = frozenset()) -> tuple[str, str]:
    """Where a Markdown link ``href`` on page ``page`` points, as ``(kind, value)``.

    A URL with a scheme or starting ``//`` is EXTERNAL; a bare ``#fragment`` (or an empty
    link) is a JUMP; anything else is a path relative to the page's folder (``/x`` to the
    wiki root), percent-decoded, with query and fragment dropped and a page extension
    removed: a PAGE (value = page id), OUTSIDE if it climbs above the wiki root, or
    NOT_A_PAGE if it names a file in ``others`` (relative paths of non-page files).

    >>> relative_link_target("ops/runbooks/db", "../net/dns.md#top")
    ('page', 'ops/net/dns')
    """
    href = href.strip()
    if href == "" or href.startswith("#") or _is_script(href):
        return JUMP, href
    if has_scheme(href) or href.startswith("//"):
        return EXTERNAL, href
    path = href.split("#", 1)[0].split("?", 1)[0]
    if path == "":  # only a query: the page itself
        return PAGE, page
    segments = [] if path.startswith("/") else page.split("/")[:-1]
    pieces = path.split("/")
    last = len(pieces) - 1
    for number, piece in enumerate(pieces):
        segment = unquote(piece)  # %2E%2E is a dot segment too (RFC 3986 section 6.2.2.2)
        if segment == "..":
            if not segments:
                return OUTSIDE, href
            segments.pop()
        elif segment not in ("", "."):
            segments.append(segment)
            continue
        if number == last:  # a path ending in "/", "." or ".." names a folder
            segments.append("")
    relative = "/".join(segments)
    if relative in others:
        return NOT_A_PAGE, relative
    return PAGE, page_id_for_path(relative)


def check_base_url(base_url: str, *, name: str = "base_url") -> str:
    """``base_url`` ending with ``/``, or UsageError (a ValueError) unless it is an absolute http(s) URL.

    The message names the option ``name`` (``--base-url`` on the command line) and says what is
    wrong: no scheme (RFC 3986 section 4.3: an absolute URI starts with one), a scheme other than
    http or https (a ``file:`` URL names no address the pages are served at), no host, a query
    or a fragment. Nothing is read or written before this check.

    >>> check_base_url("https://docs.example.invalid/guide")
    'https://docs.example.invalid/guide/'
    >>> check_base_url("docs.example.invalid/guide", name="--base-url")  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    rankrec.errors.UsageError: --base-url 'docs.example.invalid/guide' has no scheme; ...
    """
    if not isinstance(base_url, str):
        raise TypeError(f"{name} must be a string, got {base_url!r}")
    problem = _base_url_problem(base_url)
    if problem is not None:
        raise UsageError(f"{name} {quoted(base_url)} {problem}")
    return base_url if base_url.endswith("/") else base_url + "/"


def _base_url_problem(base_url: str) -> str | None:
    """Why ``base_url`` is not an absolute http(s) URL without query and fragment, or None."""
    wanted = "give the http(s) address the folder is served at, such as 'https://docs.example.org/guide/'"
    if not has_scheme(base_url) or _HOST_AND_PORT.match(base_url):
        return f"has no scheme; {wanted}"
    try:
        parts = urlsplit(base_url)
    except ValueError as error:  # e.g. a bad IPv6 literal
        return f"is not a URL ({error}); {wanted}"
    scheme = parts.scheme.lower()
    if scheme not in ("http", "https"):
        return f"is a {scheme}: URL, not an address pages are served at; {wanted}"
    if not parts.netloc:
        return f"has no host; {wanted}"
    if parts.query or parts.fragment:
        return "must not hold a query (?...) or fragment (#...): pages' URLs are made by adding their paths"
    return None


def is_root_relative(href: str) -> bool:
    """True for a root-relative reference: a path starting with one ``/`` (RFC 3986 section 4.2
    calls it an absolute-path reference; ``//host`` is a network-path reference, not one of these).

    >>> is_root_relative("/bugs.html"), is_root_relative("//cdn.example/x"), is_root_relative("a/b")
    (True, False, False)
    """
    return href.startswith("/") and not href.startswith("//")


def _authority(scheme: str, netloc: str) -> str:
    netloc = netloc.lower().rpartition("@")[2]
    default = {"http": ":80", "https": ":443"}.get(scheme)
    if default and netloc.endswith(default):
        netloc = netloc[: -len(default)]
    return netloc


def url_link_target(url: str, base_url: str, others: Collection[str] = frozenset()) -> tuple[str, str]:
    """Where an absolute ``url`` points: a PAGE if it lies under ``base_url``, else EXTERNAL.

    Same host (scheme http or https, default port ignored) and a path under the base
    URL's path map to a page id (percent-decoded, query and fragment dropped, extension
    removed); a non-page file of the folder (``others``) is NOT_A_PAGE.

    >>> url_link_target("http://wiki.invalid/ops/db.html?x=1", "http://wiki.invalid/")
    ('page', 'ops/db')
    """
    parts = urlsplit(url)
    base = urlsplit(base_url)
    scheme = parts.scheme.lower()
    path = parts.path or "/"
    if (
        scheme not in ("http", "https")
        or _authority(scheme, parts.netloc) != _authority(base.scheme.lower(), base.netloc)
        or not path.startswith(base.path)
    ):
        return EXTERNAL, url
    relative = "/".join(unquote(piece) for piece in path[len(base.path) :].split("/"))
    if relative in others:
        return NOT_A_PAGE, relative
    return PAGE, page_id_for_path(relative)


def link_records(
    source: str,
    file: str,
    targets: Iterable[tuple[int | None, str, str]],
    aliases: dict[str, str] | None = None,
) -> Iterator[LinkRecord | InputError]:
    """One LinkRecord per distinct target of page ``source``, self-links as InputErrors.

    ``targets`` are ``(line, target, place)`` per link occurrence, in document order; a target that is
    an alias (:attr:`FolderFiles.aliases`) stands for the page it leads to. A record has the line of
    the target's first occurrence and every place it occurs in, with how often (first occurrence first).
    """
    lines: dict[str, int | None] = {}
    places: dict[str, dict[str, int]] = {}
    for line, target, place in targets:
        if aliases:
            target = aliases.get(target, target)
        counts = places.get(target)
        if counts is None:
            lines[target] = line
            places[target] = counts = {}
        counts[place] = counts.get(place, 0) + 1
    for target, line in lines.items():
        if target == source:
            yield InputError(file, line, f"self-link to {target!r} dropped")
            continue
        found = tuple(places[target].items())
        yield LinkRecord(source, target, Origin(file, line), place=found[0][0], places=found)


def heading_key(heading: str) -> str:
    """A heading as a place names it: lowercase, whitespace collapsed, at most 80 characters.

    >>> heading_key("  See   Also ")
    'see also'
    """
    return " ".join(heading[:_HEADING_READ].split()).lower()[:_HEADING_CHARS].rstrip()


def duplicate_error(file: str, page: str, first_file: str) -> InputError:
    """The InputError for a second file that would give page id ``page``."""
    return InputError(file, None, f"page id {page!r} is already taken by {first_file}; file skipped")


def folder_pages(
    folder: str | os.PathLike[str], suffixes: tuple[str, ...], what: str, tally: Counter | None = None
) -> tuple[FolderFiles | None, Iterator[tuple[str, str] | InputError]]:
    """The files of a wiki folder and its pages as ``(relative path, file)``, one per page id; the
    folder's aliases (:attr:`FolderFiles.aliases`) counted in ``tally`` under :data:`ALIASES`.

    Yields an InputError instead of a page for a missing folder, for a page file refused by
    :func:`walk_folder` (a link leaving the folder, not a regular file), for a second file
    giving a page id already taken, and (at the end) for a folder without pages. Readers read
    each page with :func:`rankrec.sources._text.read_text` or
    :func:`~rankrec.sources._text.read_page_bytes`, which check the kind of file again (it may
    have changed since the walk) and cap its size.
    """
    problem = folder_error(folder, what)
    if problem is not None:
        return None, iter([problem])
    files = walk_folder(folder, suffixes)
    if tally is not None and files.aliases:
        tally[ALIASES] += len(files.aliases)

    def pages() -> Iterator[tuple[str, str] | InputError]:
        first_file: dict[str, str] = {}
        for relative, entry in sorted([*files.pages, *files.refused], key=lambda item: item[0]):
            if isinstance(entry, InputError):
                yield entry
                continue
            file = entry
            page = page_id_for_path(relative)
            if page in first_file:
                yield duplicate_error(file, page, first_file[page])
                continue
            first_file[page] = file
            yield relative, file
        if not first_file:
            patterns = ", ".join(f"*{suffix}" for suffix in suffixes)
            yield InputError(os.fspath(folder), None, f"folder holds no {what} pages ({patterns})")

    return files, pages()


def folder_error(folder: str | os.PathLike[str], what: str) -> InputError | None:
    """An InputError if ``folder`` is missing or not a folder, else None."""
    name = os.fspath(folder)
    if not os.path.exists(name):
        return InputError(name, None, f"{what} folder does not exist")
    if not os.path.isdir(name):
        return InputError(name, None, f"{what} folder is not a folder")
    return None

"""Readers, one per input format, and the choice of reader for a path.

Each reader yields :mod:`records <rankrec.sources.records>` with their provenance, or
:class:`~rankrec.errors.InputError` values for the records it skips; none of them touches the
store or the graph. :func:`check_view` checks one view event as the views reader does (the
service takes views in through it); :func:`parse_timestamp` reads a time as every reader does;
:func:`check_id` is the one bound on page, user, team and group ids that every entry point applies;
:func:`check_base_url` checks an HTML folder's base URL before anything is read or written.
"""

from __future__ import annotations

import re
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from .._validation import ID_MAX_CHARS, check_id
from ..errors import InputError, UsageError
from ._fields import FieldError, parse_timestamp
from ._links import ALIASES, ROOT_RELATIVE, SAME_PAGE, check_base_url
from ._parallel import PARSING
from ._site_shape import SiteShape, shape_site
from ._site_spaces import SPACE_MODES
from ._text import iter_lines
from ._titles import TitleAffixes, detect_title_affixes
from .records import Origin, Record, ViewRecord
from .views import check_view

__all__ = [
    "ALIASES",
    "FORMATS",
    "ID_MAX_CHARS",
    "ROOT_RELATIVE",
    "SAME_PAGE",
    "FieldError",
    "Origin",
    "PARSING",
    "Record",
    "SPACE_MODES",
    "SiteShape",
    "TitleAffixes",
    "ViewRecord",
    "check_base_url",
    "check_id",
    "check_view",
    "detect_format",
    "detect_title_affixes",
    "parse_timestamp",
    "read_source",
    "shape_site",
]

FORMATS = ("markdown", "html", "edges", "pages", "views", "access-log", "teams", "groups")

_LOG_LINE = re.compile(r'^\S+ \S+ \S+ \[[^\]]+\] "')
_MARKDOWN = {".md", ".markdown"}
_HTML = {".html", ".htm"}


def detect_format(path: str | Path) -> str:
    """Guess the format of ``path`` from what it is, its name and its first line.

    Folders are Markdown or HTML by the files they hold; files are recognised by a log line,
    a JSON object's keys, or a CSV header; anything else with two or three columns is an
    edge list. Raises InputError when nothing fits.
    """
    path = Path(path)
    if path.is_dir():
        return _detect_folder(path)
    if not path.exists():
        raise InputError(str(path), None, "no such file or folder")
    name = path.name.lower().removesuffix(".gz")
    if name.endswith(".log") or "access" in name:
        return "access-log"
    first = _first_line(path)
    if _LOG_LINE.match(first):
        return "access-log"
    if first.startswith("{"):
        keys = set(re.findall(r'"([A-Za-z_]+)"\s*:', first))
        if {"user", "page"} <= keys:
            return "views"
        if "id" in keys:
            return "pages"
        raise InputError(str(path), 1, "JSON Lines file is neither view events nor a page export")
    fields = [field.strip().strip('"').lower() for field in re.split(r"[,\t]", first)]
    if {"user", "page", "timestamp"} <= set(fields):
        return "views"
    if fields == ["user", "team"] or (len(fields) == 2 and "team" in name):
        return "teams"
    if fields == ["user", "group"] or (len(fields) == 2 and "group" in name):
        return "groups"
    if "id" in fields:
        return "pages"
    return "edges"


def _detect_folder(path: Path) -> str:
    """Markdown or HTML by the page files of the first 5,000 files below ``path`` (hidden ones left out,
    as the readers leave them out); a folder holding both kinds is a UsageError naming one of each."""
    found: dict[str, list[str]] = {"markdown": [], "html": []}
    for index, file in enumerate(path.rglob("*")):
        relative = file.relative_to(path)
        if any(part.startswith(".") for part in relative.parts):
            continue
        suffix = file.suffix.lower()
        kind = "markdown" if suffix in _MARKDOWN else "html" if suffix in _HTML else None
        if kind is not None:
            found[kind].append(relative.as_posix())
        if index > 5000 and (found["markdown"] or found["html"]):
            break
    markdown, html = found["markdown"], found["html"]
    if markdown and html:
        raise UsageError(
            f"{path} holds both Markdown pages ({len(markdown):,} files such as {markdown[0]}) and HTML "
            f"pages ({len(html):,} files such as {html[0]}); give --format markdown or --format html to "
            "say which to read (the other kind is then left out)"
        )
    if not (markdown or html):
        raise InputError(str(path), None, "folder holds no Markdown (.md) or HTML (.html) pages")
    return "markdown" if markdown else "html"


def _first_line(path: Path) -> str:
    for item in iter_lines(path):
        if isinstance(item, InputError):
            raise item
        text = item[1].strip()
        if text and not text.startswith("#"):
            return text
    raise InputError(str(path), None, "file holds no records")


def read_source(path: str | Path, format: str, **options: Any) -> Iterator[Record | InputError]:
    """Records of ``path`` read as ``format``; ``options`` that the reader does not take are ignored.

    Options: ``encoding`` (all), ``base_url`` and ``exclude`` (html), ``page_pattern`` and
    ``anonymous`` (access-log), ``now`` (views, access-log; Unix seconds, for tests), ``tally``
    (markdown, html, access-log: a Counter of what is left out without being a bad record, such as
    :data:`SAME_PAGE` and :data:`ROOT_RELATIVE` links), ``workers`` and ``progress`` (markdown, html:
    processes parsing the files, and ``progress("parsing files", files parsed, files)``).
    """
    if format not in FORMATS:
        raise ValueError(f"format must be one of {', '.join(FORMATS)}; got {format!r}")
    given = {key: value for key, value in options.items() if value is not None}
    if format == "markdown":
        from .markdown import read_markdown_folder

        return read_markdown_folder(path, **_pick(given, "encoding", "tally", "workers", "progress"))
    if format == "html":
        from .html import read_html_folder

        picked = _pick(given, "encoding", "base_url", "exclude", "tally", "workers", "progress")
        return read_html_folder(path, **picked)
    if format == "edges":  # runs of rows (EdgeRows), not a record per row
        from .edges import read_edge_rows

        return read_edge_rows(path, **_pick(given, "encoding"))
    if format == "pages":
        from .pages import read_page_export

        return read_page_export(path, **_pick(given, "encoding"))
    if format == "views":  # runs of rows (ViewRows), as for edges
        from .views import read_view_rows

        return read_view_rows(path, **_pick(given, "encoding", "now"))
    if format == "access-log":
        from .access_log import read_access_log

        return read_access_log(path, **_pick(given, "encoding", "now", "page_pattern", "anonymous", "tally"))
    from .membership import read_memberships

    return read_memberships(path, "team" if format == "teams" else "group", **_pick(given, "encoding"))


def _pick(options: dict[str, Any], *names: str) -> dict[str, Any]:
    return {name: options[name] for name in names if name in options}

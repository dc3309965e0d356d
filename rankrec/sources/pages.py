"""Reader for page exports: CSV with a header row, or JSON Lines, one page per row."""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from pathlib import Path

from ..errors import InputError
from ._fields import (
    FieldError,
    iter_mappings,
    parse_bool,
    parse_id,
    parse_list,
    parse_optional_text,
)
from ._text import CappedText, check_encoding
from .records import HEADINGS_BYTES, TEXT_BYTES, Origin, PageRecord, clip_utf8

OPTIONAL_COLUMNS = ("title", "space", "tags", "groups", "archived", "url", "text")
_COMPARED = ("title", "space", "tags", "groups", "archived", "url", "text")


def read_page_export(path: str | Path, *, encoding: str = "utf-8") -> Iterator[PageRecord | InputError]:
    """Yield a PageRecord per page of a page export, or InputErrors for bad rows.

    JSON Lines when the name ends ``.jsonl``/``.ndjson`` (optionally ``.gz``) or the first
    non-blank character is ``{``; otherwise CSV whose header has ``id`` and any of
    ``title, space, tags, groups, archived, url, text`` (other columns and JSON keys are
    ignored). ``tags``/``groups`` are ``;``-separated in CSV and lists (or ``;``-strings) in
    JSON; ``archived`` is true/false/1/0/yes/no, empty = false. A missing or empty title is
    the id; an empty space or url is None. ``text`` is the page's plain text: whitespace is
    collapsed and at most 64 KiB of UTF-8 kept (cut at a character); a page's headings are
    its title (a quoted CSV field spans at most 100 lines: JSON Lines suit long text). A page
    id repeated with the same fields is yielded once; repeated with other fields it is an
    InputError naming the first line.

    Examples
    --------
    >>> import tempfile, os
    >>> with tempfile.NamedTemporaryFile("w", suffix=".jsonl", delete=False) as f:
    ...     _ = f.write('{"id": "ops/db", "title": "Database", "tags": ["sql", "ops"]}\\n')
    >>> next(read_page_export(f.name)).tags
    ('sql', 'ops')
    >>> os.unlink(f.name)
    """
    check_encoding(encoding)
    return _read(path, encoding)


def _read(path: str | Path, encoding: str) -> Iterator[PageRecord | InputError]:
    name = str(path)
    seen: dict[str, PageRecord] = {}
    for item in iter_mappings(path, encoding, ("id",), OPTIONAL_COLUMNS):
        if isinstance(item, InputError):
            yield item
            continue
        number, row = item
        try:
            page = _page(row, Origin(name, number))
        except FieldError as error:
            yield InputError(name, number, str(error))
            continue
        first = seen.setdefault(page.page, page)
        if first is page:
            yield page
            continue
        differing = [field for field in _COMPARED if getattr(first, field) != getattr(page, field)]
        if differing:
            yield InputError(
                name,
                number,
                f"page id {page.page!r} appears again with a different {', '.join(differing)} "
                f"(first on line {first.origin.line})",
            )


def _page(row: Mapping[str, object], origin: Origin) -> PageRecord:
    page = parse_id(row.get("id"), "page id")
    title = parse_optional_text(row.get("title"), "title") or page
    text = CappedText(TEXT_BYTES)
    text.add(parse_optional_text(row.get("text"), "text") or "")
    return PageRecord(
        page=page,
        title=title,
        origin=origin,
        space=parse_optional_text(row.get("space"), "space"),
        tags=parse_list(row.get("tags"), "tags"),
        groups=parse_list(row.get("groups"), "groups"),
        archived=parse_bool(row.get("archived"), "archived"),
        url=parse_optional_text(row.get("url"), "url"),
        text=text.text(),
        headings=clip_utf8(" ".join(title.split()), HEADINGS_BYTES),
    )

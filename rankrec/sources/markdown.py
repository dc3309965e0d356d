"""Reader for a folder of Markdown pages (CommonMark, parsed with markdown-it-py).

Each ``*.md`` / ``*.markdown`` file is a page; its id is its path relative to the folder
without the extension. Links are taken from the parsed document, so a link in a code span
or code block never counts, reference definitions work and images are not links.
Double-bracket wiki links (``[[Target]]``, ``[[Target#Section|shown]]``) are an inline
rule of the same parser. YAML front matter gives title, space, tags, groups, archived.
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from dataclasses import dataclass
from functools import lru_cache
from pathlib import PurePosixPath
from typing import Any

import yaml
from markdown_it import MarkdownIt
from markdown_it.rules_inline import StateInline
from markdown_it.rules_inline import link as _commonmark_link

from ..errors import InputError
from ._links import (
    EXTERNAL,
    OUTSIDE,
    PAGE,
    default_space,
    folder_pages,
    link_records,
    page_id_for_path,
    relative_link_target,
)
from ._text import check_encoding, read_text
from .records import LinkRecord, Origin, PageRecord

__all__ = ["read_markdown_folder"]

_SUFFIXES = (".md", ".markdown")
_LOADER = getattr(yaml, "CSafeLoader", yaml.SafeLoader)
_WIKI = "wiki"  # kind of a link whose target is resolved once every title is known


# ----------------------------------------------------------------------------- parser


def _link_with_offset(state: StateInline, silent: bool) -> bool:
    """CommonMark's link rule, noting where in the inline text the link starts."""
    start, count = state.pos, len(state.tokens)
    if not _commonmark_link(state, silent):
        return False
    if not silent:
        for token in state.tokens[count:]:
            if token.type == "link_open":
                token.meta["offset"] = start
                break
    return True


def _wikilink(state: StateInline, silent: bool) -> bool:
    """``[[Target]]``, ``[[Target|shown]]``, ``[[Target#Section|shown]]`` on one line."""
    start = state.pos
    source = state.src
    if not source.startswith("[[", start):
        return False
    end = source.find("]]", start + 2, state.posMax)
    if end < 0:
        return False
    inner = source[start + 2 : end]
    if not inner.strip() or "[" in inner or "]" in inner or "\n" in inner:
        return False
    if not silent:
        target, _, shown = inner.partition("|")
        token = state.push("wikilink", "", 0)
        token.content = (shown or target).strip()
        token.meta = {"target": target.partition("#")[0].strip(), "offset": start}
    state.pos = end + 2
    return True


@lru_cache(maxsize=1)
def _parser() -> MarkdownIt:
    """One CommonMark parser (plus tables, strikethrough and wiki links), made once."""
    parser = MarkdownIt("commonmark").enable(["table", "strikethrough"])
    parser.validateLink = lambda url: True  # keep javascript: etc.; they are sorted out later
    parser.inline.ruler.at("link", _link_with_offset)
    parser.inline.ruler.before("link", "wikilink", _wikilink)
    return parser


# ----------------------------------------------------------------------- front matter


class _FieldError(Exception):
    def __init__(self, key: str, reason: str) -> None:
        self.key = key
        self.reason = reason


def _split_front_matter(text: str) -> tuple[str | None, int]:
    """YAML text of the front matter and the number of lines it takes (0 if none).

    Raises ValueError if the front matter is opened but never closed.
    """
    if not (text.startswith("---\n") or text == "---"):
        return None, 0
    lines = text.split("\n")
    for number in range(1, len(lines)):
        if lines[number].rstrip() in ("---", "..."):
            return "\n".join(lines[1:number]), number + 1
    raise ValueError("front matter opened by '---' on line 1 is never closed by '---' or '...'")


def _key_line(yaml_text: str, key: str) -> int | None:
    """0-based line of ``key`` in the front matter mapping, if it can be found."""
    try:
        node = yaml.compose(yaml_text, Loader=_LOADER)
    except Exception:  # only used to place an error; the error itself is already known
        return None
    for key_node, _value in getattr(node, "value", ()):
        if getattr(key_node, "value", None) == key:
            return key_node.start_mark.line
    return None


def _string(meta: dict[Any, Any], key: str) -> str | None:
    value = meta.get(key)
    if value is None or isinstance(value, str):
        return value
    raise _FieldError(key, f"{key} must be a string, got {type(value).__name__} {value!r}")


def _strings(meta: dict[Any, Any], key: str) -> tuple[str, ...]:
    value = meta.get(key)
    if value is None:
        return ()
    if isinstance(value, str):
        return (value,)
    if isinstance(value, list) and all(isinstance(item, str) for item in value):
        return tuple(value)
    raise _FieldError(
        key, f"{key} must be a list of strings (or one string), got {type(value).__name__} {value!r}"
    )


def _boolean(meta: dict[Any, Any], key: str) -> bool:
    value = meta.get(key)
    if value is None or isinstance(value, bool):
        return bool(value)
    raise _FieldError(key, f"{key} must be true or false, got {type(value).__name__} {value!r}")


@dataclass(slots=True)
class _Meta:
    title: str | None = None
    space: str | None = None
    tags: tuple[str, ...] = ()
    groups: tuple[str, ...] = ()
    archived: bool = False


def _front_matter(yaml_text: str, file: str) -> _Meta | InputError:
    try:
        meta = yaml.load(yaml_text, Loader=_LOADER)
    except yaml.MarkedYAMLError as error:
        mark = error.problem_mark or error.context_mark
        line = None if mark is None else mark.line + 2  # line 1 is the opening '---'
        reason = " ".join(part for part in (error.context, error.problem) if part) or "not valid YAML"
        return InputError(file, line, f"front matter is not valid YAML: {reason}; page skipped")
    except Exception as error:  # e.g. ValueError for a date like 2026-13-45, RecursionError
        return InputError(file, 2, f"front matter is not valid YAML: {error}; page skipped")
    if meta is None:
        return _Meta()
    if not isinstance(meta, dict):
        return InputError(file, 2, f"front matter must be a mapping, got {type(meta).__name__}; page skipped")
    try:
        title = _string(meta, "title")
        return _Meta(
            title=title.strip() if title else None,
            space=_string(meta, "space"),
            tags=_strings(meta, "tags"),
            groups=_strings(meta, "groups"),
            archived=_boolean(meta, "archived"),
        )
    except _FieldError as error:
        line = _key_line(yaml_text, error.key)
        line = None if line is None else line + 2
        return InputError(file, line, f"front matter: {error.reason}; page skipped")


# ------------------------------------------------------------------------------ pages


@dataclass(slots=True)
class _Parsed:
    record: PageRecord
    links: list[tuple[int | None, str, str]]  # (line, PAGE or _WIKI, page id or wiki target)
    errors: list[InputError]


def _parse_page(relative: str, file: str, text: str, others: set[str]) -> _Parsed | InputError:
    page = page_id_for_path(relative)
    try:
        yaml_text, skipped = _split_front_matter(text)
    except ValueError as error:
        return InputError(file, 1, f"{error}; page skipped")
    meta = _Meta() if yaml_text is None else _front_matter(yaml_text, file)
    if isinstance(meta, InputError):
        return meta
    body = "\n" * skipped + "\n".join(text.split("\n")[skipped:]) if skipped else text
    try:
        tokens = _parser().parse(body)
    except RecursionError:
        return InputError(file, None, "Markdown nests too deeply to parse; page skipped")

    title = meta.title
    links: list[tuple[int | None, str, str]] = []
    errors: list[InputError] = []
    external: set[str] = set()
    in_h1 = False
    for block in tokens:
        if block.type == "heading_open":
            in_h1 = block.tag == "h1" and title is None
            continue
        if block.type != "inline" or not block.children:
            continue
        if in_h1:
            in_h1 = False
            title = _inline_text(block.children) or None
        content = block.content
        line = block.map[0] + 1 if block.map else None
        counted = 0  # offset up to which newlines have been added to `line`
        for child in block.children:
            if child.type == "link_open":
                href = str(child.attrGet("href") or "")
            elif child.type == "wikilink":
                href = ""
            else:
                continue
            offset = child.meta.get("offset")
            if line is not None and offset is not None and offset > counted:
                line += content.count("\n", counted, offset)
                counted = offset
            if child.type == "wikilink":
                if child.meta["target"]:  # [[#Section]] is an in-page jump
                    links.append((line, _WIKI, child.meta["target"]))
                continue
            kind, value = relative_link_target(page, href, others)
            if kind == PAGE:
                links.append((line, PAGE, value))
            elif kind == EXTERNAL:
                external.add(value)
            elif kind == OUTSIDE:
                reason = f"link to {href!r} leaves the wiki folder; link dropped"
                errors.append(InputError(file, line, reason))
    record = PageRecord(
        page=page,
        title=title or PurePosixPath(relative).stem,
        origin=Origin(file, 1 if yaml_text is not None else None),
        space=meta.space if meta.space is not None else default_space(page),
        tags=meta.tags,
        groups=meta.groups,
        archived=meta.archived,
        external_links=len(external),
    )
    return _Parsed(record, links, errors)


def _inline_text(children) -> str:
    parts = []
    for child in children:
        if child.type in ("text", "code_inline", "wikilink"):
            parts.append(child.content)
        elif child.type in ("softbreak", "hardbreak"):
            parts.append(" ")
    return " ".join("".join(parts).split())


def read_markdown_folder(
    folder: str | os.PathLike[str], *, encoding: str = "utf-8"
) -> Iterator[PageRecord | LinkRecord | InputError]:
    """Yield the pages and links of a folder of Markdown files, and an InputError per bad record.

    Every PageRecord comes before any LinkRecord. A page with bad front matter is skipped
    (with its links); a link leaving the folder and a link from a page to itself become
    InputErrors; several links from a page to one target give one LinkRecord (weight 1,
    line of the first). External links are counted in ``PageRecord.external_links``.

    Parameters
    ----------
    folder : str or path
        The wiki folder; ``*.md`` / ``*.markdown`` files below it are read recursively,
        hidden folders and files skipped.
    encoding : str
        Text encoding of the files (a byte-order mark overrides it).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> wiki = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (wiki / "a.md").write_text("# Alpha\\nSee [b](b.md) and `[c](c.md)`.\\n")
    >>> [type(r).__name__ for r in read_markdown_folder(wiki)]
    ['PageRecord', 'LinkRecord']
    """
    check_encoding(encoding)
    return _read(folder, encoding)


def _read(folder: str | os.PathLike[str], encoding: str) -> Iterator[PageRecord | LinkRecord | InputError]:
    files, pages = folder_pages(folder, _SUFFIXES, "Markdown")
    parsed: list[_Parsed] = []
    for entry in pages:
        if isinstance(entry, InputError):
            yield entry
            continue
        relative, file = entry
        try:
            text = read_text(file, encoding)
        except InputError as error:
            yield error
            continue
        result = _parse_page(relative, file, text, files.others)
        if isinstance(result, InputError):
            yield result
            continue
        parsed.append(result)
        yield result.record
        yield from result.errors
    if not parsed:
        return

    resolve = _wiki_resolver([item.record for item in parsed])
    for item in parsed:
        targets = ((line, value if kind == PAGE else resolve(value)) for line, kind, value in item.links)
        yield from link_records(item.record.page, item.record.origin.file, targets)


def _wiki_resolver(records: list[PageRecord]):
    """Wiki-link target -> page id: an id, else a title, case-insensitively; else as written."""
    ids = {record.page for record in records}
    folded: dict[str, str] = {}
    for record in records:  # records come in sorted path order: the first one wins a tie
        folded.setdefault(record.page.casefold(), record.page)
    for record in records:
        folded.setdefault(record.title.casefold(), record.page)

    def resolve(target: str) -> str:
        if target in ids:
            return target
        return folded.get(target.casefold(), target)

    return resolve

"""Reader for a folder of Markdown pages (CommonMark, parsed with markdown-it-py).

Each ``*.md`` / ``*.markdown`` file is a page; its id is its path relative to the folder
without the extension. Links are taken from the parsed document, so a link in a code span
or code block never counts, reference definitions work and images are not links.
Double-bracket wiki links (``[[Target]]``, ``[[Target#Section|shown]]``) are an inline
rule of the same parser. YAML front matter gives title, space, tags, groups, archived.

A page's text is the text of its parsed blocks (inline text, code spans, fenced and indented
code; not raw HTML, image descriptions or front matter), whitespace collapsed, at most 64 KiB
of UTF-8 (cut at a character); its headings are its title and then every heading, one per
line (at most 16 KiB). Every link records its place: ``md:``, the chain of blocks around it
(``bullet_list>list_item>paragraph``, the 12 innermost; a table is ``table`` whatever cell
holds the link) and, after ``@``, the nearest heading above it, lowercase, whitespace
collapsed, at most 80 characters (``md:bullet_list>list_item>paragraph@see also``; no ``@``
before the first heading).

Hostile input is bounded. A file is read up to 8 MiB (:func:`~rankrec.sources._text.read_text`).
Front matter longer than 64 Ki characters, or using a YAML alias (``*name``: a few bytes of
aliases can stand for gigabytes), is refused before PyYAML builds anything. markdown-it-py
searches for a link's closing ``]`` from every ``[``, which is quadratic on unbalanced
brackets; here each inline block may spend one search step per character (plus 4,096). A
block that would need more, by a linear estimate made before parsing (:func:`_bracket_work`)
or by what its parse spends, keeps its text but none of its links, and the page gets an
InputError naming the block's first line. A wiki link is at most 512 characters.
"""

from __future__ import annotations

import os
import re
from collections.abc import Iterator
from contextvars import ContextVar
from dataclasses import dataclass
from functools import lru_cache
from pathlib import PurePosixPath

import yaml
from markdown_it import MarkdownIt
from markdown_it import helpers as _commonmark_helpers
from markdown_it.rules_core import StateCore
from markdown_it.rules_inline import StateInline
from markdown_it.rules_inline import link as _commonmark_link
from markdown_it.token import Token

from ..errors import InputError
from ._front_matter import Meta, read_front_matter, split_front_matter
from ._links import (
    EXTERNAL,
    OUTSIDE,
    PAGE,
    default_space,
    folder_pages,
    heading_key,
    link_records,
    page_id_for_path,
    relative_link_target,
)
from ._text import CappedText, check_encoding, read_text
from .records import HEADINGS_BYTES, TEXT_BYTES, LinkRecord, Origin, PageRecord, clip_utf8

__all__ = ["read_markdown_folder"]

_SUFFIXES = (".md", ".markdown")
_PLACE_DEPTH = 12  # blocks of a place, the nearest to the link
_CODE_BLOCKS = ("fence", "code_block")
_WIKI = "wiki"  # kind of a link whose target is resolved once every title is known
_WIKI_CHARS = 512  # of a wiki link, brackets included: the search for its "]]" looks no further
_WORK_PER_CHAR = 1  # link-search steps an inline block may take per character of its text
_WORK_FLOOR = 4_096  # ... and this many more (a short block with a few links never runs short)
_SCAN_CHARS = 16  # characters of a plain scan (str.find, a link destination) that count as one step
_BRACKETS = re.compile(r"\\.|[\[\]]", re.DOTALL)
_BLANK = re.compile(r"[\x00-\x20\x7f]")
_FRONT_MATTER_CHARS = 65_536  # of a page's front matter (common practice: real ones are a few lines)
_REASON_CHARS = 160  # of a front matter error: PyYAML and the field checks quote the input
_YAML_SCANNER = getattr(yaml, "CSafeLoader", yaml.SafeLoader)


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
    stop = min(state.posMax, start + _WIKI_CHARS)
    end = source.find("]]", start + 2, stop)
    _spend(_scan_steps((end if end >= 0 else stop) - start))
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


# -------------------------------------------------------------------- bounded work


class _OutOfBudget(Exception):
    """An inline block has spent its budget: its links are not looked for."""


class _Budget:
    __slots__ = ("left",)

    def __init__(self, left: int) -> None:
        self.left = left


# The budget of the inline block being parsed (None outside one): markdown-it-py hands its link
# helpers no state of ours, and a context variable keeps concurrent parses apart.
_BUDGET: ContextVar[_Budget | None] = ContextVar("rankrec_markdown_budget", default=None)


def _spend(steps: int) -> None:
    """Take ``steps`` from the current block's budget; _OutOfBudget once it is spent."""
    budget = _BUDGET.get()
    if budget is not None:
        budget.left -= steps
        if budget.left < 0:
            raise _OutOfBudget


def _scan_steps(characters: int) -> int:
    """Steps a plain scan of ``characters`` costs (one per 16 characters, at least one)."""
    return characters // _SCAN_CHARS + 1


def _label_end(state: StateInline, start: int, disable_nested: bool = False) -> int:
    """Position of the ``]`` closing the link label opened at ``start``, or -1.

    The same search as markdown-it-py's ``parseLinkLabel`` (brackets counted outside other
    inline tokens; with ``disable_nested``, a link inside the label ends the search with -1),
    but every step spends the block's budget.
    """
    before, end, level = state.pos, -1, 1
    state.pos = start + 1
    while state.pos < state.posMax:
        _spend(1)
        marker = state.src[state.pos]
        if marker == "]":
            level -= 1
            if level == 0:
                end = state.pos
                break
        position = state.pos
        state.md.inline.skipToken(state)
        if marker == "[":
            if state.pos == position + 1:  # a bracket of the text, not the start of a token
                level += 1
            elif disable_nested:
                break
    state.pos = before
    return end


def _destination(string: str, pos: int, maximum: int):
    """markdown-it-py's ``parseLinkDestination``, spending the budget on what it may have read."""
    result = _commonmark_helpers.parseLinkDestination(string, pos, maximum)
    if _BUDGET.get() is None:  # a reference definition, parsed with the blocks
        return result
    if result.ok:
        _spend(_scan_steps(result.pos - pos))
    else:  # it stops at the first blank or control character at the latest
        stop = _BLANK.search(string, pos, maximum)
        _spend(_scan_steps((maximum if stop is None else stop.start()) - pos))
    return result


class _Helpers:
    """markdown-it-py's link helpers, with the bounded label and destination searches."""

    parseLinkLabel = staticmethod(_label_end)
    parseLinkDestination = staticmethod(_destination)
    parseLinkTitle = staticmethod(_commonmark_helpers.parseLinkTitle)


def _bracket_work(content: str) -> int:
    """Steps the label searches of a block may take, estimated by matching its brackets.

    Brackets are matched as a stack would (backslash escapes honoured, code spans not). A
    matched pair costs the characters between its brackets that no inner pair holds (the
    search steps over a nested link at once); a ``[`` without its ``]`` costs the rest of the
    block, which the search reads to the end.
    """
    opened: list[list[int]] = []  # [position, characters held by inner pairs]
    work = 0
    for match in _BRACKETS.finditer(content):
        char = match.group()
        if char == "[":
            opened.append([match.start(), 0])
        elif char == "]" and opened:
            start, inner = opened.pop()
            distance = match.start() - start
            work += distance - inner
            if opened:
                opened[-1][1] += distance
    return work + sum(len(content) - start for start, _ in opened)


def _bounded_inline(state: StateCore) -> None:
    """markdown-it-py's inline step, within a budget per block; a block over it keeps its text only.

    A block whose estimated bracket work (:func:`_bracket_work`) exceeds its budget is not
    parsed; one that spends its budget while parsing is taken back. Either keeps its text as
    one text token and is marked ``brackets_cut``.
    """
    for token in state.tokens:
        if token.type != "inline":
            continue
        content = token.content
        allowed = _WORK_PER_CHAR * len(content) + _WORK_FLOOR
        children: list[Token] = []
        reset = _BUDGET.set(_Budget(allowed))
        try:
            if _bracket_work(content) > allowed:
                raise _OutOfBudget
            state.md.inline.parse(content, state.md, state.env, children)
        except _OutOfBudget:
            text = Token("text", "", 0)
            text.content = content
            children = [text]
            token.meta["brackets_cut"] = True
        finally:
            _BUDGET.reset(reset)
        token.children = children


@lru_cache(maxsize=1)
def _parser() -> MarkdownIt:
    """One CommonMark parser (plus tables, strikethrough and wiki links), made once."""
    parser = MarkdownIt("commonmark").enable(["table", "strikethrough"])
    parser.validateLink = lambda url: True  # keep javascript: etc.; they are sorted out later
    parser.helpers = _Helpers  # type: ignore[assignment]
    parser.core.ruler.at("inline", _bounded_inline)
    parser.inline.ruler.at("link", _link_with_offset)
    parser.inline.ruler.before("link", "wikilink", _wikilink)
    return parser


# ------------------------------------------------------------------------------ pages


@dataclass(slots=True)
class _Parsed:
    record: PageRecord
    links: list[tuple[int | None, str, str, str]]  # (line, PAGE or _WIKI, page id or wiki target, place)
    errors: list[InputError]


class _Walk:
    """What one pass over a page's block tokens gathers: title, text, headings, links."""

    def __init__(self, page: str, file: str, others: set[str], title: str | None) -> None:
        self.page, self.file, self.others = page, file, others
        self.title = title
        self.text = CappedText(TEXT_BYTES)
        self.headings = CappedText(HEADINGS_BYTES, "\n")
        self.links: list[tuple[int | None, str, str, str]] = []
        self.errors: list[InputError] = []
        self.external: set[str] = set()

    def run(self, tokens) -> None:
        blocks: list[str] = []  # types of the open blocks around the current token
        heading = ""  # the nearest heading above, as a place names it
        in_h1 = False
        for block in tokens:
            if block.nesting == 1:
                blocks.append(block.type.removesuffix("_open"))
                in_h1 = block.type == "heading_open" and block.tag == "h1" and self.title is None
                continue
            if block.nesting == -1:  # markdown-it closes every block it opens
                blocks.pop()
                continue
            if block.type in _CODE_BLOCKS:
                self.text.add(block.content)
            if block.type != "inline" or not block.children:
                continue
            if block.meta.get("brackets_cut"):
                self.errors.append(_brackets_error(self.file, block))
            in_heading = bool(blocks) and blocks[-1] == "heading"
            shown = _inline_text(block.children) if in_heading or not self.text.full else ""
            if in_h1:
                in_h1 = False
                self.title = shown or None
            self._links(block, _place(blocks, heading))
            self.text.add(shown)
            if in_heading:
                self.headings.add(shown)
                heading = heading_key(shown)

    def _links(self, block, place: str) -> None:
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
                    self.links.append((line, _WIKI, child.meta["target"], place))
                continue
            kind, value = relative_link_target(self.page, href, self.others)
            if kind == PAGE:
                self.links.append((line, PAGE, value, place))
            elif kind == EXTERNAL:
                self.external.add(value)
            elif kind == OUTSIDE:
                reason = f"link to {href!r} leaves the wiki folder; link dropped"
                self.errors.append(InputError(self.file, line, reason))


def _brackets_error(file: str, block) -> InputError:
    line = block.map[0] + 1 if block.map else None
    return InputError(
        file,
        line,
        "the block starting here has too many unbalanced or nested brackets to look for its links "
        "in bounded time; its links are dropped, its text is kept",
    )


def _place(blocks: list[str], heading: str) -> str:
    """``md:`` + the blocks around a link (a table as one block) + ``@`` + the heading above it."""
    if "table" in blocks:
        blocks = blocks[: blocks.index("table") + 1]
    chain = "md:" + ">".join(blocks[-_PLACE_DEPTH:])
    return chain + "@" + heading if heading else chain


def _parse_page(relative: str, file: str, text: str, others: set[str]) -> _Parsed | InputError:
    page = page_id_for_path(relative)
    try:
        yaml_text, skipped = split_front_matter(text)
    except ValueError as error:
        return InputError(file, 1, f"{error}; page skipped")
    meta = Meta() if yaml_text is None else _front_matter(yaml_text, file)
    if isinstance(meta, InputError):
        return meta
    body = "\n" * skipped + "\n".join(text.split("\n")[skipped:]) if skipped else text
    try:
        tokens = _parser().parse(body)
    except RecursionError:
        return InputError(file, None, "Markdown nests too deeply to parse; page skipped")
    walk = _Walk(page, file, others, meta.title)
    walk.run(tokens)
    title = walk.title or PurePosixPath(relative).stem
    headings = walk.headings.text()
    record = PageRecord(
        page=page,
        title=title,
        origin=Origin(file, 1 if yaml_text is not None else None),
        space=meta.space if meta.space is not None else default_space(page),
        tags=meta.tags,
        groups=meta.groups,
        archived=meta.archived,
        external_links=len(walk.external),
        text=walk.text.text(),
        headings=clip_utf8(" ".join(title.split()) + ("\n" + headings if headings else ""), HEADINGS_BYTES),
    )
    return _Parsed(record, walk.links, walk.errors)


def _front_matter(yaml_text: str, file: str) -> Meta | InputError:
    """The front matter's fields, refusing (before PyYAML builds anything) what could blow up.

    Refused: more than 64 Ki characters, and any YAML alias (YAML 1.2 section 3.2.2.2: an alias
    node stands for its anchored node, so nested aliases multiply: the "billion laughs"). Error
    messages are cut to a short prefix, since they quote the input.
    """
    if len(yaml_text) > _FRONT_MATTER_CHARS:
        return InputError(
            file, 2, f"front matter is longer than {_FRONT_MATTER_CHARS:,} characters; page skipped"
        )
    alias = _first_alias(yaml_text)
    if alias is not None:
        line, name = alias
        shown = name if len(name) <= 40 else name[:37] + "..."
        return InputError(
            file,
            line + 2,  # line 1 is the opening '---'
            f"front matter uses the YAML alias *{shown}; aliases are not accepted in front matter "
            "(each can stand for a whole copy of its anchor); page skipped",
        )
    meta = read_front_matter(yaml_text, file)
    if isinstance(meta, InputError) and len(meta.reason) > _REASON_CHARS:
        cut = meta.reason[: _REASON_CHARS - 28].rstrip()
        return InputError(meta.file, meta.line, f"{cut}... (cut); page skipped")
    return meta


def _first_alias(yaml_text: str) -> tuple[int, str] | None:
    """(0-based line, name) of the first YAML alias, or None: scanned as tokens, never expanded."""
    try:
        for token in yaml.scan(yaml_text, Loader=_YAML_SCANNER):
            if isinstance(token, yaml.AliasToken):
                return token.start_mark.line, str(token.value)
    except yaml.YAMLError:  # not valid YAML: read_front_matter says where
        return None
    return None


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
        targets = (
            (line, value if kind == PAGE else resolve(value), place)
            for line, kind, value, place in item.links
        )
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

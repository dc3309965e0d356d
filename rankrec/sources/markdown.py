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
block that would need more, by a linear estimate made before parsing (in :mod:`._markdown_parser`)
or by what its parse spends, keeps its text but none of its links, and the page gets an
InputError naming the block's first line. A wiki link is at most 512 characters.
"""

from __future__ import annotations

import os
from collections import Counter
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import PurePosixPath

import yaml

from .._validation import check_count
from ..blocks import strip_block
from ..errors import InputError
from ..progress import Progress
from ._front_matter import Meta, read_front_matter, split_front_matter
from ._links import (
    EXTERNAL,
    JUMP,
    OUTSIDE,
    PAGE,
    SAME_PAGE,
    default_space,
    folder_pages,
    heading_key,
    link_records,
    page_id_for_path,
    relative_link_target,
)
from ._markdown_parser import WIKI, parser
from ._parallel import parse_in_order
from ._text import CappedText, check_encoding, read_text
from .records import HEADINGS_BYTES, TEXT_BYTES, LinkRecord, Origin, PageRecord, clip_utf8

__all__ = ["read_markdown_folder"]

MARKDOWN_SUFFIXES = _SUFFIXES = (".md", ".markdown")
_PLACE_DEPTH = 12  # blocks of a place, the nearest to the link
_CODE_BLOCKS = ("fence", "code_block")
_FRONT_MATTER_CHARS = 65_536  # of a page's front matter (common practice: real ones are a few lines)
_REASON_CHARS = 160  # of a front matter error: PyYAML and the field checks quote the input
_YAML_SCANNER = getattr(yaml, "CSafeLoader", yaml.SafeLoader)


# ------------------------------------------------------------------------------ pages


@dataclass(slots=True)
class _Parsed:
    record: PageRecord
    links: list[tuple[int | None, str, str, str]]  # (line, PAGE or WIKI, page id or wiki target, place)
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
        self.same_page = 0  # links to the page itself: section anchors, its own file

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
                if child.meta["target"]:
                    self.links.append((line, WIKI, child.meta["target"], place))
                else:  # [[#Section]]: a section of the page itself
                    self.same_page += 1
                continue
            kind, value = relative_link_target(self.page, href, self.others)
            if kind == PAGE and value == self.page:
                self.same_page += 1  # its own file, with or without a fragment
            elif kind == PAGE:
                self.links.append((line, PAGE, value, place))
            elif kind == JUMP and value.startswith("#"):
                self.same_page += 1  # a section of the page itself
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


def parse_page(relative: str, file: str, text: str, others: set[str]) -> PageRecord | InputError:
    """The page record the reader makes of one file's ``text`` (``\n`` line endings), or why not."""
    parsed = _parse_page(relative, file, text, others)
    return parsed if isinstance(parsed, InputError) else parsed.record


def _parse_page(relative: str, file: str, text: str, others: set[str]) -> _Parsed | InputError:
    page = page_id_for_path(relative)
    text = strip_block(text)  # rankrec's own related-pages block is not the page's content
    try:
        yaml_text, skipped = split_front_matter(text)
    except ValueError as error:
        return InputError(file, 1, f"{error}; page skipped")
    meta = Meta() if yaml_text is None else _front_matter(yaml_text, file)
    if isinstance(meta, InputError):
        return meta
    body = "\n" * skipped + "\n".join(text.split("\n")[skipped:]) if skipped else text
    try:
        tokens = parser().parse(body)
    except RecursionError:
        return InputError(file, None, "Markdown nests too deeply to parse; page skipped")
    walk = _Walk(page, file, others, meta.title)
    walk.run(tokens)
    title = walk.title or PurePosixPath(relative).stem
    itself = {page.casefold(), title.casefold()}  # a wiki link naming either is to the page itself
    links = [link for link in walk.links if link[1] != WIKI or link[2].casefold() not in itself]
    same_page = walk.same_page + len(walk.links) - len(links)
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
        same_page_links=same_page,
    )
    return _Parsed(record, links, walk.errors)


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
    folder: str | os.PathLike[str],
    *,
    encoding: str = "utf-8",
    tally: Counter | None = None,
    workers: int = 1,
    progress: Progress | None = None,
) -> Iterator[PageRecord | LinkRecord | InputError]:
    """Yield the pages and links of a folder of Markdown files, and an InputError per bad record.

    Every PageRecord comes before any LinkRecord. A page with bad front matter is skipped
    (with its links); a link leaving the folder becomes an InputError; several links from a
    page to one target give one LinkRecord (weight 1, line of the first). External links are
    counted in ``PageRecord.external_links``. A link from a page to itself (``#part``, its own
    file, ``[[#Section]]``, a wiki link naming its own id or title) is no link and no bad record:
    it is counted in ``PageRecord.same_page_links`` (and in ``tally``, if given, under
    ``"same-page links"``).

    Parameters
    ----------
    folder : str or path
        The wiki folder; ``*.md`` / ``*.markdown`` files below it are read recursively,
        hidden folders and files skipped.
    encoding : str
        Text encoding of the files (a byte-order mark overrides it).
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
    >>> _ = (wiki / "a.md").write_text("# Alpha\\nSee [b](b.md) and `[c](c.md)`.\\n")
    >>> [type(r).__name__ for r in read_markdown_folder(wiki)]
    ['PageRecord', 'LinkRecord']
    """
    check_encoding(encoding)
    if tally is not None and not isinstance(tally, Counter):
        raise TypeError(f"tally must be a collections.Counter or None, got {tally!r}")
    check_count("workers", workers)
    return _read(folder, encoding, Counter() if tally is None else tally, workers, progress)


def _parse_file(context: tuple[str, set[str]], relative: str, file: str) -> _Parsed | InputError:
    """One file's page and links, or why not (a module-level function: worker processes call it)."""
    encoding, others = context
    try:
        text = read_text(file, encoding)
    except InputError as error:
        return error
    return _parse_page(relative, file, text, others)


def _read(
    folder: str | os.PathLike[str], encoding: str, tally: Counter, workers: int = 1, progress=None
) -> Iterator[PageRecord | LinkRecord | InputError]:
    files, pages = folder_pages(folder, _SUFFIXES, "Markdown", tally)
    parsed: list[_Parsed] = []
    context = (encoding, files.others if files else set())
    aliases = files.aliases if files else {}
    for result in parse_in_order(_parse_file, context, pages, workers=workers, progress=progress):
        if isinstance(result, InputError):
            yield result
            continue
        parsed.append(result)
        if result.record.same_page_links:
            tally[SAME_PAGE] += result.record.same_page_links
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
        yield from link_records(item.record.page, item.record.origin.file, targets, aliases)


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

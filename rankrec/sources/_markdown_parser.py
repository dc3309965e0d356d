"""The Markdown parser the reader uses (markdown-it-py, CommonMark) with wiki links, link offsets, and
bounded link search: each inline block has a budget of search steps (see :mod:`rankrec.sources.markdown`)."""

from __future__ import annotations

import re
from contextvars import ContextVar
from functools import lru_cache

from markdown_it import MarkdownIt
from markdown_it import helpers as _commonmark_helpers
from markdown_it.rules_core import StateCore
from markdown_it.rules_inline import StateInline
from markdown_it.rules_inline import link as _commonmark_link
from markdown_it.token import Token

WIKI = "wiki"  # kind of a link whose target is resolved once every title is known
_WIKI_CHARS = 512  # of a wiki link, brackets included: the search for its "]]" looks no further
_WORK_PER_CHAR = 1  # link-search steps an inline block may take per character of its text
_WORK_FLOOR = 4_096  # ... and this many more (a short block with a few links never runs short)
_SCAN_CHARS = 16  # characters of a plain scan (str.find, a link destination) that count as one step
_BRACKETS = re.compile(r"\\.|[\[\]]", re.DOTALL)
_BLANK = re.compile(r"[\x00-\x20\x7f]")


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
def parser() -> MarkdownIt:
    """One CommonMark parser (plus tables, strikethrough and wiki links), made once."""
    parser = MarkdownIt("commonmark").enable(["table", "strikethrough"])
    parser.validateLink = lambda url: True  # keep javascript: etc.; they are sorted out later
    parser.helpers = _Helpers  # type: ignore[assignment]
    parser.core.ruler.at("inline", _bounded_inline)
    parser.inline.ruler.at("link", _link_with_offset)
    parser.inline.ruler.before("link", "wikilink", _wikilink)
    return parser

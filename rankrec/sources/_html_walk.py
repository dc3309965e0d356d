"""What a parsed HTML page holds, in one walk of its tree (lxml): its links with their places and
lines, its visible text and its headings (:mod:`rankrec.sources.html` reads the files and says what a
place, a page's text and its headings are)."""

from __future__ import annotations

import re
from collections import Counter

from lxml import etree

from ._text import CappedText
from .records import HEADINGS_BYTES, TEXT_BYTES

_HIDDEN = frozenset({"head", "title", "script", "style", "template", "noscript"})  # no visible text
_HEADINGS = frozenset({"h1", "h2", "h3", "h4", "h5", "h6"})
# Inline formatting: left out of a link's place (``<p><em><a>`` sits where ``<p><a>`` does).
_INLINE = frozenset({"span", "em", "strong", "b", "i", "code", "small", "abbr", "sup", "sub", "font"})
_TOP = frozenset({"body", "html"})  # where a place stops
# Code blocks: <pre>, and the classes generators give theirs (Doxygen's div.fragment of div.line rows,
# Pygments' div.highlight, pandoc's div.sourceCode; common practice).
_CODE_CLASSES = frozenset({"fragment", "highlight", "sourcecode"})
_PLACE_DEPTH = 12  # elements of a place, the nearest to the link
_PLACE_STEPS = 64  # ancestors looked at per place: bounds the work on hostile nesting
_CLASSES = 4  # class names per element, the first in sorted order
_NAME_CHARS = 40  # of a tag or class name in a place
_NOT_NAME = re.compile(r"[^\w-]")  # characters of a class name a place does not keep
# Where each ``<a`` start tag begins and ends in the source, comments, scripts and styles
# (whose ``<a`` are no elements) matched as a whole and passed over. libxml2 numbers an
# element by the line where its start tag ends, and at most 65,535 (an unsigned short).
_START_TAGS = re.compile(
    r"<!--.*?(?:-->|\Z)|<(script|style)\b.*?(?:</\1|\Z)"
    r"|<a(?=[\s/>])(?:[^>\"'=]+|=\s*\"[^\"]*\"|=\s*'[^']*'|[=\"'])*>?",
    re.IGNORECASE | re.DOTALL,
)
LAST_LINE = 65_535  # the largest line number libxml2 keeps


def text_of(element) -> str:
    return " ".join(" ".join(element.itertext()).split()) if element is not None else ""


def _is_code(node) -> bool:
    """Whether an element is a code block (see ``_CODE_CLASSES``)."""
    if node.tag == "pre":
        return True
    classes = node.get("class")
    return bool(classes) and not _CODE_CLASSES.isdisjoint(classes.lower().split())


def walk(root, excluded: set) -> tuple[list, str, str, float]:
    """Links (``<a href>``), visible text, headings and code share of a page, outside the ``excluded``
    elements.

    One pass in document order; a text piece is an element's text or the tail after an
    element or comment, so pieces on either side of a hidden element stay apart. The code share is the
    share of the visible text's characters (blanks left out) that sit inside code blocks.
    """
    anchors = []
    text = CappedText(TEXT_BYTES)
    headings: list[list[str]] = []  # the pieces of each heading, in document order
    open_headings: list[list[str]] = []
    hidden = 0  # hidden elements around the current node (their links still count)
    code = []  # the code blocks around the current node
    characters = code_characters = 0
    walk = etree.iterwalk(root, events=("start", "end", "comment", "pi"))
    for event, node in walk:
        if event == "start":
            piece = None
            if node in excluded:
                walk.skip_subtree()
            elif node.tag in _HIDDEN:
                hidden += 1
            else:
                piece = node.text
                if _is_code(node):
                    code.append(node)
                if node.tag == "a" and node.get("href") is not None:
                    anchors.append(node)
                elif hidden == 0 and node.tag in _HEADINGS:
                    headings.append([])
                    open_headings.append(headings[-1])
        elif event == "end":
            if node in excluded:
                pass  # its subtree was skipped: only its tail counts
            elif node.tag in _HIDDEN:
                hidden -= 1
            elif hidden == 0 and node.tag in _HEADINGS:
                open_headings.pop()
            if code and code[-1] is node:
                code.pop()
            piece = node.tail
        else:  # a comment or processing instruction: not text, what follows it is
            piece = node.tail
        if piece and hidden == 0 and not piece.isspace():  # blank pieces add nothing
            visible = len(piece) - piece.count(" ") - piece.count("\n") - piece.count("\t")
            characters += visible
            if code:
                code_characters += visible
            text.add(piece)
            for pieces in open_headings:
                pieces.append(piece)
    capped = CappedText(HEADINGS_BYTES, "\n")
    for pieces in headings:
        capped.add(" ".join(pieces))
    return anchors, text.text(), capped.text(), code_characters / characters if characters else 0.0


def anchor_lines(markup: str, anchors: list) -> dict:
    """The line where each ``<a`` start tag begins (as Python's html.parser numbers it), by element.

    libxml2 gives the line where a start tag ends, at most 65,535: the start tags found in
    ``markup`` ending on a line replace, in order, the lines of the anchors libxml2 puts there,
    when both count the same (else libxml2's line stays).
    """
    starts: dict[int, list[int]] = {}
    line, at = 1, 0
    for match in _START_TAGS.finditer(markup):
        if match.group(1) is not None or match.group().startswith("<!"):
            continue
        line += markup.count("\n", at, match.start())
        at = match.start()
        end = line + markup.count("\n", at, match.end())
        starts.setdefault(min(end, LAST_LINE), []).append(line)
    counts = Counter(anchor.sourceline for anchor in anchors)
    queues = {key: iter(found) for key, found in starts.items() if len(found) == counts[key]}
    return {
        anchor: next(queues[anchor.sourceline]) if anchor.sourceline in queues else anchor.sourceline
        for anchor in anchors
    }


def link_place(element, names: dict) -> str:
    """The elements from ``<body>`` (exclusive) down to ``element``, nearest last: ``div.footer>p``.

    ``names`` caches each element's name (see _element_name) across the places of a page.
    """
    kept: list[str] = []
    for _ in range(_PLACE_STEPS):
        if element is None or element.tag in _TOP or len(kept) == _PLACE_DEPTH:
            break
        if element.tag not in _INLINE:
            name = names.get(element)
            if name is None:
                name = names[element] = _element_name(element)
            kept.append(name)
        element = element.getparent()
    return ">".join(reversed(kept))


def _element_name(element) -> str:
    """Tag name and sorted class names joined by dots; never an id, a position or text."""
    classes = (element.get("class") or "").split()
    kept = sorted({_NOT_NAME.sub("_", name[:_NAME_CHARS]) for name in classes[: 8 * _CLASSES]})
    return ".".join([_NOT_NAME.sub("_", element.tag[:_NAME_CHARS]), *kept[:_CLASSES]])

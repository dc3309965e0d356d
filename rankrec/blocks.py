"""Related-pages blocks written into Markdown pages, between two HTML comment markers.

A block is a Markdown heading and a bulleted list of links, relative to the page so that they resolve
in the wiki folder and in a site generator alike::

    <!-- rankrec related pages: written by `rankrec export --into`; replaced on the next export -->
    ## Related pages

    - [Backup checklist](../ops/backup-checklist.md)
    <!-- rankrec related pages end -->

:func:`with_block` puts a block into a page's text: in place of the previous one (the first complete
pair of markers), else appended after one blank line. Everything outside the markers is kept as it
was, character for character, and the block takes the page's own line ending, so a second export of
the same lists changes no byte. :func:`strip_block` is what the Markdown reader applies before parsing:
the block's lines become empty lines (line numbers of everything else stay), so the block's own links
never come back as content links.
"""

from __future__ import annotations

import posixpath
import re
from collections.abc import Sequence

START = "<!-- rankrec related pages: written by `rankrec export --into`; replaced on the next export -->"
END = "<!-- rankrec related pages end -->"
HEADING = "Related pages"

_BLOCK = re.compile(re.escape(START) + r".*?" + re.escape(END), re.DOTALL)
_LINK_SPECIALS = re.compile(r"([\\\[\]*_`<>])")


def strip_block(text: str) -> str:
    """``text`` with every complete block's lines emptied (its line count kept).

    >>> strip_block("a\\n" + START + "\\n- [x](x.md)\\n" + END + "\\nb")
    'a\\n\\n\\n\\nb'
    """
    return _BLOCK.sub(lambda match: "\n" * match.group(0).count("\n"), text)


def line_ending(text: str) -> str:
    """The page's line ending: ``\\r\\n`` when its first line ends so, else ``\\n``."""
    first = text.find("\n")
    return "\r\n" if first > 0 and text[first - 1] == "\r" else "\n"


def link_target(page_file: str, target_file: str) -> str:
    """``target_file`` relative to the folder of ``page_file`` (both POSIX paths from the wiki root),
    percent-encoding what a Markdown link destination may not hold.

    >>> link_target("ops/db/backup.md", "ops/restore plan.md")
    '../restore%20plan.md'
    """
    relative = posixpath.relpath(target_file, posixpath.dirname(page_file) or ".")
    return "".join(f"%{ord(char):02X}" if char in " ()<>%" else char for char in relative)


def render_block(items: Sequence[tuple[str, str]], newline: str = "\n", heading: str = HEADING) -> str:
    """The block for ``items`` (title, relative link target), best first, lines ended by ``newline``
    (no ending after the closing marker).

    >>> print(render_block([("Backup [daily]", "b.md")]))
    <!-- rankrec related pages: written by `rankrec export --into`; replaced on the next export -->
    ## Related pages
    <BLANKLINE>
    - [Backup \\[daily\\]](b.md)
    <!-- rankrec related pages end -->
    """
    lines = [START, f"## {heading}", ""]
    lines += [f"- [{escaped_title(title)}]({target})" for title, target in items]
    lines.append(END)
    return newline.join(lines)


def escaped_title(title: str) -> str:
    """A title as link text: whitespace runs to one space, Markdown's inline specials escaped."""
    return _LINK_SPECIALS.sub(r"\\\1", " ".join(title.split()))


def with_block(text: str, block: str) -> str:
    """``text`` holding ``block``: in place of its first complete block, else appended (after the
    page's last line and one blank line, ending with the page's line ending)."""
    match = _BLOCK.search(text)
    if match is not None:
        return text[: match.start()] + block + text[match.end() :]
    newline = line_ending(text if "\n" in text else block)
    if not text:
        return block + newline
    ending = "" if text.endswith("\n") or text.endswith("\r") else newline
    return text + ending + newline + block + newline

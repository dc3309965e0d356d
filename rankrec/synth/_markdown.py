"""The wiki as a folder of Markdown files, one per page, written in a loop over pages.

Each page exercises the Markdown reader: YAML front matter (sometimes without a title,
rarely absent), relative inline links (some with a fragment and a link title),
root-relative links, reference-style and shortcut references, ``[[Title]]``,
``[[Title|shown]]`` and ``[[page/id#Section|shown]]`` wiki links, external links and
autolinks, in-page ``#fragment`` jumps, images, and link-like text inside code spans and
fenced blocks that is not a link. Every page link of the graph appears exactly once.
"""

from __future__ import annotations

import posixpath
from pathlib import Path
from urllib.parse import quote

import numpy as np

from . import _words
from ._wiki import Wiki

# Link syntaxes and their shares.
_STYLES = (
    "inline",
    "inline-titled",
    "rooted",
    "reference",
    "shortcut",
    "wiki-title",
    "wiki-alias",
    "wiki-id",
)
_STYLE_SHARES = (0.55, 0.05, 0.05, 0.12, 0.03, 0.08, 0.07, 0.05)
_LONG_EXTENSION_SHARE = 0.03  # files named .markdown instead of .md
_CODE_SAMPLE = "See [the backup runbook](../ops/runbooks/not-a-page.md) and [[No Such Page]]."


def _link(style: str, title: str, target: str, url: str, rooted: str, number: int) -> tuple[str, str | None]:
    """The link text in the body, and its reference definition if it needs one."""
    if style == "inline":
        return f"[{title}]({url})", None
    if style == "inline-titled":
        return f'[{title}]({url}#details "{title}")', None
    if style == "rooted":
        return f"[{title}]({rooted})", None
    if style == "reference":
        return f"[{title}][{number}]", f"[{number}]: {url}"
    if style == "shortcut":
        return f"[{title}]", f"[{title}]: {url}"
    if style == "wiki-title":
        return f"[[{title}]]", None
    if style == "wiki-alias":
        return f"[[{title}|the {title.lower()} page]]", None
    return f"[[{target}#Details|{title}]]", None


def _front_matter(
    variant: int, title: str, space: str, tags: list[str], group: str | None, archived: bool
) -> str:
    if variant == 2 and group is None and not archived:
        return ""
    lines = ["---"]
    if variant != 1:
        lines.append(f'title: "{title}"')
    lines += [f"space: {space}", f"tags: [{', '.join(tags)}]"]
    if group is not None:
        lines.append(f"groups: [{group}]")
    lines.append(f"archived: {'true' if archived else 'false'}")
    return "\n".join(lines) + "\n---\n"


def write_markdown(folder: Path, wiki: Wiki, rng: np.random.Generator, progress=None) -> list[str]:
    """Write ``folder/<page id>.md`` for every page; return the paths written, relative to folder."""
    ids = [x.decode() for x in wiki.ids.tolist()]
    titles = [x.decode() for x in wiki.titles.tolist()]
    quoted = [x.decode() for x in wiki.quoted_ids.tolist()]
    tags = [x.decode().split(";") for x in wiki.tags.tolist()]
    extension = np.where(rng.random(wiki.size) < _LONG_EXTENSION_SHARE, ".markdown", ".md").tolist()
    style = rng.choice(len(_STYLES), size=wiki.links, p=_STYLE_SHARES).tolist()
    variant = rng.choice(3, size=wiki.size, p=(0.85, 0.1, 0.05)).tolist()
    externals = rng.integers(0, 4, size=wiki.size).tolist()
    extras = rng.random((wiki.size, 3)) < (0.3, 0.2, 0.25)  # in-page jump, image, code sample
    extras[0, 2] = True  # at least one page shows link-like text in code
    targets, indptr = wiki.targets.tolist(), wiki.indptr.tolist()
    written = []
    for page in range(wiki.size):
        page_id, title = ids[page], titles[page]
        folder_of_page = posixpath.dirname(page_id)
        group = None if wiki.group[page] < 0 else wiki.group_names[wiki.group[page]]
        space = wiki.space_names[wiki.space[page]]
        body = [f"# {title}", "", f"Notes on {title.lower()} for the {space} space at {_words.ORGANISATION}."]
        if extras[page, 0]:
            body.append("Jump to the [related pages](#related).")
        items, definitions = [], []
        for index in range(indptr[page], indptr[page + 1]):
            target = targets[index]
            relative = posixpath.relpath(ids[target] + extension[target], folder_of_page)
            text, definition = _link(
                _STYLES[style[index]],
                titles[target],
                ids[target],
                quote(relative),
                "/" + quoted[target] + extension[target],
                len(definitions) + 1,
            )
            items.append(text)
            if definition is not None:
                definitions.append(definition)
        if items:
            body += [
                "",
                f"Start with {items[0]}." if len(items) == 1 else f"Start with {items[0]} and {items[1]}.",
                "",
                "## Related",
                "",
            ]
            body += [f"- {item}" for item in items[2:]]
        if externals[page]:
            slug = quote(page_id.rsplit("/", 1)[-1])
            outside = [
                f"- <https://standards.tarnwick.invalid/{slug}>",
                f"- [Supplier portal](https://supplier.example/portal/{slug})",
                f"- [Mail the owners](mailto:{space}-owners@tarnwick.invalid)",
            ]
            body += ["", "## Elsewhere", ""] + outside[: externals[page]]
        if extras[page, 1]:
            body += ["", "![Overview diagram](../assets/overview-diagram.png)"]
        if extras[page, 2]:
            body += [
                "",
                "To link a page, write `[[Page Title]]` or `[text](../ops/page.md)`, for example:",
                "",
                "```markdown",
                _CODE_SAMPLE,
                "```",
            ]
        if definitions:
            body += [""] + definitions
        text = _front_matter(variant[page], title, space, tags[page], group, bool(wiki.archived[page]))
        path = folder / (page_id + extension[page])
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text + "\n".join(body) + "\n", encoding="utf-8")
        written.append(page_id + extension[page])
        if progress is not None and (page + 1) % 500 == 0:
            progress("markdown", page + 1, wiki.size)
    if progress is not None:
        progress("markdown", wiki.size, wiki.size)
    return written

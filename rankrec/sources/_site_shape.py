"""What one import of a whole site learns from all its pages at once: the site's title affixes and its spaces.

:func:`shape_site` takes every record a folder reader yielded for one source (pages, links, errors, in
order) and gives them back with the pages' titles cut (:mod:`._titles`) and their spaces found
(:mod:`._site_spaces`), and a :class:`SiteShape` saying what was found.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

from .._validation import check_choice
from ._site_spaces import SPACE_MODES, site_spaces
from ._titles import TitleAffixes, detect_title_affixes
from .records import LinkRecord, PageRecord


@dataclass(frozen=True)
class SiteShape:
    """The title prefix and suffix cut off every page that carried them (empty: none, or kept), how the
    spaces were found (``folders``, ``up links``, ``contents page PAGE``, ``file names``, ``none``) and how
    many spaces there are."""

    title_prefix: str
    title_suffix: str
    spaces: str
    space_count: int

    def summary(self) -> dict:
        """As JSON-ready fields."""
        return {
            "title_prefix": self.title_prefix,
            "title_suffix": self.title_suffix,
            "spaces": self.spaces,
            "space_count": self.space_count,
        }


def shape_site(
    items: list, *, keep_title_affixes: bool = False, spaces: str = "auto"
) -> tuple[list, SiteShape]:
    """``items`` (one folder's records, in reading order) with titles cut and spaces set, and what was found.

    Parameters
    ----------
    keep_title_affixes
        Keep the titles as the pages give them (no affix is looked for).
    spaces
        ``auto``, ``folders`` or ``none`` (:data:`rankrec.sources._site_spaces.SPACE_MODES`).

    Examples
    --------
    >>> from rankrec.sources.records import Origin
    >>> pages = [PageRecord(p, f"{p} | Acme Docs", Origin(p)) for p in ("a", "b", "c")]
    >>> shaped, shape = shape_site(pages)
    >>> [page.title for page in shaped], shape.title_suffix
    (['a', 'b', 'c'], ' | Acme Docs')
    """
    check_choice("spaces", spaces, SPACE_MODES)
    pages = [item for item in items if isinstance(item, PageRecord)]
    links = [item for item in items if isinstance(item, LinkRecord)]
    affixes = TitleAffixes() if keep_title_affixes else detect_title_affixes(page.title for page in pages)
    found = site_spaces(pages, links, spaces)
    changed: dict[int, PageRecord] = {}
    for page in pages:
        title = affixes.strip(page.title) if affixes else page.title
        space = found.spaces[page.page]
        if title != page.title or space != page.space:
            changed[id(page)] = replace(page, title=title, space=space, headings=_headings(page, title))
    shaped = [changed.get(id(item), item) for item in items] if changed else items
    shape = SiteShape(affixes.prefix, affixes.suffix, found.method, found.count)
    return shaped, shape


def _headings(page: PageRecord, title: str) -> str:
    """The page's headings with the title on their first line replaced by ``title``."""
    first, newline, rest = page.headings.partition("\n")
    if title == page.title or first != " ".join(page.title.split()):
        return page.headings
    return " ".join(title.split()) + newline + rest

"""The site name that most page titles of one import carry ("os — Files — Acme Docs"), found and cut off.

Documentation generators put the site's name after (or before) every page's own title, set off by a
separator: a dash, en dash or em dash, a pipe or a middle dot with blanks around it, or a colon followed by
a blank. A *title suffix* is the separator and the whole segments after it; a *title prefix* the whole
segments before it and the separator. A parenthesised last part is a title suffix too (API reference
generators write "Widget (Acme Lib 3.1 API)"). One that at least :data:`COMMON_SHARE` of the pages
carry (and at least :data:`MIN_PAGES` of them) is the site's, and is cut off; the longest such one wins,
so a suffix of two segments (" | Guides | Acme") is cut whole. A title that is nothing but the affix is
kept as it is.
"""

from __future__ import annotations

import re
from collections import Counter
from collections.abc import Iterable
from dataclasses import dataclass

COMMON_SHARE = 0.6
"""Share of an import's pages whose titles must carry an affix for it to count as the site's (common
practice: a few pages, such as the home page or the search page, are titled otherwise)."""
MIN_PAGES = 2
"""Fewest pages that must carry an affix for it to count (one page's title is just its title)."""

# A separator: a dash, en dash, em dash, pipe or middle dot between blanks, or a colon before a blank.
_SEPARATOR = re.compile(r"\s+[-\u2013\u2014|\u00b7]\s+|:\s+")
# A parenthesised last part, blanks before it: " (Acme Lib 3.1 API)".
_LAST_PART = re.compile(r"\s+\([^()]+\)\s*$")


@dataclass(frozen=True, slots=True)
class TitleAffixes:
    """The site's title prefix and suffix, as cut off (separator included); empty: none.

    >>> affixes = TitleAffixes(suffix=" | Acme Docs")
    >>> affixes.strip("Install | Acme Docs"), affixes.strip("Acme Docs"), affixes.strip("Other | Acme")
    ('Install', 'Acme Docs', 'Other | Acme')
    """

    prefix: str = ""
    suffix: str = ""

    def strip(self, title: str) -> str:
        """``title`` without the affixes; a title holding nothing else stays as it is."""
        cut = title
        if self.suffix and cut.endswith(self.suffix) and cut[: -len(self.suffix)].strip():
            cut = cut[: -len(self.suffix)]
        if self.prefix and cut.startswith(self.prefix) and cut[len(self.prefix) :].strip():
            cut = cut[len(self.prefix) :]
        return cut.strip()

    def __bool__(self) -> bool:
        return bool(self.prefix or self.suffix)


def _affixes(title: str) -> tuple[set[str], set[str]]:
    """Every prefix and every suffix of ``title`` made of whole segments, separators included."""
    prefixes, suffixes = set(), set()
    for match in _SEPARATOR.finditer(title):
        head, tail = title[: match.start()], title[match.end() :]
        if head.strip() and tail.strip():
            prefixes.add(title[: match.end()])
            suffixes.add(title[match.start() :])
    last = _LAST_PART.search(title)
    if last is not None and title[: last.start()].strip():
        suffixes.add(title[last.start() :])
    return prefixes, suffixes


def detect_title_affixes(titles: Iterable[str]) -> TitleAffixes:
    """The prefix and suffix that at least 60% of ``titles`` carry (the longest of each), if any.

    >>> detect_title_affixes(["os — Files — Acme 3.1 docs", "io — Acme 3.1 docs", "Acme 3.1 docs"])
    TitleAffixes(prefix='', suffix=' — Acme 3.1 docs')
    >>> detect_title_affixes(["Acme: Install", "Acme: Upgrade", "Acme: Remove"]).prefix
    'Acme: '
    >>> bool(detect_title_affixes(["Install - Linux", "Upgrade - Windows", "Remove"]))
    False
    >>> detect_title_affixes(["Widget (Acme Lib 3.1 API)", "Gear (Acme Lib 3.1 API)", "Source"]).suffix
    ' (Acme Lib 3.1 API)'
    """
    prefix_counts: Counter[str] = Counter()
    suffix_counts: Counter[str] = Counter()
    total = 0
    for title in titles:
        total += 1
        prefixes, suffixes = _affixes(title)
        prefix_counts.update(prefixes)
        suffix_counts.update(suffixes)
    need = max(MIN_PAGES, COMMON_SHARE * total)
    return TitleAffixes(prefix=_longest(prefix_counts, need), suffix=_longest(suffix_counts, need))


def _longest(counts: Counter[str], need: float) -> str:
    common = [affix for affix, count in counts.items() if count >= need]
    return max(common, key=lambda affix: (len(affix), affix), default="")

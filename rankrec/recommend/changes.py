"""Comparing a list with an earlier export: what entered, what left (``rankrec landing --since``)."""

from __future__ import annotations

import json
from pathlib import Path

from ..errors import InputError
from .lists import Item, Recommendations  # noqa: F401  (Item: the doctest builds items)


def read_previous(path: str | Path) -> tuple[str, ...]:
    """Pages of an earlier JSON export (a list of objects with ``page``; rows marked "left" skipped)."""
    try:
        rows = json.loads(Path(path).read_text(encoding="utf-8"))
    except (OSError, ValueError) as error:
        raise InputError(str(path), None, f"not a readable JSON export: {error}") from None
    if not isinstance(rows, list) or not all(isinstance(row, dict) and "page" in row for row in rows):
        raise InputError(str(path), None, "expected a JSON list of objects with a 'page' field")
    return tuple(str(row["page"]) for row in rows if row.get("change") != "left")


def changes_since(result: Recommendations, previous) -> tuple[frozenset[str], tuple[str, ...]]:
    """Pages that entered the list (not in ``previous``) and pages that left it (in previous order).

    >>> items = tuple(Item(p, p, None, 1.0, 1.0, "") for p in ("a", "b"))
    >>> entered, left = changes_since(Recommendations("landing", "t", items, None, 2, 0.0), ["b", "c"])
    >>> sorted(entered), left
    (['a'], ('c',))
    """
    before = list(dict.fromkeys(previous))
    now = [item.page for item in result.items]
    return frozenset(set(now) - set(before)), tuple(page for page in before if page not in set(now))

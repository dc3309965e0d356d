"""Finding a page of a loaded index by its id: binary search of the sorted ids, and the close ids an
unknown one gets as suggestions, in bounded work. :class:`rankrec.index.Index` inherits it."""

from __future__ import annotations

import difflib
from functools import cached_property

import numpy as np

from .errors import UnknownPage


class PageIds:
    """Id look-ups of :class:`rankrec.index.Index` (they use its ``pages``, ``page_order`` and ``size``)."""

    def first_position(self, key: str) -> int:
        """Position in id order (``page_order``) of the first page id not below ``key`` (binary search)."""
        order, pages = self._order, self.pages
        low, high = 0, self.size
        while low < high:
            middle = (low + high) // 2
            if pages[order[middle]] < key:
                low = middle + 1
            else:
                high = middle
        return low

    @cached_property
    def _order(self) -> memoryview:
        """``page_order`` as a memoryview (Python ints per element; see :class:`StringTable`)."""
        return memoryview(np.ascontiguousarray(self.page_order, dtype=np.int64))

    #: close-id suggestions: allowed ids taken on each side of where a key sorts, ids looked at per
    #: side at most, how many of the cheaply ranked ones get the (slower) difflib ratio, and the
    #: longest id that gets suggestions at all
    SUGGESTION_WINDOW, SUGGESTION_SCAN, SUGGESTION_SHORTLIST, SUGGESTION_MAX_CHARS = 25, 100, 4, 512

    def find(self, page: str) -> int | None:
        """Dense number of ``page`` (binary search of the sorted page ids), or None when absent."""
        low = self.first_position(page)
        return self._order[low] if low < self.size and self.pages[self._order[low]] == page else None

    def page_number(self, page: str) -> int:
        """Dense number of ``page``; UnknownPage with close ids (:meth:`close_ids`) when it is absent."""
        number = self.find(page)
        if number is None:
            raise UnknownPage(page, self.close_ids(page))
        return number

    def close_ids(self, page: str, *, allowed=None, n: int = 3) -> list[str]:
        """Up to ``n`` page ids close to ``page`` (difflib ratio at least 0.5), best first, ``page`` itself
        never among them; with ``allowed`` (a callable on page numbers) only pages it accepts.

        Bounded work whatever the size of the wiki: the candidates are the ``SUGGESTION_WINDOW``
        allowed ids nearest on each side of where ``page`` sorts (and of where its folded form sorts:
        case-folded, spaces and ``_`` as ``-``), one binary search each, looking at
        ``SUGGESTION_SCAN`` ids per side at most; compared in folded form, they are ranked by the
        length of their common prefix and suffix with ``page`` (one edit in one place keeps both), and
        only the best ``SUGGESTION_SHORTLIST`` get a difflib ratio. Ties go to the smaller id. An id
        longer than ``SUGGESTION_MAX_CHARS`` gets none. ``page`` itself is skipped before anything is
        counted, and pages not allowed take no candidate's place, so the answer is the one the index
        would give without ``page``, or without any page not allowed (unless more than
        ``SUGGESTION_SCAN - SUGGESTION_WINDOW`` of them sit next to it): a page a viewer may not see is
        answered exactly as a page that does not exist.
        """
        if len(page) > self.SUGGESTION_MAX_CHARS:
            return []
        folded, candidates = self._folded(page), {}
        for key in dict.fromkeys((page, folded)):
            candidates.update(self._window(key, page, allowed))
        forms = [(self._folded(name), name) for name in candidates]
        forms.sort(key=lambda pair: (-self._shared_ends(folded, pair[0]), pair[1]))
        matcher = difflib.SequenceMatcher(autojunk=False)
        matcher.set_seq2(folded)
        scored = []
        for form, name in forms[: self.SUGGESTION_SHORTLIST]:
            matcher.set_seq1(form)
            scored.append((-matcher.ratio(), name))
        return [name for ratio, name in sorted(scored)[:n] if ratio <= -0.5]

    def _window(self, key: str, page: str, allowed) -> list[tuple[str, int]]:
        """(id, number) of the ``SUGGESTION_WINDOW`` allowed ids other than ``page`` nearest to where
        ``key`` sorts on each side, looking at ``SUGGESTION_SCAN`` other ids per side at most."""
        order, pages, found = self._order, self.pages, []
        position = self.first_position(key)
        for step, start in ((-1, position - 1), (1, position)):
            taken = looked = 0
            at = start
            while 0 <= at < self.size and taken < self.SUGGESTION_WINDOW and looked < self.SUGGESTION_SCAN:
                number, at = order[at], at + step
                name = pages[number]
                if name == page:  # not counted: the window is the same without it
                    continue
                looked += 1
                if allowed is None or allowed(number):
                    found.append((name, number))
                    taken += 1
        return found

    @staticmethod
    def _folded(text: str) -> str:
        return "-".join(text.casefold().replace("_", " ").split())

    @staticmethod
    def _shared_ends(page: str, name: str) -> int:
        """Characters ``name`` shares with ``page`` at its start and end (at most the shorter's length),
        by bisection on slices (each comparison runs in C): ``("ops/a-1", "ops/a_1")`` share 6."""
        shortest, ends = min(len(page), len(name)), 0
        for same in (
            lambda k: page[:k] == name[:k],
            lambda k: page[len(page) - k :] == name[len(name) - k :],
        ):
            low, high = 0, shortest - ends
            while low < high:
                middle = (low + high + 1) // 2
                low, high = (middle, high) if same(middle) else (low, middle - 1)
            ends += low
        return ends

"""Why an evaluation cannot run: domain errors of :mod:`rankrec.evaluate` (messages built from their fields).

They derive from :class:`rankrec.errors.RankrecError`, so the command line reports them in one line with
exit status 2. (A store without pages or views is an :class:`rankrec.errors.InputError` on the store.)
"""

from __future__ import annotations

from datetime import UTC, datetime

from ..errors import RankrecError


def _iso(seconds: float) -> str:
    return datetime.fromtimestamp(seconds, UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


class CutoffOutsideSpan(RankrecError):
    """A cutoff that leaves no training or no test period: it must lie inside the views' time span.

    >>> str(CutoffOutsideSpan(0.0, 86400.0, 172800.0)).split(", which")[0]
    'cutoff 1970-01-01T00:00:00Z lies outside the views'
    """

    def __init__(self, cutoff: float, first: float, last: float) -> None:
        self.cutoff = float(cutoff)
        self.first = float(first)
        self.last = float(last)
        super().__init__(str(self))

    def __str__(self) -> str:
        return (f"cutoff {_iso(self.cutoff)} lies outside the views, which run from {_iso(self.first)} "
                f"to {_iso(self.last)}")

    def __reduce__(self):
        return (type(self), (self.cutoff, self.first, self.last))


class NothingToEvaluate(RankrecError):
    """A split (test or validation) without a single query that has a page to find.

    >>> str(NothingToEvaluate("validation", "sessions", "every session is too short"))
    'the sessions validation split has no query to evaluate: every session is too short'
    """

    def __init__(self, part: str, split: str, reason: str) -> None:
        self.part = part
        self.split = split
        self.reason = reason
        super().__init__(str(self))

    def __str__(self) -> str:
        return f"the {self.split} {self.part} split has no query to evaluate: {self.reason}"

    def __reduce__(self):
        return (type(self), (self.part, self.split, self.reason))

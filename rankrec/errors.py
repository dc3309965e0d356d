"""The few exception types rankrec raises; messages are built from their fields.

The CLI maps them to exit codes in one place (``rankrec.cli``).
"""

from __future__ import annotations

import shlex
from collections.abc import Sequence
from datetime import UTC, datetime


class RankrecError(Exception):
    """Base of every error rankrec raises on purpose."""


class InputError(RankrecError):
    """A bad record or file: where it is and why it was refused.

    >>> str(InputError("views.csv", 12, "timestamp 'soon' is neither ISO 8601 nor Unix seconds"))
    "views.csv:12: timestamp 'soon' is neither ISO 8601 nor Unix seconds"
    """

    def __init__(self, file: str, line: int | None, reason: str) -> None:
        self.file = str(file)
        self.line = line
        self.reason = reason
        super().__init__(str(self))

    def __str__(self) -> str:
        where = self.file if self.line is None else f"{self.file}:{self.line}"
        return f"{where}: {self.reason}"

    def __reduce__(self):  # keep pickling (multiprocessing) working with the custom __init__
        return (type(self), (self.file, self.line, self.reason))


class UsageError(RankrecError, ValueError):
    """A command-line option or combination of options that cannot be used; ``str(error)`` says why.

    >>> str(UsageError("give --index and --tokens, or --workdir"))
    'give --index and --tokens, or --workdir'
    """


class UnknownName(RankrecError):
    """A page, user or team id that the store does not hold, with the closest existing ids."""

    kind = "name"

    def __init__(self, name: str, suggestions: Sequence[str] = ()) -> None:
        self.name = name
        self.suggestions = tuple(suggestions)
        super().__init__(str(self))

    def __str__(self) -> str:
        text = f"unknown {self.kind} {self.name!r}"
        if self.suggestions:
            text += "; closest: " + ", ".join(self.suggestions)
        return text

    def __reduce__(self):
        return (type(self), (self.name, self.suggestions))


class UnknownPage(UnknownName):
    kind = "page"


class UnknownUser(UnknownName):
    kind = "user"


class UnknownTeam(UnknownName):
    kind = "team"


class UnknownTopic(UnknownName):
    kind = "topic"


class StaleData(RankrecError):
    """A cached artefact (basis, index) built from other data than the one in hand."""

    what = "cached data"

    def __init__(self, expected: str, found: str) -> None:
        self.expected = expected
        self.found = found
        super().__init__(str(self))

    def __str__(self) -> str:
        return f"{self.what} is stale: built for {self.found!r}, the graph in hand is {self.expected!r}"

    def __reduce__(self):
        return (type(self), (self.expected, self.found))


class StaleBasis(StaleData):
    what = "basis"


class StaleIndex(StaleData):
    what = "index"


class ForeignIndex(StaleIndex):
    """An index built from another wiki store than the one in hand: their store ids differ.

    ``expected`` is the id of the store in hand (None: a store made before ids, not written since),
    ``found`` the id the index's manifest records; ``index``, ``store`` and ``built_from`` are the
    index folder, the store in hand and the store the manifest names.

    >>> print(ForeignIndex(None, "5f0c2a9e77d14b1c", "idx", "b.db", "/w/a.db"))
    index idx was built from another wiki store (/w/a.db, store id 5f0c2a9e77d1), not from b.db (store id
    none); rebuild it with `rankrec build --wiki b.db --index idx`, or give --wiki the store it was built from
    """

    def __init__(self, expected: str | None, found: str, index: str, store: str, built_from: str) -> None:
        self.index = str(index)
        self.store = str(store)
        self.built_from = str(built_from)
        super().__init__(expected, found)

    def __str__(self) -> str:
        here = "none" if self.expected is None else self.expected[:12]
        return (
            f"index {self.index} was built from another wiki store ({self.built_from}, store id "
            f"{self.found[:12]}), not from {self.store} (store id {here}); rebuild it with "
            f"`rankrec build --wiki {shlex.quote(self.store)} --index {shlex.quote(self.index)}`, "
            "or give --wiki the store it was built from"
        )

    def __reduce__(self):
        return (type(self), (self.expected, self.found, self.index, self.store, self.built_from))


class GroupTooSmall(RankrecError):
    """Too few distinct active readers in a team to publish its reading profile.

    The message gives the team and the minimum only: neither a member nor the exact number of
    active readers (``readers`` keeps it for the library's own use).

    >>> str(GroupTooSmall("ops", 2, 5))
    "team 'ops' has too few distinct active readers for a shared list; at least 5 are needed"
    """

    def __init__(self, team: str | None, readers: int, minimum: int) -> None:
        self.team = team
        self.readers = readers
        self.minimum = minimum
        super().__init__(str(self))

    def __str__(self) -> str:
        who = "the group" if self.team is None else f"team {self.team!r}"
        return (
            f"{who} has too few distinct active readers for a shared list; at least {self.minimum} are needed"
        )

    def __reduce__(self):
        return (type(self), (self.team, self.readers, self.minimum))


class ClusterUnavailable(RankrecError):
    """A Dask cluster that cannot run the work: not reachable, no workers, workers that cannot read the
    folder or run another rankrec, a block that lost its worker too often; nothing was published.

    >>> str(ClusterUnavailable("tcp://10.0.0.5:8786", "cannot connect (timed out)"))
    'cluster tcp://10.0.0.5:8786 cannot be used: cannot connect (timed out); nothing was published'
    """

    def __init__(self, where: str, reason: str) -> None:
        self.where = str(where)
        self.reason = reason
        super().__init__(str(self))

    def __str__(self) -> str:
        return f"cluster {self.where} cannot be used: {self.reason}; nothing was published"

    def __reduce__(self):
        return (type(self), (self.where, self.reason))


# -- storage ---------------------------------------------------------------------------------------
class StoreUnavailable(RankrecError):
    """The store cannot be used just now (locked by another writer, an I/O error); nothing was
    changed by the call that met it. ``reason`` is SQLite's or the system's short message.

    >>> str(StoreUnavailable("wiki.db", "database is locked"))
    'wiki.db: the store cannot be used just now (database is locked); nothing was changed'
    """

    def __init__(self, path: str, reason: str) -> None:
        self.path = str(path)
        self.reason = reason
        super().__init__(str(self))

    def __str__(self) -> str:
        return f"{self.path}: the store cannot be used just now ({self.reason}); nothing was changed"

    def __reduce__(self):
        return (type(self), (self.path, self.reason))


class NoSpace(RankrecError):
    """No space left on the device (or quota) where ``path`` is written; what was there before is kept.

    >>> str(NoSpace("wiki-index"))
    'no space left on device writing wiki-index; nothing was changed (the previous data is kept)'
    """

    def __init__(self, path: str) -> None:
        self.path = str(path)
        super().__init__(str(self))

    def __str__(self) -> str:
        return f"no space left on device writing {self.path}; nothing was changed (the previous data is kept)"

    def __reduce__(self):
        return (type(self), (self.path,))


# -- evaluation ------------------------------------------------------------------------------------
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
        return (
            f"cutoff {_iso(self.cutoff)} lies outside the views, which run from {_iso(self.first)} "
            f"to {_iso(self.last)}"
        )

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

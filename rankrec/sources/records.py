"""Plain records that the readers yield. Each carries its provenance (file, line).

Readers never touch the store or the graph; they yield these records, or an
:class:`rankrec.errors.InputError` *value* (not raised) for every bad record they skip,
so that the importer decides whether to stop (``--strict``) or to report and go on.
Errors that make the rest of a file unreadable (a truncated gzip stream, say) are
yielded the same way, after which the reader stops.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True, slots=True)
class Origin:
    file: str
    line: int | None = None

    def __str__(self) -> str:
        return self.file if self.line is None else f"{self.file}:{self.line}"


@dataclass(frozen=True, slots=True)
class PageRecord:
    """One wiki page. ``groups`` empty means everyone may see it."""

    page: str
    title: str
    origin: Origin
    space: str | None = None
    tags: tuple[str, ...] = ()
    groups: tuple[str, ...] = ()
    archived: bool = False
    url: str | None = None
    external_links: int = 0


@dataclass(frozen=True, slots=True)
class LinkRecord:
    """A link from page ``source`` to page ``target`` (page ids; the target may not exist)."""

    source: str
    target: str
    origin: Origin
    weight: float = 1.0


@dataclass(frozen=True, slots=True)
class ViewRecord:
    """One page view; ``timestamp`` in Unix seconds (UTC), ``dwell`` in seconds or None."""

    user: str
    page: str
    timestamp: float
    origin: Origin
    dwell: float | None = None


@dataclass(frozen=True, slots=True)
class MembershipRecord:
    """``user`` belongs to team or access group ``name``; ``kind`` is "team" or "group"."""

    user: str
    name: str
    kind: str
    origin: Origin


Record = PageRecord | LinkRecord | ViewRecord | MembershipRecord

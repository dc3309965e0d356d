"""Import sources into the store: one transaction for the whole call, strict or forgiving.

Forgiving (default): bad records are skipped and reported; the call fails only when no good
record was read at all. Strict: the first bad record raises its InputError and the store is
left exactly as it was.

A page's text and the places of its links go in with it: a re-imported page replaces its text
(a source without text leaves it without) and its links' places, as it replaces its out-links.

A folder of pages (Markdown, HTML) is a site, shaped as a whole before anything of it is written
(:func:`rankrec.sources.shape_site`): the title prefix or suffix that most of its pages carry is cut
off, and a site without folders gets its spaces from its own structure. What was found is in the
report and in the store (:meth:`rankrec.store.Store.site_shapes`). Its files may be parsed in worker
processes (``workers``); they come back in file order, so the store is the same as with one.
"""

from __future__ import annotations

import time
from collections import Counter
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ._validation import check_choice, check_count, id_problem, quoted
from .errors import InputError
from .privacy import stored_id
from .progress import Progress, report
from .sources import SPACE_MODES, SiteShape, detect_format, read_source, shape_site
from .sources.records import EdgeRows, LinkRecord, MembershipRecord, PageRecord, ViewRecord, ViewRows
from .store import Store

_BATCH = 50_000
_USERS_REMEMBERED = 1_000_000
_PAGES = 1_000  # described pages written together (their text, at most 64 KiB each, waits in memory)
#: formats whose page records only say "this page exists" (their title is the id)
_IMPLICIT_PAGES = {"edges"}
#: formats whose page records come with the page's whole set of out-links
_SNAPSHOT_PAGES = {"markdown", "html"}


@dataclass(frozen=True)
class ImportReport:
    """What one source brought: records by kind, the bad records skipped, the lines dropped."""

    source: str
    format: str
    records: dict[str, int]
    errors: tuple[InputError, ...]
    error_count: int
    dropped: dict[str, int]
    seconds: float
    site: SiteShape | None = None  # a folder of pages: what was found of its site

    @property
    def good(self) -> int:
        return sum(self.records.values())


@dataclass
class _Batch:
    """Rows waiting to be written; a page's old out-links are forgotten before its first new one."""

    pages: list = field(default_factory=list)  # (PageRecord, whether its links are a snapshot)
    links: list = field(default_factory=list)
    places: list = field(default_factory=list)  # (source, target, place, occurrences)
    views: list = field(default_factory=list)
    memberships: list = field(default_factory=list)
    cleared: set | None = field(default_factory=set)  # None: the store held no links, none to forget
    page_ids: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))  # an edge list's
    # page numbers -> the store's row ids

    def flush(self, store: Store, force: bool = False) -> None:
        links_due = bool(self.links) and (force or len(self.links) >= _BATCH)
        if self.pages and (force or links_due or len(self.pages) >= _PAGES):
            # before any links: a snapshot page forgets its old out-links before its new ones go in
            store.put_pages([record for record, _ in self.pages])
            if self.cleared is not None:
                snapshots = (record.page for record, snapshot in self.pages if snapshot)
                fresh = [page for page in dict.fromkeys(snapshots) if page not in self.cleared]
                store.clear_links_from(fresh)
                self.cleared.update(fresh)
            self.pages.clear()
        if links_due:
            if self.cleared is not None:
                fresh = {row[0] for row in self.links} - self.cleared
                store.clear_links_from(fresh)
                self.cleared |= fresh
            store.put_links(self.links)
            store.put_link_places(self.places)
            self.links.clear()
            self.places.clear()
        if self.views and (force or len(self.views) >= _BATCH):
            store.put_views(self.views)
            self.views.clear()
        if self.memberships and (force or len(self.memberships) >= _BATCH):
            store.put_memberships(self.memberships)
            self.memberships.clear()


class _PageLedger:
    """What one call carries across its sources: the page ids seen (to refuse a second description
    with another title) and how user ids are stored (as given, or as keyed pseudonyms)."""

    def __init__(self, pseudonym_key: bytes | None = None) -> None:
        self.key = pseudonym_key
        self.seen: dict[str, tuple[str, str]] = {}
        self.stored: dict[str, str] = {}  # user id -> how it is stored (a pseudonym is a keyed hash each)

    def user(self, user: str) -> str:
        found = self.stored.get(user)
        if found is None:
            found = stored_id(self.key, user)
            if len(self.stored) < _USERS_REMEMBERED:
                self.stored[user] = found
        return found

    def check(self, record: PageRecord) -> InputError | None:
        first = self.seen.get(record.page)
        if first is None:
            self.seen[record.page] = (record.title, str(record.origin))
            return None
        if first[0] != record.title:
            return InputError(
                record.origin.file,
                record.origin.line,
                f"duplicate page id {record.page!r} with title {record.title!r}; "
                f"{first[1]} gave it the title {first[0]!r} (kept that one)",
            )
        return None


def import_sources(
    store: Store,
    sources: Sequence[str | Path | tuple[str | Path, str]],
    *,
    strict: bool = False,
    error_cap: int = 1000,
    progress: Progress | None = None,
    pseudonym_key: bytes | None = None,
    keep_title_affixes: bool = False,
    spaces: str = "auto",
    workers: int = 1,
    **options: Any,
) -> list[ImportReport]:
    """Import every source into ``store`` in one transaction and report on each.

    Parameters
    ----------
    sources
        Paths (format detected) or ``(path, format)`` pairs; format ``"auto"`` also detects.
    strict
        Raise the first InputError (store unchanged) instead of skipping bad records.
    error_cap
        How many InputErrors each report keeps (``error_count`` counts them all).
    progress
        ``progress("importing", records handled so far, 0)`` (the total is not known in advance), and
        for a folder of pages ``progress("parsing files", files parsed, files)``.
    pseudonym_key
        Store every user id of views and memberships as its keyed pseudonym
        (:func:`rankrec.privacy.pseudonym`), the same one the service uses with that key.
    keep_title_affixes
        Folders of pages: keep the titles as the pages give them, site name and all (by default the
        prefix or suffix common to at least 60% of a folder's pages is cut off).
    spaces
        Folders of pages: ``auto`` (a page's first folder when most pages are in folders, else spaces
        from the site's structure: "up" links, its table-of-contents page, file names), ``folders``
        (first folders only) or ``none`` (no spaces from the layout).
    workers
        Folders of pages: processes parsing the files (1: this one). The store is the same either way.
    options
        Reader options (see :func:`rankrec.sources.read_source`).

    Raises
    ------
    InputError
        In strict mode, the first bad record; otherwise when no source yielded a good record
        (the store is then left unchanged).
    """
    check_choice("spaces", spaces, SPACE_MODES)
    check_count("workers", workers)
    site = {"keep_title_affixes": bool(keep_title_affixes), "spaces": spaces}
    options = {**options, "workers": workers, "progress": progress}
    jobs = []
    for item in sources:
        path, format = (item, "auto") if isinstance(item, str | Path) else item
        jobs.append((str(path), detect_format(path) if format == "auto" else format))
    reports: list[ImportReport] = []
    ledger = _PageLedger(pseudonym_key)
    handled = 0

    def counted(records: int) -> None:
        nonlocal handled
        handled += records
        report(progress, "importing", handled, 0)

    with store.transaction():
        cleared = None if store.holds_no_links() else set()  # None: no page has old out-links to forget
        for path, format in jobs:
            reports.append(
                _import_one(store, path, format, ledger, cleared, strict, error_cap, counted, site, options)
            )
        if not any(report.good for report in reports):
            first = next((error for report in reports for error in report.errors), None)
            reason = "no good record was read" + (f"; first problem: {first}" if first else "")
            raise InputError(", ".join(path for path, _ in jobs), None, reason)
    return reports


def _import_one(
    store, path, format, ledger, cleared, strict, error_cap, progress, site, options
) -> ImportReport:
    started = time.perf_counter()
    records: Counter[str] = Counter()
    dropped: Counter[str] = Counter()
    errors: list[InputError] = []
    error_count = 0
    batch = _Batch(cleared=cleared)
    pending = 0
    items = read_source(path, format, tally=dropped, **options)
    shape = None
    if format in _SNAPSHOT_PAGES:  # a site: shaped as a whole (its reader holds all its pages anyway)
        items, shape = shape_site(list(items), **site)
        store.put_site_shape(path, shape.summary())
    for item in items:
        if isinstance(item, InputError):
            error = item
        elif isinstance(item, ViewRows):
            users = [ledger.user(user) for user in item.users]
            batch.views.extend(zip(users, item.pages, item.seconds, item.dwells, strict=True))
            records["views"] += len(item.lines)
            pending += len(item.lines)
            error = None
        elif isinstance(item, EdgeRows):
            _put_edges(store, item, batch)
            records["pages"] += len(item.pages)
            records["links"] += len(item.sources)
            pending += len(item.sources)
            error = None
        else:
            error = _put(store, item, batch, ledger, format)
            if error is None:
                records[_KIND[type(item)]] += 1
        if error is not None:
            if strict:
                raise error
            error_count += 1
            if len(errors) < error_cap:
                errors.append(error)
        pending += 1
        if pending >= 10_000:
            batch.flush(store)
            if progress:
                progress(pending)
            pending = 0
    batch.flush(store, force=True)
    if progress and pending:
        progress(pending)
    store.log_import(path, format, sum(records.values()), error_count)
    return ImportReport(
        source=path,
        format=format,
        records=dict(records),
        errors=tuple(errors),
        error_count=error_count,
        dropped=dict(dropped),
        seconds=time.perf_counter() - started,
        site=shape,
    )


_KIND = {PageRecord: "pages", LinkRecord: "links", ViewRecord: "views", MembershipRecord: "memberships"}


def _ids(item) -> tuple[tuple[str, str], ...]:
    """``(what, id)`` of every id a record would store."""
    if isinstance(item, ViewRecord):
        return (("user id", item.user), ("page id", item.page))
    if isinstance(item, LinkRecord):
        return (("source id", item.source), ("target id", item.target))
    if isinstance(item, PageRecord):
        return (("page id", item.page), *(("group name", name) for name in item.groups))
    if isinstance(item, MembershipRecord):
        return (("user id", item.user), (f"{item.kind} name", item.name))
    return ()


def _bad_id(item) -> InputError | None:
    """The InputError of a record holding an id that no entry point accepts (every format's records
    pass here: ids derived from file names, links and log lines too), else None."""
    for what, value in _ids(item):
        problem = id_problem(value) if isinstance(value, str) else "is not a string"
        if problem is not None:
            shown = quoted(value) if isinstance(value, str) else type(value).__name__
            return InputError(item.origin.file, item.origin.line, f"{what} {problem}; got {shown}")
    return None


def _put_edges(store, rows: EdgeRows, batch: _Batch) -> None:
    """A run of an edge list's rows: its new endpoints marked present (as PageRecords of an edge list
    would be), its links put (the store holds them until it merges many). The reader checked every id."""
    new = store.put_named_pages(rows.pages, [f"{rows.file}:{line}" for line in rows.page_lines])
    batch.page_ids = np.concatenate([batch.page_ids, np.asarray(new, dtype=np.int64)])
    if batch.cleared is not None:  # as _Batch.flush does: a source forgets its old out-links first
        fresh = set(rows.sources) - batch.cleared
        store.clear_links_from(fresh)
        batch.cleared |= fresh
    ids = batch.page_ids  # the reader's page numbers -> the store's row ids
    sources, targets = ids[rows.source_numbers], ids[rows.target_numbers]
    store.put_link_ids(sources, targets, rows.weights, rows.file, rows.lines)


def _put(store, item, batch: _Batch, ledger: _PageLedger, format: str):
    error = _bad_id(item)
    if error is not None:
        return error
    if isinstance(item, ViewRecord):
        batch.views.append((ledger.user(item.user), item.page, item.timestamp, item.dwell))
    elif isinstance(item, LinkRecord):
        if item.source == item.target:
            return InputError(item.origin.file, item.origin.line, f"self-link of {item.source!r} dropped")
        batch.links.append((item.source, item.target, item.weight, item.origin.file, item.origin.line))
        batch.places.extend((item.source, item.target, place, count) for place, count in item.occurrences())
    elif isinstance(item, PageRecord):
        if format in _IMPLICIT_PAGES:
            store.put_page(item, describe=False)
            return None
        error = ledger.check(item)
        if error is not None:
            return error
        batch.pages.append((item, format in _SNAPSHOT_PAGES))
        if len(batch.pages) >= _PAGES:
            batch.flush(store)
    elif isinstance(item, MembershipRecord):
        batch.memberships.append((item.kind, item.name, ledger.user(item.user)))
    else:  # pragma: no cover - a reader bug, not bad input
        raise TypeError(f"reader yielded {type(item).__name__}, not a record")
    return None

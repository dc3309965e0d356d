"""The wiki store: one SQLite file (WAL mode) holding the wiki snapshot and its reading history.

Pages are numbered by SQLite row ids. A page that is only *referred to* (a link target or a
viewed page that no source has described) is kept as a row with ``present = 0``, so links to
pages that do not exist are counted and reported instead of being dropped, and a later import
that brings the page makes them resolve. Imports run inside :meth:`Store.transaction`: all of
it or nothing. This module, :mod:`rankrec._store_reads` and :mod:`rankrec._store_text` (the named
read methods ``Store`` inherits), :mod:`rankrec._store_writes` (the import's writes, inherited the
same way) and :mod:`rankrec._store_schema` (the tables, and how older stores are brought up to them)
hold all of the project's SQL; reads that build something from several of those methods run inside
:meth:`Store.reading`, one snapshot.
"""

from __future__ import annotations

import json
import sqlite3
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from pathlib import Path

import numpy as np

from ._store_links import PendingLinks, settle, stored_count
from ._store_os import create_private, raise_unavailable, store_unavailable
from ._store_reads import StoreReads
from ._store_schema import STORE_ID_KEY, create_or_check, has_added_columns, migrate
from ._store_text import TextReads
from ._store_writes import StoreWrites
from .errors import InputError, UnknownPage


def read_store_id(path: str | Path) -> str | None:
    """The store id of the store file at ``path``, read without writing (None: ``":memory:"``, no file
    there, or a store made before ids existed)."""
    if str(path) == ":memory:" or not Path(path).is_file():
        return None
    with Store(path, create=False) as store:
        return store.store_id()


class Store(StoreReads, TextReads, StoreWrites):
    """An open wiki store. Use as a context manager, or call :meth:`close`.

    >>> with Store(":memory:") as store:
    ...     store.counts()["pages"]
    0
    """

    def __init__(self, path: str | Path, *, create: bool = True) -> None:
        self.path = str(path)
        if self.path != ":memory:" and not create and not Path(self.path).is_file():
            raise InputError(self.path, None, "no wiki store here; create one with `rankrec import`")
        try:
            if self.path != ":memory:" and create:
                create_private(Path(self.path))
            self.connection = sqlite3.connect(self.path, isolation_level=None, check_same_thread=False)
            self.connection.execute("PRAGMA journal_mode=WAL")
            self.connection.execute("PRAGMA synchronous=NORMAL")
            self.connection.execute("PRAGMA foreign_keys=ON")
            self.connection.execute("PRAGMA cache_size=-131072")  # 128 MiB of page cache for big imports
            self.connection.execute("PRAGMA temp_store=MEMORY")
            create_or_check(self.connection)
        except (sqlite3.OperationalError, OSError) as error:
            unavailable = store_unavailable(self.path, error)
            if unavailable is None:
                raise InputError(self.path, None, f"not a usable wiki store: {error}") from None
            raise unavailable from error
        except sqlite3.DatabaseError as error:
            raise InputError(self.path, None, f"not a usable wiki store: {error}") from None
        self._page_ids: dict[str, int] = {}
        self._every_page_id = False  # _page_ids holds every page of the store (within one transaction)
        self._user_ids: dict[str, int] = {}
        self._place_ids: dict[str, int] = {}
        self._text_tables = False  # known to exist (set by the first write or read that looks)
        self._columns_added = False  # _ADDED_COLUMNS known to exist (set like _text_tables)
        self._file_ids: dict[str, int] = {}
        self._migrated = False  # migrate() has run in this store's transactions (reset by a rollback)
        self._pending_links = PendingLinks()  # link writes not yet merged into the stored blocks
        self._snapshot: dict | None = None  # what a reading block has read and may read again

    # -- lifecycle -------------------------------------------------------------------------------
    def close(self) -> None:
        self.connection.close()

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc_info) -> None:
        self.close()

    @contextmanager
    def transaction(self) -> Iterator[Store]:
        """Everything inside goes in together or not at all (also on KeyboardInterrupt)."""
        with self._transaction("BEGIN IMMEDIATE"):
            self._every_page_id = False  # another connection may have added pages since
            if not self._migrated:  # a store made before version 1's additions gains them now
                migrate(self.connection, self.path)
                self._text_tables = self._columns_added = self._migrated = True
            yield self
            self._settle_links()

    def _settle_links(self) -> None:
        """Merge the link writes held so far into the stored blocks (inside a write transaction)."""
        settle(self.connection, self._pending_links, self.path)

    @contextmanager
    def reading(self) -> Iterator[Store]:
        """Every read inside sees one snapshot: writes committed meanwhile wait for the next block.

        Opens one read transaction, and takes its snapshot on entry (SQLite in WAL mode gives every
        SELECT of a transaction the same snapshot); ends it on exit. Inside a reading block
        already, or inside :meth:`transaction`, it adds nothing: the outer transaction is the
        snapshot. Do not write inside a reading block.

        >>> with Store(":memory:") as store, store.reading():
        ...     store.connection.in_transaction
        True
        """
        if self.connection.in_transaction:
            yield self
            return
        with self._transaction("BEGIN"):
            self.connection.execute("SELECT count(*) FROM meta").fetchone()  # the snapshot starts here
            self._snapshot = {}  # nothing can change until the block ends: decoded links are kept
            try:
                yield self
            finally:
                self._snapshot = None

    @contextmanager
    def _transaction(self, begin: str) -> Iterator[None]:
        """``begin``, then COMMIT; ROLLBACK (and forget cached ids) when anything inside raises.

        A full disk or an unavailable store (at any step, the COMMIT too) raises
        :class:`~rankrec.errors.NoSpace` or :class:`~rankrec.errors.StoreUnavailable`
        (:func:`store_unavailable`), after the rollback: nothing of the transaction is kept.
        """
        try:
            self.connection.execute(begin)
        except (sqlite3.OperationalError, OSError) as error:
            raise_unavailable(self.path, error)
            raise
        try:
            yield
            self.connection.execute("COMMIT")
        except BaseException as error:
            if self.connection.in_transaction:  # SQLite may have rolled back already (e.g. disk full)
                self.connection.execute("ROLLBACK")
            self._page_ids.clear()
            self._every_page_id = False
            self._user_ids.clear()
            self._place_ids.clear()
            self._text_tables = False  # tables this transaction added are gone again
            self._columns_added = False  # and so are columns
            self._file_ids.clear()
            self._migrated = False  # and so is what a migration added
            self._pending_links = PendingLinks()  # and the link writes held
            raise_unavailable(self.path, error)
            raise

    # -- ids -------------------------------------------------------------------------------------
    def store_id(self) -> str | None:
        """The store's random id, made once with the store (None: a store made before ids existed,
        not written since; its next write transaction gives it one). Reading never writes.

        >>> with Store(":memory:") as first, Store(":memory:") as second:
        ...     len(first.store_id()), first.store_id() != second.store_id()
        (32, True)
        """
        row = self.connection.execute("SELECT value FROM meta WHERE key = ?", (STORE_ID_KEY,)).fetchone()
        return None if row is None else str(row[0])

    def page_id(self, page: str) -> int:
        """Row id of ``page``, adding a not-present row for a page only referred to."""
        return self._row_id(self._page_ids, "pages", "page", page)

    def user_id(self, user: str) -> int:
        return self._row_id(self._user_ids, "users", "user", user)

    def place_id(self, place: str) -> int:
        """Row id of the link place ``place`` (added if new)."""
        return self._row_id(self._place_ids, "link_places", "place", place)

    def _row_id(self, known: dict[str, int], table: str, column: str, value: str) -> int:
        """Row id of ``value`` in the unique ``column`` of ``table`` (a constant name), added if new."""
        found = known.get(value)
        if found is None:
            cursor = self.connection.execute(
                f"INSERT INTO {table} ({column}) VALUES (?) "
                f"ON CONFLICT ({column}) DO UPDATE SET {column} = {column} RETURNING id",
                (value,),
            )
            found = known[value] = cursor.fetchone()[0]
        return found

    def site_shapes(self) -> dict[str, dict]:
        """Folder source -> what its latest import found of its site (see :meth:`put_site_shape`)."""
        row = self.connection.execute("SELECT value FROM meta WHERE key = 'site_shape'").fetchone()
        return {} if row is None else dict(json.loads(row[0]))

    # -- reads of what the columns added after version 1 hold ----------------------------------------
    def _has_added_columns(self) -> bool:
        """True when the store has the columns added after version 1 (an older store, until written, not)."""
        if not self._columns_added:
            self._columns_added = has_added_columns(self.connection)
        return self._columns_added

    def same_page_link_count(self) -> int:
        """Links of present pages to themselves (section anchors, their own file), counted at import."""
        if not self._has_added_columns():
            return 0
        return int(self.scalar("SELECT coalesce(sum(same_page_links), 0) FROM pages WHERE present = 1"))

    def code_shares(self) -> np.ndarray:
        """Each present page's share of text in code blocks (:attr:`PageRecord.code_share`), in row-id
        order (as :meth:`present_pages`); zeros for a store older than the column."""
        count = int(self.scalar("SELECT count(*) FROM pages WHERE present = 1"))
        if not self._has_added_columns():
            return np.zeros(count)
        rows = self.connection.execute("SELECT code_share FROM pages WHERE present = 1 ORDER BY id")
        return np.fromiter((row[0] for row in rows), dtype=np.float64, count=count)

    def stored_link_count(self) -> int:
        """Every stored link: between present pages, to pages no source describes, and any other."""
        self._settled()
        return stored_count(self.connection)

    def unresolved_link_origins(
        self, *, target: str | None = None, source: str | None = None, limit: int = 3
    ):
        """Where the links to missing pages were read (all, or those to ``target``, or those from
        ``source``), as ``(file, line)`` pairs, first ``limit`` by file and line, and how many there are.

        The file is where the link was read, else (a store written before that was kept, or a link put
        without it) the source page's origin; the line is None when not known.
        """
        with self.reading():
            links = self._links(("sources", "targets", "files", "lines"))
            keep = ~self._present()[links.targets]
            for page, column in ((target, links.targets), (source, links.sources)):
                if page is not None:
                    row = self.connection.execute("SELECT id FROM pages WHERE page = ?", (page,)).fetchone()
                    keep &= column == (-1 if row is None else row[0])
            chosen = links.taken(keep)
            placed = chosen.size and self._has_added_columns()  # a version 1 store has no files
            files = dict(self.connection.execute("SELECT id, file FROM link_files")) if placed else {}
            unplaced = np.unique(chosen.sources[chosen.files == 0])
            origins = dict(zip(unplaced.tolist(), self._page_values(unplaced, "origin"), strict=True))
        places = [
            (files[file] if file else origins.get(page), None if line < 0 else line)
            for page, file, line in zip(
                chosen.sources.tolist(), chosen.files.tolist(), chosen.lines.tolist(), strict=True
            )
        ]
        # as SQL's ORDER BY file, line would: None first
        places.sort(key=lambda at: (at[0] is not None, at[0] or "", at[1] is not None, at[1] or 0))
        return places[: max(int(limit), 0)], chosen.size

    # -- event log upkeep (each call is its own transaction; not inside :meth:`transaction`) ------
    def append_views(self, records: Iterable, *, known_pages_only: bool = False) -> int:
        """Store a batch of views in one durable transaction; returns how many were new.

        ``records`` are objects with ``user``, ``page``, ``timestamp`` and optionally ``dwell``
        attributes (e.g. :class:`rankrec.sources.records.ViewRecord`). A view already stored, or
        given twice in the batch, is a duplicate (its identity is ``(user, page, timestamp)``) and
        is ignored. The connection switches to ``PRAGMA synchronous=FULL`` first, so the batch is
        on disk when this returns. With ``known_pages_only`` a page the wiki does not hold raises
        :class:`~rankrec.errors.UnknownPage` (for the first such record) and nothing is stored.

        >>> from types import SimpleNamespace as View
        >>> with Store(":memory:") as store:
        ...     batch = [View(user="ines", page="ops/db", timestamp=1.0e9)] * 2
        ...     store.append_views(batch), store.append_views(batch)
        (1, 0)
        """
        rows = [
            (view.user, view.page, float(view.timestamp), getattr(view, "dwell", None)) for view in records
        ]
        self.connection.execute("PRAGMA synchronous=FULL")
        with self.transaction():
            if known_pages_only:
                self._require_present([page for _, page, _, _ in rows])
            cursor = self.connection.executemany(
                "INSERT OR IGNORE INTO views (user_id, page_id, timestamp, dwell) VALUES (?, ?, ?, ?)",
                [(self.user_id(user), self.page_id(page), ts, dwell) for user, page, ts, dwell in rows],
            )
            stored = max(cursor.rowcount, 0)
        return stored

    def _require_present(self, pages: list[str]) -> None:
        """UnknownPage for the first of ``pages`` (in their order) that the wiki does not hold."""
        if not pages:
            return
        self.connection.execute(
            "CREATE TEMP TABLE IF NOT EXISTS _wanted (position INTEGER PRIMARY KEY, page TEXT NOT NULL)"
        )
        self.connection.execute("DELETE FROM _wanted")
        self.connection.executemany("INSERT INTO _wanted (page) VALUES (?)", [(page,) for page in pages])
        missing = self.connection.execute(
            "SELECT _wanted.page FROM _wanted LEFT JOIN pages ON pages.page = _wanted.page "
            "WHERE pages.present IS NOT 1 ORDER BY _wanted.position LIMIT 1"
        ).fetchone()
        self.connection.execute("DELETE FROM _wanted")
        if missing is not None:
            raise UnknownPage(missing[0])

    def delete_views_before(self, timestamp: float) -> int:
        """Delete every view older than ``timestamp`` (Unix seconds); returns how many went.

        >>> from types import SimpleNamespace as View
        >>> with Store(":memory:") as store:
        ...     _ = store.append_views([View(user="ines", page="a", timestamp=t) for t in (10, 20, 30)])
        ...     store.delete_views_before(25), store.counts()["views"]
        (2, 1)
        """
        if isinstance(timestamp, bool) or not isinstance(timestamp, (int, float)) or timestamp != timestamp:
            raise TypeError(f"timestamp must be Unix seconds (a number), got {timestamp!r}")
        with self.transaction():
            cursor = self.connection.execute("DELETE FROM views WHERE timestamp < ?", (float(timestamp),))
        return cursor.rowcount

    def erase_user(self, user: str) -> int:
        """Delete every view of ``user``, and the user row unless a membership still names it.

        Returns the number of views deleted (0 for a user the store does not know).
        """
        if not isinstance(user, str):
            raise TypeError(f"user must be a string, got {user!r}")
        with self.transaction():
            row = self.connection.execute("SELECT id FROM users WHERE user = ?", (user,)).fetchone()
            if row is None:
                return 0
            cursor = self.connection.execute("DELETE FROM views WHERE user_id = ?", (row[0],))
            deleted = cursor.rowcount
            still_named = self.connection.execute(
                "SELECT 1 FROM memberships WHERE user_id = ? LIMIT 1", (row[0],)
            ).fetchone()
            if still_named is None:
                self.connection.execute("DELETE FROM users WHERE id = ?", (row[0],))
                self._user_ids.pop(user, None)
        return deleted

"""The wiki store: one SQLite file (WAL mode) holding the wiki snapshot and its reading history.

Pages are numbered by SQLite row ids. A page that is only *referred to* (a link target or a
viewed page that no source has described) is kept as a row with ``present = 0``, so links to
pages that do not exist are counted and reported instead of being dropped, and a later import
that brings the page makes them resolve. Imports run inside :meth:`Store.transaction`: all of
it or nothing. This module, :mod:`rankrec._store_reads` (the named read methods ``Store``
inherits) and :mod:`rankrec._store_schema` (the tables, and how older stores are brought up to
them) hold all of the project's SQL; reads that build something from several of those methods
run inside :meth:`Store.reading`, one snapshot.
"""

from __future__ import annotations

import hashlib
import json
import sqlite3
import zlib
from collections.abc import Iterable, Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path

from ._store_os import create_private, raise_unavailable, store_unavailable
from ._store_reads import StoreReads
from ._store_schema import STORE_ID_KEY, create_or_check, has_added_columns, migrate
from .errors import InputError, UnknownPage
from .sources.records import HEADINGS_BYTES, TEXT_BYTES, clip_utf8


def read_store_id(path: str | Path) -> str | None:
    """The store id of the store file at ``path``, read without writing (None: ``":memory:"``, no file
    there, or a store made before ids existed)."""
    if str(path) == ":memory:" or not Path(path).is_file():
        return None
    with Store(path, create=False) as store:
        return store.store_id()


def _kept_text(record) -> tuple[bytes, str]:
    """The UTF-8 of a record's text as the store keeps it (at most TEXT_BYTES, cut at a character) and
    its SHA-256; empty bytes for a record without text."""
    data = clip_utf8(getattr(record, "text", "") or "", TEXT_BYTES).encode("utf-8")
    return data, hashlib.sha256(data).hexdigest() if data else ""


class Store(StoreReads):
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
                migrate(self.connection)
                self._text_tables = self._columns_added = self._migrated = True
            yield self

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
            yield self

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

    # -- writes (call inside a transaction) ---------------------------------------------------------
    def put_page(self, record, *, describe: bool = True) -> int:
        """Mark the page present; with ``describe`` also replace its title, space, tags, groups and text.

        The text (``record.text``, if any) is kept as zlib-compressed UTF-8, at most 64 KiB
        (:data:`~rankrec.sources.records.TEXT_BYTES`, cut at a character), with its headings and
        the SHA-256 of the kept UTF-8; a record without text leaves the page without text.
        """
        page_id = self.page_id(record.page)
        if not describe:
            self.connection.execute(
                "UPDATE pages SET present = 1, title = coalesce(title, ?), origin = coalesce(origin, ?) "
                "WHERE id = ?",
                (record.title, str(record.origin), page_id),
            )
            return page_id
        self.put_pages([record])
        return page_id

    def put_pages(self, records: Sequence) -> None:
        """:meth:`put_page` (described) of each record, one statement per table for all of them; a page
        described twice in ``records`` keeps its last description, as one put_page after another would."""
        last = {record.page: record for record in records}  # first place of each page, last record
        chosen = list(last.values())
        ids = [self.page_id(record.page) for record in chosen]
        pairs = list(zip(chosen, ids, strict=True))
        connection = self.connection
        connection.executemany(
            "UPDATE pages SET present = 1, title = ?, space = ?, url = ?, archived = ?, external_links = ?, "
            "origin = ? WHERE id = ?",
            [
                (r.title, r.space, r.url, int(r.archived), r.external_links, str(r.origin), page_id)
                for r, page_id in pairs
            ],
        )
        if self._columns_added:  # known inside a transaction, where pages are put
            connection.executemany(
                "UPDATE pages SET same_page_links = ? WHERE id = ?",
                [(int(getattr(r, "same_page_links", 0)), page_id) for r, page_id in pairs],
            )
        each = [(page_id,) for page_id in ids]
        for table in ("page_tags", "page_groups", "page_text"):  # constant names
            connection.executemany(f"DELETE FROM {table} WHERE page_id = ?", each)
        connection.executemany(
            "INSERT OR IGNORE INTO page_tags (page_id, tag) VALUES (?, ?)",
            [(page_id, tag) for r, page_id in pairs for tag in r.tags],
        )
        connection.executemany(
            "INSERT OR IGNORE INTO page_groups (page_id, name) VALUES (?, ?)",
            [(page_id, name) for r, page_id in pairs for name in r.groups],
        )
        texts = []
        for r, page_id in pairs:
            data, digest = _kept_text(r)
            if data:
                headings = clip_utf8(getattr(r, "headings", "") or "", HEADINGS_BYTES)
                texts.append((page_id, zlib.compress(data), headings, digest, len(data)))
        connection.executemany(
            "INSERT INTO page_text (page_id, text, headings, sha256, text_bytes) VALUES (?, ?, ?, ?, ?)",
            texts,
        )

    @contextmanager
    def links_loading(self) -> Iterator[bool]:
        """Inside :meth:`transaction`, around writing many links: when the store holds none yet, the
        index of links by target is dropped and built again at the end, one sort instead of a random
        insert per link (a rollback brings it back as it was). Gives whether the store held no links,
        in which case no page has old out-links (or places of them) to forget."""
        empty = not any(
            self.connection.execute(f"SELECT 1 FROM {table} LIMIT 1").fetchone()
            for table in ("links", "link_occurrences")
        )
        if not empty:
            yield False
            return
        self.connection.execute("DROP INDEX IF EXISTS links_by_target")
        yield True
        self.connection.execute("CREATE INDEX IF NOT EXISTS links_by_target ON links (target_id)")

    def put_named_pages(self, pages: Sequence[str], origins: Sequence[str]) -> None:
        """Mark ``pages`` present as a source that only names them does (an edge list's endpoints):
        a page without a title or origin gets its id and ``origins``' entry; one with them keeps them.
        The same as :meth:`put_page` with ``describe=False``, in two statements for all of them (the
        first call of a transaction reads every page id once)."""
        known = self._page_ids
        if not self._every_page_id:
            known.update(self.connection.execute("SELECT page, id FROM pages"))
            self._every_page_id = True
        old = [(origin, known[page]) for page, origin in zip(pages, origins, strict=True) if page in known]
        new = [(page, origin) for page, origin in zip(pages, origins, strict=True) if page not in known]
        self.connection.executemany(
            "UPDATE pages SET present = 1, title = coalesce(title, page), origin = coalesce(origin, ?) "
            "WHERE id = ?",
            old,
        )
        first = self.connection.execute("SELECT coalesce(max(id), 0) + 1 FROM pages").fetchone()[0]
        numbered = [(first + offset, page, origin) for offset, (page, origin) in enumerate(new)]
        self.connection.executemany(  # the ids SQLite itself would give, one after another
            "INSERT INTO pages (id, page, title, origin, present) VALUES (?1, ?2, ?2, ?3, 1)", numbered
        )
        known.update((page, number) for number, page, _ in numbered)

    def clear_links_from(self, pages: Iterable[str]) -> None:
        """Forget the outgoing links of ``pages`` and where they sat (before their new snapshot's)."""
        rows = [(self.page_id(page),) for page in pages]
        self.connection.executemany("DELETE FROM links WHERE source_id = ?", rows)
        self.connection.executemany("DELETE FROM link_occurrences WHERE source_id = ?", rows)

    def put_links(self, rows: Iterable[tuple]) -> None:
        """``(source, target, weight)``, or ``(source, target, weight, file, line)`` with where the link
        was read (kept for `rankrec stats` to name; inside :meth:`transaction`, which adds the columns)."""
        plain, placed = [], []
        for row in rows:
            (placed if len(row) > 3 else plain).append(row)
        ids = self._page_ids
        for page in {page for row in (*plain, *placed) for page in row[:2]} - ids.keys():
            self.page_id(page)  # pages only referred to: a row each, once
        self.connection.executemany(
            "INSERT INTO links (source_id, target_id, weight) VALUES (?, ?, ?) "
            "ON CONFLICT (source_id, target_id) DO UPDATE SET weight = excluded.weight",
            [(ids[source], ids[target], weight) for source, target, weight in plain],
        )
        if placed:
            files = {file: self._file_id(file) for file in {row[3] for row in placed}}
            self.connection.executemany(
                "INSERT INTO links (source_id, target_id, weight, file_id, line) VALUES (?, ?, ?, ?, ?) "
                "ON CONFLICT (source_id, target_id) DO UPDATE SET weight = excluded.weight, "
                "file_id = excluded.file_id, line = excluded.line",
                [
                    (ids[source], ids[target], weight, files[file], line)
                    for source, target, weight, file, line in placed
                ],
            )

    def _file_id(self, file: str | None) -> int | None:
        return None if file is None else self._row_id(self._file_ids, "link_files", "file", file)

    def put_link_places(self, rows: Iterable[tuple[str, str, str, int]]) -> None:
        """``(source, target, place, occurrences)``: how often a link sits in each place of its page."""
        self.connection.executemany(
            "INSERT INTO link_occurrences (source_id, target_id, place_id, occurrences) VALUES (?, ?, ?, ?) "
            "ON CONFLICT (source_id, target_id, place_id) DO UPDATE SET occurrences = excluded.occurrences",
            [
                (self.page_id(source), self.page_id(target), self.place_id(place), int(count))
                for source, target, place, count in rows
            ],
        )

    def put_views(self, rows: Iterable[tuple[str, str, float, float | None]]) -> None:
        self.connection.executemany(
            "INSERT OR IGNORE INTO views (user_id, page_id, timestamp, dwell) VALUES (?, ?, ?, ?)",
            [(self.user_id(user), self.page_id(page), ts, dwell) for user, page, ts, dwell in rows],
        )

    def put_memberships(self, rows: Iterable[tuple[str, str, str]]) -> None:
        self.connection.executemany(
            "INSERT OR IGNORE INTO memberships (kind, name, user_id) VALUES (?, ?, ?)",
            [(kind, name, self.user_id(user)) for kind, name, user in rows],
        )

    def log_import(self, source: str, format: str, records: int, errors: int) -> None:
        self.connection.execute(
            "INSERT INTO imports (source, format, records, errors) VALUES (?, ?, ?, ?)",
            (source, format, records, errors),
        )

    def put_site_shape(self, source: str, shape: dict) -> None:
        """Record what the import of folder ``source`` found of its site (title affixes, how its spaces
        were found), replacing what an earlier import of it recorded (``meta`` key ``site_shape``)."""
        shapes = self.site_shapes()
        shapes[source] = shape
        self.connection.execute(
            "INSERT INTO meta (key, value) VALUES ('site_shape', ?) "
            "ON CONFLICT (key) DO UPDATE SET value = excluded.value",
            (json.dumps(shapes, sort_keys=True, ensure_ascii=False),),
        )

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

    def stored_link_count(self) -> int:
        """Every stored link: between present pages, to pages no source describes, and any other."""
        return int(self.scalar("SELECT count(*) FROM links"))

    def unresolved_link_origins(
        self, *, target: str | None = None, source: str | None = None, limit: int = 3
    ):
        """Where the links to missing pages were read (all, or those to ``target``, or those from
        ``source``), as ``(file, line)`` pairs, first ``limit`` by file and line, and how many there are.

        The file is where the link was read, else (a store written before that was kept, or a link put
        without it) the source page's origin; the line is None when not known.
        """
        where, parameters = "t.present = 0", []
        if target is not None:
            where, parameters = where + " AND t.page = ?", [*parameters, target]
        if source is not None:
            where, parameters = where + " AND s.page = ?", [*parameters, source]
        joins = (
            "FROM links JOIN pages AS t ON t.id = links.target_id JOIN pages AS s ON s.id = links.source_id"
        )
        with self.reading():
            if self._has_added_columns():
                select = "SELECT coalesce(f.file, s.origin) AS file, links.line AS line "
                joins += " LEFT JOIN link_files AS f ON f.id = links.file_id"
            else:
                select = "SELECT s.origin AS file, NULL AS line "
            total = self.scalar(f"SELECT count(*) {joins} WHERE {where}", tuple(parameters))
            rows = self.connection.execute(
                f"{select}{joins} WHERE {where} ORDER BY file, line LIMIT ?", (*parameters, limit)
            ).fetchall()
        return [(file, line) for file, line in rows], int(total)

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

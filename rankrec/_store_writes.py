"""The wiki store's import writes, which :class:`rankrec.store.Store` inherits: pages (one at a time or
a thousand at once), an edge list's named endpoints, links and where they sit, views, memberships, the
import log and site shapes. Call them inside :meth:`rankrec.store.Store.transaction`.
"""

from __future__ import annotations

import functools
import hashlib
import json
import zlib
from collections.abc import Iterable, Sequence
from operator import itemgetter

import numpy as np

from ._store_links import PENDING_LINKS, Links
from .sources.records import HEADINGS_BYTES, TEXT_BYTES, clip_utf8


def _kept_text(record) -> tuple[bytes, str]:
    """The UTF-8 of a record's text as the store keeps it (at most TEXT_BYTES, cut at a character) and
    its SHA-256; empty bytes for a record without text."""
    data = clip_utf8(getattr(record, "text", "") or "", TEXT_BYTES).encode("utf-8")
    return data, hashlib.sha256(data).hexdigest() if data else ""


def _in_a_transaction(method):
    """A link write run inside the open write transaction, or in one of its own when none is open (the
    links it holds are merged into the store when that transaction ends)."""

    @functools.wraps(method)
    def written(self, *args, **kwargs):
        if self.connection.in_transaction:
            return method(self, *args, **kwargs)
        with self.transaction():
            return method(self, *args, **kwargs)

    return written


_IN_LIST = 500
"""Most values in one ``IN (...)`` list (SQLite allows 32,766 parameters; smaller lists plan the same)."""


class StoreWrites:
    """The write methods of :class:`rankrec.store.Store` (they use its connection and id caches)."""

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
        known = self._ids_of(self._page_ids, "pages", "page", [record.page for record in chosen])
        ids = [known[record.page] for record in chosen]
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
                "UPDATE pages SET same_page_links = ?, code_share = ? WHERE id = ?",
                [
                    (int(getattr(r, "same_page_links", 0)), float(getattr(r, "code_share", 0.0)), page_id)
                    for r, page_id in pairs
                ],
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

    def holds_no_links(self) -> bool:
        """Whether the store holds no links (nor places of them): then no page has old out-links to
        forget before its new ones."""
        held = self.connection.execute("SELECT 1 FROM link_occurrences LIMIT 1").fetchone()
        return held is None and self.stored_link_count() == 0

    def put_named_pages(self, pages: Sequence[str], origins: Sequence[str]) -> list[int]:
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
        return [known[page] for page in pages]

    @_in_a_transaction
    def clear_links_from(self, pages: Iterable[str]) -> None:
        """Forget the outgoing links of ``pages`` and where they sat (before their new snapshot's)."""
        rows = [self.page_id(page) for page in pages]
        self._pending_links.clear(np.asarray(rows, dtype=np.int64))
        forgotten = [(row,) for row in rows]
        self.connection.executemany("DELETE FROM link_occurrences WHERE source_id = ?", forgotten)

    @_in_a_transaction
    def put_links(self, rows: Iterable[tuple]) -> None:
        """``(source, target, weight)``, or ``(source, target, weight, file, line)`` with where the link
        was read (kept for `rankrec stats` to name; inside :meth:`transaction`). A link already stored
        takes the new weight, file and line. Held, and merged into the stored blocks many at a time
        (:mod:`rankrec._store_links`)."""
        rows = list(rows)
        files = {file: self._file_id(file) or 0 for file in {row[3] for row in rows if len(row) > 3}}
        ids = self._page_ids
        for page in {page for row in rows for page in row[:2]} - ids.keys():
            self.page_id(page)  # pages only referred to: a row each, once
        count = len(rows)
        lines = (row[4] if len(row) > 4 and row[4] is not None else -1 for row in rows)
        self._hold(
            Links(
                np.fromiter((ids[row[0]] for row in rows), np.int64, count),
                np.fromiter((ids[row[1]] for row in rows), np.int64, count),
                np.fromiter((row[2] for row in rows), np.float64, count),
                np.fromiter((files.get(row[3], 0) if len(row) > 3 else 0 for row in rows), np.int64, count),
                np.fromiter(lines, np.int64, count),
            )
        )

    @_in_a_transaction
    def put_link_ids(self, sources: np.ndarray, targets: np.ndarray, weights, file: str, lines) -> None:
        """Links by page row id, column by column, all read from ``file`` (an edge list's run): as
        :meth:`put_links`."""
        self._hold(
            Links(
                np.asarray(sources, dtype=np.int64),
                np.asarray(targets, dtype=np.int64),
                np.asarray(weights, dtype=np.float64),
                np.full(len(sources), self._file_id(file) or 0, dtype=np.int64),
                np.asarray(lines, dtype=np.int64),
            )
        )

    def _hold(self, links: Links) -> None:
        """Hold ``links`` (put after everything held), merging what is held when it is much."""
        self._pending_links.put(links)
        if self._pending_links.count >= PENDING_LINKS:
            self._settle_links()

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
        """``(user, page, timestamp, dwell)`` rows; a view already held (same user, page and time) keeps
        its first dwell. Users and pages new to the store get their rows (a page only viewed is not
        present), with the ids one :meth:`user_id` / :meth:`page_id` call after another would give."""
        rows = list(rows)
        users = self._ids_of(self._user_ids, "users", "user", [row[0] for row in rows])
        pages = self._ids_of(self._page_ids, "pages", "page", [row[1] for row in rows])
        numbered = [(users[user], pages[page], ts, dwell) for user, page, ts, dwell in rows]
        numbered.sort(key=itemgetter(0, 1, 2))  # stable: in key order the table's tree is only appended to
        self.connection.executemany(
            "INSERT OR IGNORE INTO views (user_id, page_id, timestamp, dwell) VALUES (?, ?, ?, ?)", numbered
        )

    def _ids_of(
        self, known: dict[str, int], table: str, column: str, values: Sequence[str]
    ) -> dict[str, int]:
        """``known`` (an id cache of the store) holding every value of ``values``: the ids of the rows of
        ``table`` (a constant name) whose unique ``column`` holds them, new rows for new values in order of
        first appearance, a few statements for all of them."""
        fresh = [value for value in dict.fromkeys(values) if value not in known]
        for start in range(0, len(fresh), _IN_LIST):
            part = fresh[start : start + _IN_LIST]
            marks = ",".join("?" * len(part))
            known.update(
                self.connection.execute(f"SELECT {column}, id FROM {table} WHERE {column} IN ({marks})", part)
            )
        new = [value for value in fresh if value not in known]
        if new:
            first = self.connection.execute(f"SELECT coalesce(max(id), 0) + 1 FROM {table}").fetchone()[0]
            numbered = [(first + offset, value) for offset, value in enumerate(new)]
            self.connection.executemany(f"INSERT INTO {table} (id, {column}) VALUES (?, ?)", numbered)
            known.update((value, number) for number, value in numbered)
        return known

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

"""The store's reads: every question the library asks of a wiki store, one named method each.

:class:`rankrec.store.Store` inherits these; this module exists only to keep ``store.py`` short (the
reads of the pages' stored text are in :mod:`rankrec._store_text`).
Nothing outside the store writes SQL: graph, profiles, topics, stats, build, recommend, the
demo and the evaluation call the methods below. Methods return plain Python values or numpy
arrays; pages and users are named by their row ids (``pages.id``, ``users.id``), which is
what :func:`rankrec.graph.dense_numbers` maps into a graph's numbering.

A read that builds something from several of these calls should run them inside
:meth:`rankrec.store.Store.reading`, so that all of them see one snapshot of the store.
"""

from __future__ import annotations

import itertools
import sqlite3
from collections.abc import Iterator, Sequence

import numpy as np

from ._store_links import Links, stored_links

_CHUNK = 500  # row ids per IN (...) query: well under SQLite's limit on bound parameters
_TEXT_TABLES = ("page_text", "link_places", "link_occurrences")  # absent from stores made before them
_TOPIC_PAIRS = {
    "spaces": "SELECT space, id FROM pages WHERE present = 1 AND archived = 0 AND space IS NOT NULL",
    "tags": "SELECT tag, pages.id FROM page_tags JOIN pages ON pages.id = page_id "
    "WHERE present = 1 AND archived = 0",
}


def _chunks(rows: Sequence[int]) -> Iterator[tuple[list[int], str]]:
    """``rows`` in pieces of at most ``_CHUNK``, each with its ``?,?,...`` placeholder list."""
    for first in range(0, len(rows), _CHUNK):
        chunk = [int(row) for row in rows[first : first + _CHUNK]]
        yield chunk, ",".join("?" * len(chunk))


class StoreReads:
    """Read methods of :class:`rankrec.store.Store`, which supplies ``connection`` and ``reading``."""

    connection: sqlite3.Connection
    path: str
    _text_tables: bool
    _pending_links: object  # rankrec._store_links.PendingLinks, merged by the store's _settle_links
    _snapshot: dict | None  # inside a reading block: what it read (:meth:`_kept`), else None

    # -- plain queries -------------------------------------------------------------------------
    def scalar(self, sql: str, parameters: tuple = ()):
        """The first column of the first row of ``sql`` (for tests and the store's own counts)."""
        return self.connection.execute(sql, parameters).fetchone()[0]

    def _columns(self, sql: str, count: int, width: int) -> np.ndarray:
        """A query's rows as a (count, width) float64 array, read without a list of tuples."""
        cursor = self.connection.execute(sql)
        flat = np.fromiter(itertools.chain.from_iterable(cursor), dtype=np.float64, count=count * width)
        return flat.reshape(count, width)

    def _has_text_tables(self) -> bool:
        """True when the store has its text and link-place tables (an older store may not, until written)."""
        if not self._text_tables:
            marks = ",".join("?" * len(_TEXT_TABLES))
            found = self.scalar(
                f"SELECT count(*) FROM sqlite_master WHERE type = 'table' AND name IN ({marks})", _TEXT_TABLES
            )
            self._text_tables = found == len(_TEXT_TABLES)
        return self._text_tables

    # -- sizes -----------------------------------------------------------------------------------
    def counts(self) -> dict[str, int]:
        """Sizes of the snapshot: pages, links, unresolved links, views, users, teams, groups."""
        with self.reading():
            links = self._links(("sources", "targets"))
            present = self._present()
            resolved = present[links.targets]
            return {
                "pages": self.scalar("SELECT count(*) FROM pages WHERE present = 1"),
                "links": int(np.count_nonzero(resolved & present[links.sources])),
                "unresolved_links": int(resolved.size - np.count_nonzero(resolved)),
                "views": self.scalar("SELECT count(*) FROM views"),
                "users": self.scalar("SELECT count(*) FROM users"),
                "teams": self.scalar("SELECT count(DISTINCT name) FROM memberships WHERE kind = 'team'"),
                "groups": self.scalar(
                    "SELECT count(*) FROM (SELECT name FROM memberships WHERE kind = 'group' "
                    "UNION SELECT name FROM page_groups)"
                ),
            }

    def latest_import(self) -> int | None:
        """Id of the latest logged import (None before the first): changes whenever the wiki may have."""
        return self.scalar("SELECT max(id) FROM imports")

    def latest_view_time(self) -> float | None:
        """Timestamp (Unix seconds) of the latest view; None for a store without views."""
        return self.scalar("SELECT max(timestamp) FROM views")

    # -- pages -----------------------------------------------------------------------------------
    def present_pages(self) -> tuple[np.ndarray, list[str]]:
        """Row ids (ascending) and page ids of the pages the wiki holds."""
        rows = self.connection.execute("SELECT id, page FROM pages WHERE present = 1 ORDER BY id").fetchall()
        ids = np.fromiter((row[0] for row in rows), dtype=np.int64, count=len(rows))
        return ids, [row[1] for row in rows]

    def page_table(self) -> list[tuple[str | None, str | None, bool]]:
        """``(title, space, archived)`` of each present page, in row-id order (as :meth:`present_pages`)."""
        rows = self.connection.execute(
            "SELECT title, space, archived FROM pages WHERE present = 1 ORDER BY id"
        ).fetchall()
        return [(title, space, bool(archived)) for title, space, archived in rows]

    def page_urls(self) -> dict[str, str]:
        """Page id -> URL of the present pages that have one (from ``--base-url`` or a page export)."""
        rows = self.connection.execute("SELECT page, url FROM pages WHERE present = 1 AND url IS NOT NULL")
        return dict(rows.fetchall())

    def page_group_pairs(self) -> list[tuple[int, str]]:
        """``(page row id, access group)`` for every access group of every present page (any order)."""
        return self.connection.execute(
            "SELECT page_id, name FROM page_groups JOIN pages ON pages.id = page_id WHERE present = 1"
        ).fetchall()

    def page_tag_pairs(self) -> list[tuple[int, str]]:
        """``(page row id, tag)`` for every tag of every present page (any order)."""
        return self.connection.execute(
            "SELECT page_id, tag FROM page_tags JOIN pages ON pages.id = page_id WHERE present = 1"
        ).fetchall()

    def topic_pairs(self, kind: str) -> list[tuple[str, int]]:
        """``(space or tag, page row id)`` of present pages that are not archived (any order).

        ``kind`` is ``"spaces"`` (pages without a space are left out) or ``"tags"`` (one pair per tag).
        """
        if kind not in _TOPIC_PAIRS:
            raise ValueError(f"kind must be one of {', '.join(map(repr, _TOPIC_PAIRS))}; got {kind!r}")
        return self.connection.execute(_TOPIC_PAIRS[kind]).fetchall()

    def page_texts(self) -> list[tuple[int, str, str, str]]:
        """``(row id, title, space, tags joined by spaces)`` of present pages that are not archived.

        Ordered by row id; a missing title, space or tag list is ``""``.
        """
        return self.connection.execute(
            "SELECT pages.id, coalesce(title, ''), coalesce(space, ''), coalesce(group_concat(tag, ' '), '') "
            "FROM pages LEFT JOIN page_tags ON page_tags.page_id = pages.id "
            "WHERE present = 1 AND archived = 0 GROUP BY pages.id ORDER BY pages.id"
        ).fetchall()

    def unresolved_targets(self, limit: int) -> list[tuple[str, int]]:
        """``(page, links)`` of the ``limit`` missing pages most linked to (most first, ties by page)."""
        return self._most_unresolved("targets", limit)

    def pages_with_unresolved_links(self, limit: int) -> list[tuple[str, int]]:
        """``(page, links)`` of the ``limit`` pages with the most links to missing pages (ties by page)."""
        return self._most_unresolved("sources", limit)

    def _most_unresolved(self, end: str, limit: int) -> list[tuple[str, int]]:
        """``(page, links to missing pages)`` of the ``limit`` pages at the ``end`` ("sources" or
        "targets") of the most such links, most first, ties by page id."""
        with self.reading():
            links = self._links(("sources", "targets"))
            missing = ~self._present()[links.targets]
            rows, counts = np.unique(getattr(links, end)[missing], return_counts=True)
            names = self._page_values(rows, "page")
        ranked = sorted(zip(names, counts.tolist(), strict=True), key=lambda pair: (-pair[1], pair[0]))
        return ranked[: max(int(limit), 0)]

    def _page_values(self, rows: np.ndarray, column: str) -> list:
        """``column`` (a constant name: ``page``, ``origin``) of the page ``rows``, in their order."""
        found: dict[int, object] = {}
        for chunk, marks in _chunks(rows.tolist()):
            sql = f"SELECT id, {column} FROM pages WHERE id IN ({marks})"
            found.update(self.connection.execute(sql, chunk))
        return [found[int(row)] for row in rows]

    def _present(self) -> np.ndarray:
        """Whether each page row id (0 to the largest) is a present page (read-only)."""
        return self._kept("present", self._read_present)

    def _read_present(self) -> np.ndarray:
        top = self.scalar("SELECT coalesce(max(id), 0) FROM pages")
        present = np.zeros(top + 1, dtype=bool)
        present[self.present_pages()[0]] = True
        present.flags.writeable = False
        return present

    def _links(self, names: tuple[str, ...]) -> Links:
        """Every stored link, the ``names`` columns of :class:`~rankrec._store_links.Links` filled (the
        link writes of a write transaction merged in first). Inside a reading block each column is
        decoded once (``rankrec stats`` asks for the links twenty times and more)."""
        self._settled()
        if self._snapshot is None:
            return stored_links(self.connection, names, self.path)
        missing = tuple(name for name in names if name not in self._snapshot)
        if missing:
            read = stored_links(self.connection, missing, self.path)
            self._snapshot.update({name: getattr(read, name) for name in missing})
        return Links.of({name: self._snapshot[name] for name in names})

    def _kept(self, key: str, read):
        """``read()``, or inside a reading block what it gave the first time there (the snapshot
        cannot change until the block ends)."""
        if self._snapshot is None:
            return read()
        if key not in self._snapshot:
            self._snapshot[key] = read()
        return self._snapshot[key]

    def _settled(self) -> None:
        """Merge the link writes a write transaction holds, so that a read sees them."""
        if self._pending_links:
            self._settle_links()

    def most_viewed_public_pages(self) -> list[tuple[str, str | None]]:
        """``(page, space)`` of viewed pages that are neither archived nor in an access group.

        Most views first, ties by page id. Pages only referred to (not present) are included.
        """
        return self.connection.execute(
            "SELECT page, space FROM views JOIN pages ON pages.id = page_id WHERE archived = 0 "
            "AND NOT EXISTS (SELECT 1 FROM page_groups WHERE page_groups.page_id = pages.id) "
            "GROUP BY pages.id ORDER BY count(*) DESC, page"
        ).fetchall()

    # -- links -----------------------------------------------------------------------------------
    def link_arrays(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Row ids of source and target, and weight, of every link between present pages."""
        with self.reading():
            links = self._links(("sources", "targets", "weights"))
            present = self._present()
        keep = present[links.sources] & present[links.targets]
        sources, targets = links.sources[keep].astype(np.int64), links.targets[keep].astype(np.int64)
        return sources, targets, links.weights[keep].astype(np.float64)

    def link_rows(self) -> list[tuple[str, str, float]]:
        """``(source, target, weight)`` of every stored link, by page id, in source then target row order
        (links to pages no source describes too)."""
        with self.reading():
            links = self._links(("sources", "targets", "weights"))
            rows = np.unique(np.concatenate([links.sources, links.targets]))
            names = dict(zip(rows.tolist(), self._page_values(rows, "page"), strict=True))
        return [
            (names[source], names[target], weight)
            for source, target, weight in zip(
                links.sources.tolist(), links.targets.tolist(), links.weights.tolist(), strict=True
            )
        ]

    def link_place_arrays(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, list[str]]:
        """Where the links between present pages sit: one row per (source, target, place).

        Returns source row ids, target row ids, place codes and occurrence counts (ordered by
        source, target, then place code), and the place strings, sorted, that the codes index.
        Links from sources without structure (edge lists) and stores without places have no rows.
        """
        empty = np.zeros(0, dtype=np.int64)
        with self.reading():
            if not self._has_text_tables():
                return empty, empty, empty, empty, []
            count = self.scalar("SELECT count(*) FROM link_occurrences")
            table = self._columns(
                "SELECT source_id, target_id, place_id, occurrences FROM link_occurrences "
                "ORDER BY source_id, target_id, place_id",
                count,
                4,
            ).astype(np.int64)
            names = dict(self.connection.execute("SELECT id, place FROM link_places").fetchall())
            top = self.scalar("SELECT coalesce(max(id), 0) FROM pages")
            present_ids = self.present_pages()[0]
        present = np.zeros(top + 1, dtype=bool)
        present[present_ids] = True
        table = table[present[table[:, 0]] & present[table[:, 1]]]
        used, codes = np.unique(table[:, 2], return_inverse=True)
        places = [names[int(place)] for place in used]
        order = sorted(range(len(places)), key=places.__getitem__)
        rank = np.empty(len(places), dtype=np.int64)
        rank[order] = np.arange(len(places))
        codes = rank[codes.reshape(-1)] if len(places) else empty
        keep = np.lexsort((codes, table[:, 1], table[:, 0]))
        return table[keep, 0], table[keep, 1], codes[keep], table[keep, 3], [places[i] for i in order]

    # -- users and memberships ---------------------------------------------------------------------
    def users(self) -> tuple[np.ndarray, list[str]]:
        """Row ids (ascending) and user ids of every user the store knows."""
        rows = self.connection.execute("SELECT id, user FROM users ORDER BY id").fetchall()
        ids = np.fromiter((row[0] for row in rows), dtype=np.int64, count=len(rows))
        return ids, [row[1] for row in rows]

    def user_row(self, user: str) -> int | None:
        """Row id of ``user``; None for a user the store does not know."""
        row = self.connection.execute("SELECT id FROM users WHERE user = ?", (user,)).fetchone()
        return None if row is None else int(row[0])

    def most_active_user(self) -> str | None:
        """The user with the most views (ties by user id); None for a store without views."""
        row = self.connection.execute(
            "SELECT user FROM views JOIN users ON users.id = user_id "
            "GROUP BY user_id ORDER BY count(*) DESC, user"
        ).fetchone()
        return None if row is None else row[0]

    def memberships(self, kind: str) -> list[tuple[int, str]]:
        """``(user row id, name)`` of every membership of ``kind`` (``"team"`` or ``"group"``).

        Ordered by name, then user row id.
        """
        return self.connection.execute(
            "SELECT user_id, name FROM memberships WHERE kind = ? ORDER BY name, user_id", (kind,)
        ).fetchall()

    def names_of(self, kind: str) -> list[str]:
        """Distinct names of the teams (``kind="team"``) or access groups (``"group"``) of users, sorted."""
        rows = self.connection.execute(
            "SELECT DISTINCT name FROM memberships WHERE kind = ? ORDER BY name", (kind,)
        ).fetchall()
        return [row[0] for row in rows]

    def members_of(self, kind: str, name: str) -> tuple[str, ...]:
        """User ids of the members of team or group ``name``, sorted (empty when there is none)."""
        rows = self.connection.execute(
            "SELECT users.user FROM memberships JOIN users ON users.id = memberships.user_id "
            "WHERE kind = ? AND name = ? ORDER BY users.user",
            (kind, name),
        ).fetchall()
        return tuple(row[0] for row in rows)

    def groups_of_users(self, user_rows: Sequence[int]) -> dict[int, frozenset[str]]:
        """Access groups of each user in ``user_rows`` (row ids), empty for a user in none."""
        found: dict[int, set[str]] = {int(row): set() for row in user_rows}
        for chunk, marks in _chunks(user_rows):
            for user_id, name in self.connection.execute(
                f"SELECT user_id, name FROM memberships WHERE kind = 'group' AND user_id IN ({marks})", chunk
            ):
                found[user_id].add(name)
        return {row: frozenset(names) for row, names in found.items()}

    # -- views -----------------------------------------------------------------------------------
    def view_arrays(self, *, with_dwell: bool = False) -> tuple[np.ndarray, ...]:
        """User row id, page row id and timestamp of every view.

        Without ``with_dwell``: three arrays, ordered by user then time. With it: a fourth array,
        dwell seconds (NaN where unknown), and the views ordered by user, page, then time.
        """
        if with_dwell:
            cursor = self.connection.execute(
                "SELECT user_id, page_id, timestamp, dwell FROM views ORDER BY user_id, page_id, timestamp"
            )
            blocks = []
            while chunk := cursor.fetchmany(500_000):
                blocks.append(np.array(chunk, dtype=np.float64).reshape(-1, 4))  # NULL dwell -> NaN
            table = np.concatenate(blocks) if blocks else np.zeros((0, 4))
            return table[:, 0].astype(np.int64), table[:, 1].astype(np.int64), table[:, 2], table[:, 3]
        with self.reading():
            count = self.scalar("SELECT count(*) FROM views")
            table = self._columns(
                "SELECT user_id, page_id, timestamp FROM views ORDER BY user_id, timestamp", count, 3
            )
        return table[:, 0].astype(np.int64), table[:, 1].astype(np.int64), table[:, 2]

    def views_of_users(self, user_rows: Sequence[int]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """User row id, page row id and timestamp of the views of ``user_rows`` (row ids; any order)."""
        users, pages, times = [], [], []
        for chunk, marks in _chunks(user_rows):
            rows = self.connection.execute(
                f"SELECT user_id, page_id, timestamp FROM views WHERE user_id IN ({marks})", chunk
            ).fetchall()
            if rows:
                table = np.array(rows, dtype=np.float64)
                users.append(table[:, 0].astype(np.int64))
                pages.append(table[:, 1].astype(np.int64))
                times.append(table[:, 2])
        if not users:
            return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64), np.zeros(0)
        return np.concatenate(users), np.concatenate(pages), np.concatenate(times)

    def view_counts(self) -> tuple[np.ndarray, np.ndarray]:
        """Row ids of the viewed pages (ascending) and how many views each has."""
        rows = self.connection.execute(
            "SELECT page_id, count(*) FROM views GROUP BY page_id ORDER BY page_id"
        ).fetchall()
        table = np.array(rows, dtype=np.int64).reshape(-1, 2)
        return table[:, 0], table[:, 1]

"""The store's reads of the pages' stored text (table ``page_text``: headings, zlib-compressed main text,
its digest and size), inherited by :class:`rankrec.store.Store` as :mod:`rankrec._store_reads` is.

A store made before the text tables has none: every read answers as for a wiki without text.
"""

from __future__ import annotations

import sqlite3
import zlib
from collections.abc import Callable, Iterator, Sequence

import numpy as np

from ._store_reads import _chunks
from .errors import InputError
from .sources.records import TEXT_BYTES


class TextReads:
    """Text reads of :class:`rankrec.store.Store`, which supplies ``connection``, ``path`` and
    ``_has_text_tables`` (:class:`rankrec._store_reads.StoreReads`)."""

    connection: sqlite3.Connection
    path: str
    _has_text_tables: Callable[[], bool]

    def page_texts_by_row(self, rows: Sequence[int] | None = None) -> tuple[np.ndarray, list[str], list[str]]:
        """Row ids (ascending), headings and text of the present pages that have text.

        ``rows`` (page row ids) restricts the answer to those pages, so that a large wiki can be
        read in pieces inside one :meth:`~rankrec.store.Store.reading` block. Archived pages are
        included. Pages without text (and every page of a store without text) are left out.
        """
        found: list[tuple[int, str, bytes]] = []
        if self._has_text_tables():
            sql = (
                "SELECT page_id, headings, text FROM page_text JOIN pages ON pages.id = page_id "
                "WHERE present = 1"
            )
            if rows is None:
                found = self.connection.execute(sql + " ORDER BY page_id").fetchall()
            else:
                for chunk, marks in _chunks(sorted({int(row) for row in rows})):
                    found += self.connection.execute(f"{sql} AND page_id IN ({marks})", chunk).fetchall()
                found.sort()
        ids = np.fromiter((row[0] for row in found), dtype=np.int64, count=len(found))
        return ids, [row[1] for row in found], [self._inflate(row[0], row[2]) for row in found]

    def page_text_batches(
        self, field: str = "text", *, batch: int = 2000
    ) -> Iterator[tuple[np.ndarray, list[str]]]:
        """Row ids (ascending) and ``field`` of the present pages that have text, ``batch`` pages at a time.

        ``field`` is ``"text"`` (the main text, decompressed), ``"headings"`` or ``"sha256"`` (the hex
        digest of the main text's UTF-8, read without decompressing it). Archived pages are
        included, as in :meth:`page_texts_by_row`. A generator that holds one batch: a large wiki's
        text is read without holding all of it. Iterate it inside one
        :meth:`~rankrec.store.Store.reading` block, with the store open, for one snapshot.
        """
        if field not in ("text", "headings", "sha256"):
            raise ValueError(f"field must be 'text', 'headings' or 'sha256'; got {field!r}")
        if isinstance(batch, bool) or not isinstance(batch, int) or batch < 1:
            raise ValueError(f"batch must be a positive integer; got {batch!r}")
        if not self._has_text_tables():
            return
        cursor = self.connection.execute(
            f"SELECT page_id, {field} FROM page_text JOIN pages ON pages.id = page_id WHERE present = 1 "
            "ORDER BY page_id"
        )
        while found := cursor.fetchmany(batch):
            ids = np.fromiter((row[0] for row in found), dtype=np.int64, count=len(found))
            if field == "text":
                yield ids, [self._inflate(row, data) for row, data in found]
            else:
                yield ids, [row[1] for row in found]

    def _inflate(self, row: int, data: bytes) -> str:
        """A stored page text: zlib-compressed UTF-8, never read past the 64 KiB a text may hold."""
        try:
            inflater = zlib.decompressobj()
            text = inflater.decompress(data, TEXT_BYTES + 1)
            if len(text) > TEXT_BYTES or not inflater.eof:
                raise zlib.error("longer than a page text may be")
            return text.decode("utf-8")
        except (zlib.error, UnicodeDecodeError) as error:
            raise InputError(self.path, None, f"stored text of page row {row} is damaged ({error})") from None

    def page_text_hashes(self) -> tuple[np.ndarray, list[str]]:
        """Row ids (ascending) and SHA-256 hex digests of the UTF-8 text of present pages with text."""
        found = []
        if self._has_text_tables():
            found = self.connection.execute(
                "SELECT page_id, sha256 FROM page_text JOIN pages ON pages.id = page_id WHERE present = 1 "
                "ORDER BY page_id"
            ).fetchall()
        ids = np.fromiter((row[0] for row in found), dtype=np.int64, count=len(found))
        return ids, [row[1] for row in found]

    def text_counts(self) -> tuple[int, int]:
        """How many present pages have text, and their UTF-8 bytes in all (before compression)."""
        if not self._has_text_tables():
            return 0, 0
        pages, size = self.connection.execute(
            "SELECT count(*), coalesce(sum(text_bytes), 0) FROM page_text JOIN pages ON pages.id = page_id "
            "WHERE present = 1"
        ).fetchone()
        return int(pages), int(size)

"""How the wiki store keeps its links: in blocks of source pages, one table row per block.

A row of ``link_blocks`` holds every link whose source row id lies in one run of
:data:`BLOCK_SOURCES` ids (block ``source_id // BLOCK_SOURCES``), column by column as little-endian
arrays: sources and targets (int32 row ids), weights (float64), files (int32 ``link_files`` ids, 0 when
not known) and lines (int64, -1 when not known), sorted by source then target, each pair once. A
million-page wiki is a thousand rows instead of ten million, written and read whole with numpy: an
edge list of ten million links is stored in seconds, where a row per link and its index took minutes
(measured: README, "Importing").

Writes are held in :class:`PendingLinks` (puts and clears in the order they came) and merged into the
blocks they touch by :func:`settle`, when many are held, before a read inside the write transaction,
and before the transaction commits: a clear forgets the links of its sources put before it, and of
two puts of one link the later wins, exactly as a ``DELETE`` and an ``INSERT ... ON CONFLICT DO UPDATE``
per row would.

Stores made before blocks (schema version 1) keep a row per link in a ``links`` table. They are read
as they are (:func:`stored_links`) and converted in their first write transaction (:func:`convert`).
"""

from __future__ import annotations

import itertools
import sqlite3
from dataclasses import dataclass

import numpy as np

from .errors import InputError

BLOCK_SOURCES = 1024  # source row ids per block
PENDING_LINKS = 4_000_000  # links held before they are merged into the stored blocks

TABLE = """CREATE TABLE IF NOT EXISTS link_blocks (
    block INTEGER PRIMARY KEY,
    links INTEGER NOT NULL,
    sources BLOB NOT NULL,
    targets BLOB NOT NULL,
    weights BLOB NOT NULL,
    files BLOB NOT NULL,
    lines BLOB NOT NULL
)"""

_LEGACY = "links"  # the row-per-link table of schema version 1
_TYPES = {"sources": "<i4", "targets": "<i4", "weights": "<f8", "files": "<i4", "lines": "<i8"}
_ALL = tuple(_TYPES)
_IN_LIST = 500  # blocks per ``IN (...)`` list


@dataclass(frozen=True)
class Links:
    """Links column by column: source and target row ids, weight, file id (0: not known) and line
    (-1: not known). The columns not asked for by a read are empty."""

    sources: np.ndarray
    targets: np.ndarray
    weights: np.ndarray
    files: np.ndarray
    lines: np.ndarray

    @classmethod
    def of(cls, columns: dict[str, np.ndarray]) -> Links:
        """Links with the given columns, the others empty."""
        return cls(*(columns[name] if name in columns else np.zeros(0, _TYPES[name]) for name in _ALL))

    @classmethod
    def joined(cls, parts: list[Links]) -> Links:
        return cls(*(np.concatenate([getattr(part, name) for part in parts]) for name in _ALL))

    def taken(self, where: np.ndarray) -> Links:
        """The links ``where`` selects (a mask or positions); columns not read stay empty."""
        columns = (getattr(self, name) for name in _ALL)
        return Links(*(column[where] if column.size == self.size else column for column in columns))

    @property
    def size(self) -> int:
        return int(self.sources.size)


class PendingLinks:
    """Puts and clears not yet merged into the stored blocks, each numbered in the order it came."""

    def __init__(self) -> None:
        self.puts: list[tuple[Links, np.ndarray]] = []
        self.clears: list[tuple[np.ndarray, np.ndarray]] = []
        self.count = 0  # links held
        self._next = 0  # the number the next put link or clear gets

    def __bool__(self) -> bool:
        return bool(self.puts or self.clears)

    def put(self, links: Links) -> None:
        self.puts.append((links, np.arange(self._next, self._next + links.size, dtype=np.int64)))
        self._next += links.size
        self.count += links.size

    def clear(self, sources: np.ndarray) -> None:
        sources = np.asarray(sources, dtype=np.int64)
        if not sources.size:
            return
        self.clears.append((sources, np.full(sources.size, self._next, dtype=np.int64)))
        self._next += 1

    def blocks(self) -> np.ndarray:
        """The blocks the held puts and clears touch (sorted)."""
        sources = [links.sources for links, _ in self.puts] + [sources for sources, _ in self.clears]
        return np.unique(np.concatenate([np.asarray(s, dtype=np.int64) for s in sources]) // BLOCK_SOURCES)

    def applied(self, stored: Links) -> Links:
        """``stored`` (links older than everything held) with the held puts and clears applied in order:
        sorted by source and target, each pair once."""
        links = Links.joined([stored, *(links for links, _ in self.puts)])
        order = np.concatenate([np.full(stored.size, -1, dtype=np.int64), *(seq for _, seq in self.puts)])
        if self.clears:
            cleared = np.concatenate([sources for sources, _ in self.clears])
            when = np.concatenate([seq for _, seq in self.clears])
            last = np.lexsort((when, cleared))
            cleared, when = cleared[last], when[last]
            final = _last_of_runs(cleared)  # each source's latest clear
            cleared, when = cleared[final], when[final]
            at = np.minimum(np.searchsorted(cleared, links.sources), max(cleared.size - 1, 0))
            hit = cleared[at] == links.sources
            keep = ~hit | (order > when[at])
            links = links.taken(keep)
        pairs = links.sources.astype(np.int64) * (1 << 32) + links.targets
        ranked = np.argsort(pairs, kind="stable")  # a pair's links stay in the order they were put
        return links.taken(ranked[_last_of_runs(pairs[ranked])])  # of each pair, the one put last


def _last_of_runs(keys: np.ndarray) -> np.ndarray:
    """Mask of the last entry of each run of equal ``keys``."""
    return np.r_[keys[1:] != keys[:-1], True] if keys.size else np.zeros(0, dtype=bool)


def settle(connection: sqlite3.Connection, pending: PendingLinks, path: str) -> None:
    """Merge what ``pending`` holds into the stored blocks it touches (inside a write transaction),
    and empty it."""
    if not pending:
        return
    touched = pending.blocks()
    stored = _read(connection, _ALL, path, touched)
    merged = pending.applied(stored)
    for first in range(0, touched.size, _IN_LIST):
        part = touched[first : first + _IN_LIST].tolist()
        connection.execute(f"DELETE FROM link_blocks WHERE block IN ({','.join('?' * len(part))})", part)
    _write(connection, merged)
    pending.__init__()


def _write(connection: sqlite3.Connection, links: Links) -> None:
    """Insert the blocks of ``links`` (sorted by source and target, blocks not stored yet)."""
    if links.size and max(int(links.sources.max()), int(links.targets.max())) >= 2**31:
        raise OverflowError("page row ids past 2**31 - 1 do not fit the link blocks' int32 columns")
    block = links.sources.astype(np.int64) // BLOCK_SOURCES
    ends = np.flatnonzero(_last_of_runs(block)) + 1
    starts = np.r_[0, ends[:-1]].astype(np.int64) if ends.size else ends
    columns = {name: np.ascontiguousarray(getattr(links, name), dtype=_TYPES[name]) for name in _ALL}
    connection.executemany(
        "INSERT INTO link_blocks (block, links, sources, targets, weights, files, lines) "
        "VALUES (?, ?, ?, ?, ?, ?, ?)",
        (
            (int(block[start]), int(end - start), *(columns[name][start:end].tobytes() for name in _ALL))
            for start, end in zip(starts.tolist(), ends.tolist(), strict=True)
        ),
    )


def _read(
    connection: sqlite3.Connection, names: tuple[str, ...], path: str, blocks: np.ndarray | None = None
) -> Links:
    """The stored links of ``blocks`` (all when None), only the ``names`` columns filled."""
    select = f"SELECT links, {', '.join(names)} FROM link_blocks"
    if blocks is None:
        rows = connection.execute(select + " ORDER BY block").fetchall()
    else:
        rows = []
        for first in range(0, blocks.size, _IN_LIST):
            part = blocks[first : first + _IN_LIST].tolist()
            rows += connection.execute(f"{select} WHERE block IN ({','.join('?' * len(part))})", part)
    expected = sum(int(row[0]) for row in rows)
    columns = {}
    for position, name in enumerate(names, start=1):
        data = b"".join(row[position] for row in rows)
        width = np.dtype(_TYPES[name]).itemsize
        if len(data) != expected * width:
            reason = f"its link blocks hold {len(data)} bytes of {name}, not {expected * width}"
            raise InputError(path, None, f"damaged wiki store: {reason}")
        columns[name] = np.frombuffer(data, dtype=_TYPES[name])
    return Links.of(columns)


def has_legacy(connection: sqlite3.Connection) -> bool:
    """Whether the store keeps a row per link (schema version 1, not written since)."""
    return bool(
        connection.execute(
            "SELECT count(*) FROM sqlite_master WHERE type = 'table' AND name = ?", (_LEGACY,)
        ).fetchone()[0]
    )


def stored_links(connection: sqlite3.Connection, names: tuple[str, ...], path: str) -> Links:
    """Every stored link, the ``names`` columns filled (from the blocks, or from a version 1 store's
    rows)."""
    if not has_legacy(connection):
        return _read(connection, names, path)
    columns = {row[1] for row in connection.execute(f"PRAGMA table_info({_LEGACY})")}
    count = int(connection.execute(f"SELECT count(*) FROM {_LEGACY}").fetchone()[0])
    cursor = connection.execute(
        "SELECT source_id, target_id, weight, "
        + ("coalesce(file_id, 0), coalesce(line, -1)" if "file_id" in columns else "0, -1")
        + f" FROM {_LEGACY} ORDER BY source_id, target_id"
    )  # read row by row into one array, never a list of ten million tuples
    flat = np.fromiter(itertools.chain.from_iterable(cursor), dtype=np.float64, count=count * 5)
    table = flat.reshape(count, 5)
    return Links.of({name: table[:, _ALL.index(name)].astype(_TYPES[name]) for name in names})


def stored_count(connection: sqlite3.Connection) -> int:
    """How many links the store holds (read from the blocks' counts, or a version 1 store's rows)."""
    if has_legacy(connection):
        return int(connection.execute(f"SELECT count(*) FROM {_LEGACY}").fetchone()[0])
    return int(connection.execute("SELECT coalesce(sum(links), 0) FROM link_blocks").fetchone()[0])


def convert(connection: sqlite3.Connection, path: str) -> None:
    """Inside a write transaction: move a version 1 store's rows of links into blocks (a store
    without them is left as it is)."""
    if not has_legacy(connection):
        return
    links = stored_links(connection, _ALL, path)
    connection.execute(TABLE)
    _write(connection, links)
    connection.execute(f"DROP TABLE {_LEGACY}")

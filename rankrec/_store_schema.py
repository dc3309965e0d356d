"""The wiki store's schema: its tables, the ones added after version 1 came out (tables and columns a
store made before them gains on its next write transaction) and its random store id (see
:mod:`rankrec.store`). Everything here works on an open ``sqlite3`` connection.

Page text and link places live in tables of their own (``page_text``, ``link_places``,
``link_occurrences``). A store made before they existed has none of them: it reads as a store
without text or places, and its first write transaction adds the (empty) tables.

Every store has a random **store id** (``meta`` key ``store_id``, 32 hex digits), made once with the
store and never changed: an index records the id of the store it was built from, so that it is not
served with another store whose counts happen to match (:meth:`rankrec.index.Index.check_current`).
A store made before ids existed reads as one without an id (:meth:`rankrec.store.Store.store_id` is
None) and gets one in its first write transaction; a copy of the store file keeps the id (it is the
same snapshot).
"""

from __future__ import annotations

import sqlite3
import uuid

from ._store_links import TABLE as LINK_BLOCKS
from ._store_links import convert

SCHEMA_VERSION = 2  # 2: links kept in blocks of source pages (:mod:`rankrec._store_links`)
READABLE_VERSIONS = (1, 2)  # a version 1 store is read as it is and converted by its first write
STORE_ID_KEY = "store_id"  # the meta key of the store id (added after version 1, with no new version)

# Added after version 1 came out, each table IF NOT EXISTS: older stores gain them on their next write.
TEXT_SCHEMA = (
    """CREATE TABLE IF NOT EXISTS page_text (
    page_id INTEGER PRIMARY KEY REFERENCES pages(id),
    text BLOB NOT NULL,
    headings TEXT NOT NULL,
    sha256 TEXT NOT NULL,
    text_bytes INTEGER NOT NULL
)""",  # text: zlib-compressed UTF-8; sha256: hex digest of that UTF-8; text_bytes: its length
    "CREATE TABLE IF NOT EXISTS link_places (id INTEGER PRIMARY KEY, place TEXT NOT NULL UNIQUE)",
    """CREATE TABLE IF NOT EXISTS link_occurrences (
    source_id INTEGER NOT NULL REFERENCES pages(id),
    target_id INTEGER NOT NULL REFERENCES pages(id),
    place_id INTEGER NOT NULL REFERENCES link_places(id),
    occurrences INTEGER NOT NULL,
    PRIMARY KEY (source_id, target_id, place_id)
) WITHOUT ROWID""",
)

# Where each link was read (added after version 1): the file, interned in ``link_files``; the link blocks
# hold its id and the line.
_LINK_FILES = "CREATE TABLE IF NOT EXISTS link_files (id INTEGER PRIMARY KEY, file TEXT NOT NULL UNIQUE)"
# Columns added after version 1 came out, each with a default (SQLite's ALTER TABLE ADD COLUMN): a store
# made before them gains them on its next write transaction and reads as holding the default until then.
_ADDED_COLUMNS = (
    ("pages", "same_page_links", "INTEGER NOT NULL DEFAULT 0"),  # links of the page to itself, counted
    ("pages", "code_share", "REAL NOT NULL DEFAULT 0"),  # share of the page's text in code blocks
)

_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS pages (
    id INTEGER PRIMARY KEY,
    page TEXT NOT NULL UNIQUE,
    title TEXT,
    space TEXT,
    url TEXT,
    archived INTEGER NOT NULL DEFAULT 0,
    present INTEGER NOT NULL DEFAULT 0,
    external_links INTEGER NOT NULL DEFAULT 0,
    origin TEXT
);
CREATE TABLE IF NOT EXISTS page_tags (
    page_id INTEGER NOT NULL REFERENCES pages(id), tag TEXT NOT NULL, PRIMARY KEY (page_id, tag)
) WITHOUT ROWID;
CREATE TABLE IF NOT EXISTS page_groups (
    page_id INTEGER NOT NULL REFERENCES pages(id), name TEXT NOT NULL, PRIMARY KEY (page_id, name)
) WITHOUT ROWID;
CREATE TABLE IF NOT EXISTS users (id INTEGER PRIMARY KEY, user TEXT NOT NULL UNIQUE);
CREATE TABLE IF NOT EXISTS views (
    user_id INTEGER NOT NULL REFERENCES users(id),
    page_id INTEGER NOT NULL REFERENCES pages(id),
    timestamp REAL NOT NULL,
    dwell REAL,
    PRIMARY KEY (user_id, page_id, timestamp)
) WITHOUT ROWID;
CREATE INDEX IF NOT EXISTS views_by_time ON views (timestamp);
CREATE TABLE IF NOT EXISTS memberships (
    kind TEXT NOT NULL CHECK (kind IN ('team', 'group')),
    name TEXT NOT NULL,
    user_id INTEGER NOT NULL REFERENCES users(id),
    PRIMARY KEY (kind, name, user_id)
) WITHOUT ROWID;
CREATE TABLE IF NOT EXISTS imports (
    id INTEGER PRIMARY KEY,
    source TEXT NOT NULL,
    format TEXT NOT NULL,
    records INTEGER NOT NULL,
    errors INTEGER NOT NULL,
    imported_at TEXT NOT NULL DEFAULT (strftime('%Y-%m-%dT%H:%M:%SZ', 'now'))
);
""" + "".join(statement + ";\n" for statement in (*TEXT_SCHEMA, LINK_BLOCKS, _LINK_FILES))


def new_store_id() -> str:
    """A fresh random store id: 32 lowercase hex digits (a version 4 UUID, 122 random bits)."""
    return uuid.uuid4().hex


def create_or_check(connection: sqlite3.Connection) -> None:
    """Make the schema in a new store; in an existing one, refuse another schema version
    (``sqlite3.DatabaseError``)."""
    existing = connection.execute(
        "SELECT name FROM sqlite_master WHERE type='table' AND name='meta'"
    ).fetchone()
    if existing:
        row = connection.execute("SELECT value FROM meta WHERE key='schema_version'").fetchone()
        if row is None or not row[0].isdigit() or int(row[0]) not in READABLE_VERSIONS:
            found = None if row is None else row[0]
            readable = " and ".join(str(version) for version in READABLE_VERSIONS)
            raise sqlite3.DatabaseError(f"schema version {found}, this rankrec reads {readable}")
        return
    # one transaction: the tables, the schema version and the store id come together or not at all
    # (both values are digits and hex digits, safe to write as literals)
    connection.executescript(
        "BEGIN;"
        + _SCHEMA
        + f"INSERT INTO meta (key, value) VALUES ('schema_version', '{SCHEMA_VERSION:d}');"
        + f"INSERT INTO meta (key, value) VALUES ('{STORE_ID_KEY}', '{new_store_id()}');"
        + "COMMIT;"
    )


def migrate(connection: sqlite3.Connection, path: str) -> None:
    """Inside a write transaction: add what came after version 1 to a store made before it (the text
    and place tables, the added columns, a store id) and move its links into blocks (version 2); a
    store that has them is left as it is."""
    for statement in TEXT_SCHEMA:
        connection.execute(statement)
    connection.execute(_LINK_FILES)
    convert(connection, path)
    connection.execute(LINK_BLOCKS)
    connection.execute("UPDATE meta SET value = ? WHERE key = 'schema_version'", (str(SCHEMA_VERSION),))
    for table, column, declaration in _ADDED_COLUMNS:
        if column not in column_names(connection, table):
            connection.execute(f"ALTER TABLE {table} ADD COLUMN {column} {declaration}")
    connection.execute(
        "INSERT OR IGNORE INTO meta (key, value) VALUES (?, ?)", (STORE_ID_KEY, new_store_id())
    )


def column_names(connection: sqlite3.Connection, table: str) -> set[str]:
    """Column names of ``table`` (a constant name)."""
    return {row[1] for row in connection.execute(f"PRAGMA table_info({table})")}


def has_added_columns(connection: sqlite3.Connection) -> bool:
    """Whether the store has the columns added after version 1 (an older store, until written, not)."""
    has_files = connection.execute(
        "SELECT count(*) FROM sqlite_master WHERE type = 'table' AND name = 'link_files'"
    ).fetchone()[0]
    return bool(has_files) and all(
        column in column_names(connection, table) for table, column, _ in _ADDED_COLUMNS
    )

"""What the store meets of the operating system: the mode of a new store file, and the errors that
mean the store cannot be used just now (a full disk, a lock held elsewhere, an I/O error).

:class:`rankrec.store.Store` creates its file through :func:`create_private` and turns such errors
into :class:`~rankrec.errors.NoSpace` or :class:`~rankrec.errors.StoreUnavailable` by
:func:`store_unavailable`; this module exists to keep ``store.py`` short.
"""

from __future__ import annotations

import errno
import os
import sqlite3
from pathlib import Path

from .errors import NoSpace, RankrecError, StoreUnavailable

FILE_MODE = 0o600
"""A new store file is private to its owner (it holds reading history and restricted titles);
SQLite gives its ``-wal`` and ``-shm`` files the database file's mode."""

_NO_SPACE_ERRNOS = frozenset({errno.ENOSPC, errno.EDQUOT})
_UNAVAILABLE_CODES = frozenset(
    {sqlite3.SQLITE_BUSY, sqlite3.SQLITE_LOCKED, sqlite3.SQLITE_IOERR, sqlite3.SQLITE_CANTOPEN}
)
_UNAVAILABLE_WORDS = ("database is locked", "database table is locked", "disk i/o error", "unable to open")


def store_unavailable(path: str, error: BaseException) -> RankrecError | None:
    """The rankrec error that ``error`` (met using the store at ``path``) stands for, or None when it is
    not about the store being unavailable: :class:`~rankrec.errors.NoSpace` for a full disk or quota
    (``SQLITE_FULL``, ``ENOSPC``, ``EDQUOT``), :class:`~rankrec.errors.StoreUnavailable` for a lock
    held elsewhere or an I/O error.

    >>> type(store_unavailable("wiki.db", sqlite3.OperationalError("database or disk is full"))).__name__
    'NoSpace'
    >>> store_unavailable("wiki.db", sqlite3.OperationalError("no such table: pages")) is None
    True
    """
    if isinstance(error, OSError) and not isinstance(error, sqlite3.Error):
        if error.errno in _NO_SPACE_ERRNOS:
            return NoSpace(path)
        return None
    if not isinstance(error, sqlite3.OperationalError):
        return None
    code = getattr(error, "sqlite_errorcode", None)
    primary = None if code is None else code & 0xFF  # extended codes keep the primary one in the low byte
    text = str(error).lower()
    if primary == sqlite3.SQLITE_FULL or "disk is full" in text:
        return NoSpace(path)
    if primary in _UNAVAILABLE_CODES or any(words in text for words in _UNAVAILABLE_WORDS):
        return StoreUnavailable(path, str(error)[:80])
    return None


def create_private(path: Path) -> None:
    """Create an empty store file with mode 0600 (whatever the umask) unless it exists."""
    try:
        descriptor = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, FILE_MODE)
    except FileExistsError:
        return
    try:
        os.fchmod(descriptor, FILE_MODE)
    finally:
        os.close(descriptor)


def raise_unavailable(path: str, error: BaseException) -> None:
    """Raise the NoSpace or StoreUnavailable that ``error`` stands for (from ``error``), if any."""
    found = store_unavailable(path, error)
    if found is not None:
        raise found from error

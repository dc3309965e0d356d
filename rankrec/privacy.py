"""Privacy switches for reading history: keyed pseudonyms for user ids, and view retention.

Reading history is personal data. A pseudonym is a keyed hash (HMAC-SHA256) of the user id:
whoever holds the store but not the key cannot turn a pseudonym back into a person, and the
same user always gets the same pseudonym under one key, so histories still add up. The key is
a file of 32 random bytes (written as hex), readable by its owner only. Losing or replacing the
key cuts every stored history off from its reader; that is the point of keeping it apart.
"""

from __future__ import annotations

import hashlib
import hmac
import logging
import math
import os
import secrets
import tempfile
import time
from pathlib import Path

log = logging.getLogger(__name__)

PREFIX = "p-"
"""Every pseudonym starts with this; plain user ids given to a service with a key never do."""

KEY_BYTES = 32
_MIN_KEY_BYTES = 16  # RFC 2104 section 3: keys shorter than the hash output (here 32) weaken it
_DAY = 86_400.0


def pseudonym(key: bytes, user: str) -> str:
    """``"p-"`` followed by the first 32 hex digits (128 bits) of HMAC-SHA256(key, user as UTF-8).

    >>> pseudonym(b"0123456789abcdef", "ines")[:2], len(pseudonym(b"0123456789abcdef", "ines"))
    ('p-', 34)
    >>> pseudonym(b"0123456789abcdef", "ines") == pseudonym(b"0123456789abcdef", "ines")
    True
    """
    if not isinstance(key, (bytes, bytearray)):
        raise TypeError(f"key must be bytes, got {type(key).__name__}")
    if not isinstance(user, str):
        raise TypeError(f"user must be a string, got {user!r}")
    if not user:
        raise ValueError(f"user must not be empty, got {user!r}")
    digest = hmac.new(bytes(key), user.encode("utf-8"), hashlib.sha256).hexdigest()
    return PREFIX + digest[:32]


def is_pseudonym(user: str) -> bool:
    """True when ``user`` has the shape of a pseudonym (prefix and 32 lower-case hex digits)."""
    body = user[len(PREFIX) :]
    return user.startswith(PREFIX) and len(body) == 32 and all(c in "0123456789abcdef" for c in body)


def stored_id(key: bytes | None, user: str) -> str:
    """The id ``user``'s history is stored under: its pseudonym under ``key``, or ``user`` without a key.

    >>> key = b"0123456789abcdef"
    >>> stored_id(None, "ines"), stored_id(key, "ines") == pseudonym(key, "ines")
    ('ines', True)
    """
    return user if key is None else pseudonym(key, user)


def new_key(path: str | Path) -> bytes:
    """Write a new random key to ``path`` (hex text, mode 0600) and return it.

    The file appears whole or not at all; an existing file is never replaced (FileExistsError),
    because a new key would cut every stored history off from its reader.
    """
    path = Path(path)
    key = secrets.token_bytes(KEY_BYTES)
    descriptor, staging = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent)
    try:
        os.fchmod(descriptor, 0o600)
        with os.fdopen(descriptor, "w") as handle:
            handle.write(key.hex() + "\n")
            handle.flush()
            os.fsync(handle.fileno())
        os.link(staging, path)  # fails when path exists: no silent overwrite
    finally:
        os.unlink(staging)
    return key


def load_key(path: str | Path) -> bytes:
    """Read a key written by :func:`new_key` (hex text). ValueError when it is not one."""
    path = Path(path)
    try:
        text = path.read_text(encoding="ascii").strip()
        key = bytes.fromhex(text)
    except (UnicodeDecodeError, ValueError):
        raise ValueError(f"pseudonym key file {str(path)!r} does not hold hex digits") from None
    if len(key) < _MIN_KEY_BYTES:
        raise ValueError(
            f"pseudonym key in {str(path)!r} has {len(key)} bytes; at least {_MIN_KEY_BYTES} are needed"
        )
    if path.stat().st_mode & 0o077:
        log.warning("pseudonym key file %s is readable by others than its owner (chmod 600 it)", path)
    return key


def retention_cutoff(days: int, now: float | None = None) -> float:
    """Unix seconds before which views are older than ``days`` days (``now`` defaults to the clock).

    >>> retention_cutoff(30, now=3_000_000.0)
    408000.0
    """
    if isinstance(days, bool) or not isinstance(days, int):
        raise TypeError(f"days must be an integer, got {days!r}")
    if days < 1:
        raise ValueError(f"days must be at least 1, got {days!r}")
    if now is None:
        now = time.time()
    elif isinstance(now, bool) or not isinstance(now, (int, float)) or not math.isfinite(now):
        raise ValueError(f"now must be finite Unix seconds or None, got {now!r}")
    return float(now) - days * _DAY

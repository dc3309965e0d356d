"""Bearer tokens of the HTTP service: a JSON file holding, per token, a name, a role and a hash.

A token is shown once, when :func:`add_token` makes it; the file keeps only its SHA-256 hex
digest, so a copy of the file does not let anyone call the service. The file is written
atomically (a temporary file beside it, then one ``rename``) with mode 0600; :func:`revoke_token`
removes one by name::

    {"format": 1, "tokens": [{"name": "wiki-frontend", "role": "reader",
                              "sha256": "9f86...", "created": "2026-04-01T06:11:54Z",
                              "viewer_key": "q3Vb..."}]}

Viewer assertions. A token may also have a viewer key (:func:`add_viewer_key`, shown once, kept in
the file: the service needs it to check MACs). Only a caller holding that key can name the viewer
a list is for: a signed, short-lived assertion ``USER.EXPIRY.MAC`` (:func:`viewer_assertion`), where
``USER`` is the user id percent-encoded (RFC 3986 section 2.1, UTF-8), ``EXPIRY`` Unix seconds and
``MAC`` the base64url (RFC 4648 section 5, no padding) HMAC-SHA256 (RFC 2104) under the key of
``rankrec-viewer-v1 LF token name LF expiry LF user id``. Binding the token's name means an
assertion made for one token is refused with another; the expiry bounds a captured one's use.
:func:`check_viewer_assertion` compares MACs in constant time.

>>> import tempfile, pathlib
>>> path = pathlib.Path(tempfile.mkdtemp()) / "tokens.json"
>>> token = add_token(path, "wiki-frontend", "reader")
>>> check_token(load_tokens(path), token)
('wiki-frontend', 'reader')
>>> check_token(load_tokens(path), token + "x") is None
True
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import json
import os
import re
import secrets
import tempfile
import time
from dataclasses import dataclass, replace
from datetime import UTC, datetime
from pathlib import Path
from urllib.parse import quote, unquote

from ._validation import check_id, check_positive
from .errors import InputError

ROLES = ("reader", "admin")
TOKENS_FORMAT = 1
_NAME = re.compile(r"[A-Za-z0-9][A-Za-z0-9._-]{0,63}")
_KEY = re.compile(r"[A-Za-z0-9_-]{43}")  # 32 bytes in base64url without padding
_FIELDS = {"name", "role", "sha256", "created"}
_ASSERTION_LABEL = b"rankrec-viewer-v1"
ASSERTION_MAX_CHARS = 4096
"""Longest viewer assertion looked at (a 256-character id percent-encoded is at most 3,072)."""


@dataclass(frozen=True)
class TokenEntry:
    """One token as stored: who it is for, what it may do, the SHA-256 hex digest, when it was made,
    and its viewer key (base64url text, or None: the token cannot name viewers)."""

    name: str
    role: str
    sha256: str
    created: str
    viewer_key: str | None = None

    def __repr__(self) -> str:  # never print the key
        return f"TokenEntry(name={self.name!r}, role={self.role!r}, viewer_key={self.viewer_key is not None})"


def _digest(token: str) -> str:
    return hashlib.sha256(token.encode("utf-8", "surrogatepass")).hexdigest()


def _check_entry(path: Path, position: int, raw) -> TokenEntry:
    where = f"token {position}"
    if not isinstance(raw, dict) or not _FIELDS <= set(raw) <= _FIELDS | {"viewer_key"}:
        raise InputError(
            str(path), None, f"{where}: expected fields name, role, sha256, created (and viewer_key)"
        )
    if not isinstance(raw["name"], str) or not _NAME.fullmatch(raw["name"]):
        raise InputError(str(path), None, f"{where}: bad name {raw['name']!r}")
    if raw["role"] not in ROLES:
        raise InputError(str(path), None, f"{where}: role must be reader or admin, not {raw['role']!r}")
    if not isinstance(raw["sha256"], str) or not re.fullmatch(r"[0-9a-f]{64}", raw["sha256"]):
        raise InputError(str(path), None, f"{where}: sha256 must be 64 lower-case hex digits")
    key = raw.get("viewer_key")
    if key is not None and not (isinstance(key, str) and _KEY.fullmatch(key)):
        raise InputError(str(path), None, f"{where}: viewer_key must be 43 base64url characters")
    return TokenEntry(raw["name"], raw["role"], raw["sha256"], str(raw["created"]), key)


def load_tokens(path: str | Path) -> tuple[TokenEntry, ...]:
    """The tokens in ``path`` (InputError when it is missing or malformed)."""
    path = Path(path)
    try:
        raw = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as error:
        raise InputError(str(path), None, f"not a readable tokens file: {error}") from None
    if (
        not isinstance(raw, dict)
        or raw.get("format") != TOKENS_FORMAT
        or not isinstance(raw.get("tokens"), list)
    ):
        raise InputError(str(path), None, f"expected {{'format': {TOKENS_FORMAT}, 'tokens': [...]}}")
    entries = tuple(_check_entry(path, position, item) for position, item in enumerate(raw["tokens"]))
    names = [entry.name for entry in entries]
    if len(set(names)) != len(names):
        raise InputError(str(path), None, "two tokens share a name")
    return entries


def _write_atomically(path: Path, entries: tuple[TokenEntry, ...]) -> None:
    body = {
        "format": TOKENS_FORMAT,
        "tokens": [
            {"name": e.name, "role": e.role, "sha256": e.sha256, "created": e.created}
            | ({} if e.viewer_key is None else {"viewer_key": e.viewer_key})
            for e in entries
        ],
    }
    path.parent.mkdir(parents=True, exist_ok=True)
    descriptor, staging = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent)
    try:
        os.fchmod(descriptor, 0o600)
        with os.fdopen(descriptor, "w", encoding="utf-8") as handle:
            handle.write(json.dumps(body, indent=2) + "\n")
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(staging, path)
    except BaseException:
        Path(staging).unlink(missing_ok=True)
        raise


def add_token(path: str | Path, name: str, role: str) -> str:
    """Make a token for ``name`` with ``role``, store its hash in ``path`` (created if missing), return it.

    ValueError for a bad name or role, or a name the file already holds.
    """
    path = Path(path)
    if not isinstance(name, str) or not _NAME.fullmatch(name):
        raise ValueError(
            f"name must be 1-64 letters, digits, '.', '_' or '-' (starting with a letter or digit); "
            f"got {name!r}"
        )
    if role not in ROLES:
        raise ValueError(f"role must be 'reader' or 'admin'; got {role!r}")
    entries = load_tokens(path) if path.exists() else ()
    if any(entry.name == name for entry in entries):
        raise ValueError(f"name {name!r} already has a token in {path.name}")
    token = secrets.token_urlsafe(32)
    created = datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
    _write_atomically(path, (*entries, TokenEntry(name, role, _digest(token), created)))
    return token


def revoke_token(path: str | Path, name: str) -> TokenEntry:
    """Remove the token of ``name`` from ``path`` (atomically, as :func:`add_token` writes) and return
    the entry removed. A running service drops it within seconds (:class:`api.auth.TokenTable`).

    ValueError when the file holds no token of that name; InputError when the file is missing or
    malformed.

    >>> import tempfile, pathlib
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "tokens.json"
    >>> token = add_token(path, "old-frontend", "reader")
    >>> revoke_token(path, "old-frontend").name, check_token(load_tokens(path), token)
    ('old-frontend', None)
    """
    path = Path(path)
    entries = load_tokens(path)
    kept = tuple(entry for entry in entries if entry.name != name)
    if len(kept) == len(entries):
        shown = name if isinstance(name, str) and _NAME.fullmatch(name) else "(not a token name)"
        raise ValueError(f"{path.name} holds no token named {shown!r}")
    _write_atomically(path, kept)
    return next(entry for entry in entries if entry.name == name)


def find_token(tokens, presented: str) -> TokenEntry | None:
    """The entry of the token ``presented`` or None (each stored hash compared in constant time)."""
    digest = _digest(presented)
    found = None
    for entry in tokens:
        if hmac.compare_digest(entry.sha256, digest) and found is None:
            found = entry
    return found


def check_token(tokens, presented: str) -> tuple[str, str] | None:
    """``(name, role)`` of the token ``presented`` or None (:func:`find_token`)."""
    found = find_token(tokens, presented)
    return None if found is None else (found.name, found.role)


# -- viewer assertions -------------------------------------------------------------------------------
def add_viewer_key(path: str | Path, name: str) -> str:
    """Give the token of ``name`` a new random viewer key (32 bytes, base64url), replacing any it had
    (assertions made with the old key stop working at once), and return it; shown once.

    ValueError when the file holds no token of that name.

    >>> import tempfile, pathlib
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "tokens.json"
    >>> _ = add_token(path, "wiki-frontend", "reader")
    >>> key = add_viewer_key(path, "wiki-frontend")
    >>> user = check_viewer_assertion(key, "wiki-frontend", viewer_assertion(key, "wiki-frontend", "u00042"))
    >>> user
    'u00042'
    """
    path = Path(path)
    entries = load_tokens(path)
    if not any(entry.name == name for entry in entries):
        shown = name if isinstance(name, str) and _NAME.fullmatch(name) else "(not a token name)"
        raise ValueError(f"{path.name} holds no token named {shown!r}")
    key = secrets.token_urlsafe(32)
    _write_atomically(
        path, tuple(replace(entry, viewer_key=key) if entry.name == name else entry for entry in entries)
    )
    return key


def viewer_key_of(path: str | Path, name: str) -> str:
    """The viewer key of the token ``name`` in ``path`` (ValueError: no such token, or it has none)."""
    path = Path(path)
    entry = next((entry for entry in load_tokens(path) if entry.name == name), None)
    if entry is None:
        shown = name if isinstance(name, str) and _NAME.fullmatch(name) else "(not a token name)"
        raise ValueError(f"{path.name} holds no token named {shown!r}")
    if entry.viewer_key is None:
        raise ValueError(
            f"the token {name!r} has no viewer key; make one with `rankrec token add --viewer-key`"
        )
    return entry.viewer_key


def _key_bytes(key: str | bytes) -> bytes:
    if isinstance(key, bytes):
        raw = key
    elif isinstance(key, str) and _KEY.fullmatch(key):
        raw = base64.urlsafe_b64decode(key + "=")
    else:
        raise ValueError("key must be the 43-character viewer key or its 32 bytes")
    if len(raw) < 32:
        raise ValueError(f"key must hold at least 32 bytes; got {len(raw)}")
    return raw


def _mac(key: bytes, token_name: str, expiry: int, user: str) -> str:
    message = b"\n".join(
        (_ASSERTION_LABEL, token_name.encode("ascii"), str(expiry).encode("ascii"), user.encode("utf-8"))
    )
    digest = hmac.new(key, message, hashlib.sha256).digest()
    return base64.urlsafe_b64encode(digest).rstrip(b"=").decode("ascii")


def viewer_assertion(
    key: str | bytes, token_name: str, user: str, ttl: float = 60, *, now: float | None = None
) -> str:
    """A signed viewer assertion saying the holder of ``key`` shows a list to ``user``, valid for
    ``ttl`` seconds from ``now`` (default: the current time); the value of the ``X-Rankrec-Viewer``
    header. ``token_name`` is the name of the bearer token it will travel with.

    >>> key = bytes(range(32))
    >>> viewer_assertion(key, "wiki-frontend", "u00042", now=1_800_000_000)[:18]
    'u00042.1800000060.'
    """
    if not isinstance(token_name, str) or not _NAME.fullmatch(token_name):
        raise ValueError("token_name must be a token's name (letters, digits, '.', '_', '-')")
    check_id("user", user)
    ttl = check_positive("ttl", ttl)
    expiry = int((time.time() if now is None else now) + ttl)
    return f"{quote(user, safe='')}.{expiry}.{_mac(_key_bytes(key), token_name, expiry, user)}"


def check_viewer_assertion(
    key: str | bytes, token_name: str, assertion: str, *, max_ttl: float = 300, now: float | None = None
) -> str:
    """The user a viewer assertion names, if its MAC is right (compared in constant time) and it has
    not expired nor expires more than ``max_ttl`` seconds after ``now``; ValueError saying which of
    these failed, never quoting the assertion.

    >>> key = bytes(range(32))
    >>> made = viewer_assertion(key, "frontend", "u00042", ttl=60, now=1_800_000_000)
    >>> check_viewer_assertion(key, "frontend", made, now=1_800_000_030)
    'u00042'
    >>> check_viewer_assertion(key, "other-token", made, now=1_800_000_030)
    Traceback (most recent call last):
    ...
    ValueError: the viewer assertion's MAC does not match
    """
    raw_key = _key_bytes(key)
    if not isinstance(assertion, str) or len(assertion) > ASSERTION_MAX_CHARS or assertion.count(".") < 2:
        raise ValueError("a viewer assertion is USER.EXPIRY.MAC")
    encoded, expiry_text, presented = assertion.rsplit(".", 2)
    if not re.fullmatch(r"[0-9]{1,12}", expiry_text) or not re.fullmatch(r"[A-Za-z0-9_-]{43}", presented):
        raise ValueError("a viewer assertion is USER.EXPIRY.MAC (expiry in Unix seconds, MAC in base64url)")
    try:
        user = unquote(encoded, errors="strict")
    except UnicodeDecodeError:
        raise ValueError("the viewer assertion's user is not percent-encoded UTF-8") from None
    try:
        check_id("user", user)
    except ValueError:
        raise ValueError("the viewer assertion's user is not a valid user id") from None
    expiry = int(expiry_text)
    if not hmac.compare_digest(_mac(raw_key, token_name, expiry, user), presented):
        raise ValueError("the viewer assertion's MAC does not match")
    moment = time.time() if now is None else now
    if expiry <= moment:
        raise ValueError("the viewer assertion has expired")
    if expiry > moment + max_ttl:
        raise ValueError(f"the viewer assertion expires more than {max_ttl:g} s ahead")
    return user

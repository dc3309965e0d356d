"""Bearer tokens of the HTTP service: a JSON file holding, per token, a name, a role and a hash.

A token is shown once, when :func:`add_token` makes it; the file keeps only its SHA-256 hex
digest, so a copy of the file does not let anyone call the service. The file is written
atomically (a temporary file beside it, then one ``rename``) with mode 0600; :func:`revoke_token`
removes one by name::

    {"format": 1, "tokens": [{"name": "wiki-frontend", "role": "reader",
                              "sha256": "9f86...", "created": "2026-04-01T06:11:54Z"}]}

>>> import tempfile, pathlib
>>> path = pathlib.Path(tempfile.mkdtemp()) / "tokens.json"
>>> token = add_token(path, "wiki-frontend", "reader")
>>> check_token(load_tokens(path), token)
('wiki-frontend', 'reader')
>>> check_token(load_tokens(path), token + "x") is None
True
"""

from __future__ import annotations

import hashlib
import hmac
import json
import os
import re
import secrets
import tempfile
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

from .errors import InputError

ROLES = ("reader", "admin")
TOKENS_FORMAT = 1
_NAME = re.compile(r"[A-Za-z0-9][A-Za-z0-9._-]{0,63}")


@dataclass(frozen=True)
class TokenEntry:
    """One token as stored: who it is for, what it may do, the SHA-256 hex digest, when it was made."""

    name: str
    role: str
    sha256: str
    created: str


def _digest(token: str) -> str:
    return hashlib.sha256(token.encode("utf-8", "surrogatepass")).hexdigest()


def _check_entry(path: Path, position: int, raw) -> TokenEntry:
    where = f"token {position}"
    if not isinstance(raw, dict) or set(raw) != {"name", "role", "sha256", "created"}:
        raise InputError(str(path), None, f"{where}: expected fields name, role, sha256, created")
    if not isinstance(raw["name"], str) or not _NAME.fullmatch(raw["name"]):
        raise InputError(str(path), None, f"{where}: bad name {raw['name']!r}")
    if raw["role"] not in ROLES:
        raise InputError(str(path), None, f"{where}: role must be reader or admin, not {raw['role']!r}")
    if not isinstance(raw["sha256"], str) or not re.fullmatch(r"[0-9a-f]{64}", raw["sha256"]):
        raise InputError(str(path), None, f"{where}: sha256 must be 64 lower-case hex digits")
    return TokenEntry(raw["name"], raw["role"], raw["sha256"], str(raw["created"]))


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
            {"name": e.name, "role": e.role, "sha256": e.sha256, "created": e.created} for e in entries
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


def check_token(tokens, presented: str) -> tuple[str, str] | None:
    """``(name, role)`` of the token ``presented`` or None (each stored hash compared in constant time)."""
    digest = _digest(presented)
    found = None
    for entry in tokens:
        if hmac.compare_digest(entry.sha256, digest) and found is None:
            found = (entry.name, entry.role)
    return found

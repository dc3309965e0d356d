"""Who is calling: bearer tokens from the tokens file, each with a role (reader or admin).

``require_reader`` lets readers and admins through, ``require_admin`` only admins. A missing or
wrong token answers 401 ``unauthorised``; a token of the wrong role 403 ``forbidden``. Tokens are
compared by their SHA-256 hashes in constant time (:func:`rankrec.tokens.check_token`); the file
is read again soon after it changes (:class:`TokenTable`), so ``rankrec token add`` and ``rankrec
token revoke`` take effect without a restart.
"""

from __future__ import annotations

import logging
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Annotated, Literal

from fastapi import Depends, Request
from fastapi.security import HTTPAuthorizationCredentials, HTTPBearer

from rankrec.errors import InputError
from rankrec.tokens import find_token, load_tokens

from .errors import ApiError

log = logging.getLogger("rankrec.api")
_CHALLENGE = {"WWW-Authenticate": "Bearer"}
_bearer = HTTPBearer(auto_error=False, description="a token made by `rankrec token add`")


@dataclass(frozen=True)
class Caller:
    """The holder of a valid token: its name, role and viewer key (text as stored; None: the token
    cannot name viewers, :mod:`api.viewers`)."""

    name: str
    role: Literal["reader", "admin"]
    viewer_key: str | None = field(default=None, repr=False)


class TokenTable:
    """The tokens file's entries, re-read when the file changes: a token added or revoked takes effect
    on the next call, without a restart.

    Each check looks at the file (one ``stat``, about a microsecond) and reads it again when its
    modification or change time, size or inode differ from the last read. File times have a coarse
    tick, so a second edit of the same size within one tick would leave them all unchanged (the
    "racy" case, as git's index calls it): while the last read came less than ``RACY_SECONDS`` after
    the file's last change, the file is also read again, at most once per ``RACY_EVERY`` seconds.
    A revoked token therefore stops working at once, or within about a second in the racy case.
    """

    RACY_SECONDS = 2.0
    RACY_EVERY = 0.5

    def __init__(self, path: Path, *, clock=time.monotonic) -> None:
        self.path = Path(path)
        self._clock = clock
        self._lock = threading.Lock()
        self._stamp = self._file_stamp()
        self._entries: tuple = load_tokens(self.path)  # InputError: the service does not start
        self._racy = self._is_racy(self._stamp)
        self._read_at = clock()

    def _file_stamp(self) -> tuple | None:
        try:
            status = self.path.stat()
        except OSError:
            return None
        return (status.st_mtime_ns, status.st_ctime_ns, status.st_size, status.st_ino)

    def _is_racy(self, stamp: tuple | None) -> bool:
        """Whether the file may change again without ``stamp`` changing (read within a tick of a write)."""
        return stamp is not None and time.time() - max(stamp[0], stamp[1]) / 1e9 < self.RACY_SECONDS

    def _fresh(self, stamp: tuple | None) -> bool:
        return stamp == self._stamp and (not self._racy or self._clock() - self._read_at < self.RACY_EVERY)

    def refresh(self) -> None:
        """Read the file again if it may have changed; a file that became unreadable keeps the last
        good entries (logged)."""
        stamp = self._file_stamp()
        if self._fresh(stamp):
            return
        with self._lock:
            if self._fresh(stamp):
                return
            try:
                self._entries = load_tokens(self.path)
            except InputError as error:
                log.error("tokens file refused, keeping the previous tokens: %s", error)
            self._stamp, self._racy, self._read_at = stamp, self._is_racy(stamp), self._clock()

    def check(self, presented: str) -> Caller | None:
        self.refresh()
        found = find_token(self._entries, presented)
        return None if found is None else Caller(found.name, found.role, found.viewer_key)


def _caller(request: Request, credentials: HTTPAuthorizationCredentials | None) -> Caller:
    if credentials is None or credentials.scheme.lower() != "bearer" or not credentials.credentials:
        raise ApiError(
            401,
            "unauthorised",
            "a bearer token is required (Authorization: Bearer TOKEN)",
            headers=_CHALLENGE,
        )
    caller = request.app.state.service.tokens.check(credentials.credentials)
    if caller is None:
        raise ApiError(401, "unauthorised", "the bearer token is not valid", headers=_CHALLENGE)
    return caller


_Credentials = Annotated[HTTPAuthorizationCredentials | None, Depends(_bearer)]


# async: run on the event loop, not in the thread pool (the check is a stat() and a hash compare);
# a sync dependency costs each request a thread hand-off (about 0.4 ms measured by tests/bench/bench_serve)
async def require_reader(request: Request, credentials: _Credentials) -> Caller:
    """A caller with a reader or admin token."""
    return _caller(request, credentials)


async def require_admin(request: Request, credentials: _Credentials) -> Caller:
    """A caller with an admin token (403 ``forbidden`` for a reader token)."""
    caller = _caller(request, credentials)
    if caller.role != "admin":
        raise ApiError(403, "forbidden", "this call needs an admin token")
    return caller


#: route parameter types: ``caller: ReaderCaller`` or ``caller: AdminCaller``
ReaderCaller = Annotated[Caller, Depends(require_reader)]
AdminCaller = Annotated[Caller, Depends(require_admin)]

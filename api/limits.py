"""Rate and concurrency limits of the expensive routes (related, personal lists, landing, search).

Each token has a token bucket (``rate_per_second`` refill, ``rate_burst`` capacity): a request
takes one request's worth from its token's bucket or is answered 429 ``rate_limited``. A request
answered "unknown page" or "unknown team" costs ``unknown_cost`` requests' worth in all (a page the
caller may not see is answered as unknown, so it costs the same): honest clients ask for pages that
exist, while a client probing for ids, or for restricted ones, asks mostly for pages that do not,
and each of those costs a close-id search. At most
``max_concurrent`` of these requests run at once, and at most ``max_concurrent_per_token`` of one
token, so one client cannot take every thread of the pool that runs them; a request past either
bound is answered 429 ``too_many_concurrent``. Both 429s carry ``Retry-After`` (RFC 6585 section 4;
RFC 9110 section 10.2.3, whole seconds) and are sent after a pause of at most that long
(``limit_pause_seconds``, on the event loop, costing no thread): a client that ignores
``Retry-After`` then gets at most one answer per pause on each of its connections, instead of a
stream of cheap refusals that would still take the CPU honest clients need.

The limits are kept per token name (the tokens file bounds how many there are); requests that
fail authentication never reach them.
"""

from __future__ import annotations

import asyncio
import math
import threading
import time
from typing import Annotated

from fastapi import Depends, Request

from rankrec.errors import UnknownName

from .auth import Caller, require_reader
from .errors import ApiError


class Limits:
    """The buckets and counters of one service (one per app, :attr:`api.service.Service.limits`).

    >>> from api.settings import ServiceSettings
    >>> limits = Limits(ServiceSettings(index="i", tokens="t", rate_per_second=1, rate_burst=2),
    ...                 clock=lambda: 0.0)
    >>> [limits.take("frontend") for _ in range(3)]
    [None, None, 1.0]
    """

    def __init__(self, settings, *, clock=time.monotonic) -> None:
        self.rate = float(settings.rate_per_second)
        self.burst = float(settings.rate_burst)
        self.most = settings.max_concurrent
        self.most_per_token = settings.max_concurrent_per_token
        self.pause = float(settings.limit_pause_seconds)
        self.unknown_cost = float(settings.unknown_cost)
        self._clock = clock
        self._lock = threading.Lock()
        self._buckets: dict[str, tuple[float, float]] = {}  # name: (requests left, when counted)
        self._running: dict[str, int] = {}
        self._total = 0

    def take(self, name: str) -> float | None:
        """Take one request from the bucket of ``name``: None if it held one, else the seconds until
        it will."""
        if self.rate <= 0:
            return None
        with self._lock:
            now = self._clock()
            left, then = self._buckets.get(name, (self.burst, now))
            left = min(self.burst, left + (now - then) * self.rate)
            if left >= 1.0:
                self._buckets[name] = (left - 1.0, now)
                return None
            self._buckets[name] = (left, now)
            return (1.0 - left) / self.rate

    def charge(self, name: str, requests: float) -> None:
        """Take ``requests`` more from the bucket of ``name`` (it may go below empty, down to minus its
        burst: its next request then waits longer)."""
        if self.rate <= 0 or requests <= 0:
            return
        with self._lock:
            now = self._clock()
            left, then = self._buckets.get(name, (self.burst, now))
            left = min(self.burst, left + (now - then) * self.rate)
            self._buckets[name] = (max(-self.burst, left - requests), now)

    def enter(self, name: str) -> bool:
        """Count one more running request of ``name``, unless a bound is reached (then False)."""
        with self._lock:
            running = self._running.get(name, 0)
            if self._total >= self.most or running >= self.most_per_token:
                return False
            self._running[name] = running + 1
            self._total += 1
            return True

    def leave(self, name: str) -> None:
        with self._lock:
            running = self._running.get(name, 0) - 1
            if running > 0:
                self._running[name] = running
            else:
                self._running.pop(name, None)
            self._total -= 1

    @property
    def running(self) -> int:
        return self._total


async def _refuse(limits: Limits, wait: float, code: str, message: str) -> ApiError:
    seconds = max(1, math.ceil(wait))
    if limits.pause > 0:
        await asyncio.sleep(min(limits.pause, seconds))
    return ApiError(429, code, message, {"retry_after": seconds}, headers={"Retry-After": str(seconds)})


async def limited(request: Request, caller: Annotated[Caller, Depends(require_reader)]):
    """Hold one of the caller's requests for the duration of the route, or answer 429 (see above)."""
    limits: Limits = request.app.state.service.limits
    wait = limits.take(caller.name)
    if wait is not None:
        raise await _refuse(limits, wait, "rate_limited", "too many requests for this token; slow down")
    if not limits.enter(caller.name):
        raise await _refuse(limits, 1.0, "too_many_concurrent", "too many requests at once; retry shortly")
    try:
        yield caller
    except UnknownName:
        limits.charge(caller.name, limits.unknown_cost - 1)
        raise
    finally:
        limits.leave(caller.name)


#: route parameter type of the expensive routes: ``caller: LimitedCaller``. Scope "function": the place
#: is given back as soon as the route function ends, before the answer is sent, so a client that sends
#: its next request on receiving an answer never finds its own last request still counted
LimitedCaller = Annotated[Caller, Depends(limited, scope="function")]

"""What the service needs to know: where the index, store and tokens are, and its limits.

Built by argument (``ServiceSettings(index=..., tokens=...)``) in tests, or from ``RANKREC_SERVE_*``
environment variables by :meth:`ServiceSettings.from_environment` in the server process that
``rankrec serve`` starts (the uvicorn factory cannot take arguments).
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from dataclasses import dataclass, fields
from pathlib import Path

PREFIX = "RANKREC_SERVE_"


def _path(value: str) -> Path:
    return Path(value)


def _optional_path(value: str) -> Path | None:
    return Path(value) if value else None


def _optional_int(value: str) -> int | None:
    return int(value) if value else None


_CASTS = {
    "index": _path,
    "wiki": _optional_path,
    "tokens": _path,
    "max_k": int,
    "max_batch": int,
    "max_body_bytes": int,
    "watch_seconds": float,
    "pseudonym_key": _optional_path,
    "retention_days": _optional_int,
    "viewer_max_ttl": float,
    "rate_per_second": float,
    "rate_burst": int,
    "max_concurrent": int,
    "max_concurrent_per_token": int,
    "limit_pause_seconds": float,
    "unknown_cost": float,
}


@dataclass(frozen=True)
class ServiceSettings:
    """Settings of one service instance.

    Parameters
    ----------
    index : Path
        The published index folder (a symbolic link that ``rankrec build`` swaps atomically).
    wiki : Path or None
        The wiki store; None: the store the index manifest names.
    tokens : Path
        The tokens file (:mod:`rankrec.tokens`).
    max_k, max_batch, max_body_bytes : int
        Largest list length, views per POST, and request body in bytes.
    watch_seconds : float
        How often to look for a newly published index (0: never; use ``POST /v1/index/reload``).
    pseudonym_key : Path or None
        Key file for pseudonymous user ids (:mod:`rankrec.privacy`); None: ids used as given.
    retention_days : int or None
        Views older than this many days are deleted (None: kept).
    viewer_max_ttl : float
        Seconds ahead a viewer assertion may expire at most (:mod:`api.viewers`); 300.
    rate_per_second, rate_burst : float, int
        Each token's bucket for the list and search routes: refilled at ``rate_per_second`` (0: no
        rate limit), holding at most ``rate_burst`` requests (:mod:`api.limits`); 1000 and 2000 (above
        what one 2-core machine serves, so an honest front end is not capped: measured 430 req/s).
    unknown_cost : float
        Requests' worth a request answered "unknown page" (or team) takes from the bucket; 50 (an
        unknown id costs about what a list costs to answer, so at 10 a token probing for ids still took
        a third of a 2-core machine from honest clients, measured with ``tools/attack_throughput.py``;
        at 50 it takes about 20 a second and an honest front end can still absorb 20 typos a second).
    max_concurrent, max_concurrent_per_token : int
        List and search requests running at once, in all and per token (32 and 8; the thread pool
        that runs them has 40 threads, so health, views and admin calls always find one).
    limit_pause_seconds : float
        How long a request over a limit waits before its 429 answer (at most its ``Retry-After``),
        so a client that ignores ``Retry-After`` sends at most one request per pause and
        connection; 1.0 (0: answer at once).

    >>> ServiceSettings.from_environment({"RANKREC_SERVE_INDEX": "ix", "RANKREC_SERVE_TOKENS": "t.json",
    ...                                   "RANKREC_SERVE_MAX_K": "20"}).max_k
    20
    """

    index: Path
    tokens: Path
    wiki: Path | None = None
    max_k: int = 100
    max_batch: int = 1000
    max_body_bytes: int = 1_048_576
    watch_seconds: float = 2.0
    pseudonym_key: Path | None = None
    retention_days: int | None = None
    viewer_max_ttl: float = 300.0
    rate_per_second: float = 1000.0
    rate_burst: int = 2000
    max_concurrent: int = 32
    max_concurrent_per_token: int = 8
    limit_pause_seconds: float = 1.0
    unknown_cost: float = 50.0

    def __post_init__(self) -> None:
        for name in ("max_k", "max_batch", "max_body_bytes", "rate_burst", "max_concurrent"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, int) or value < 1:
                raise ValueError(f"{name} must be a positive integer; got {value!r}")
        if (
            isinstance(self.max_concurrent_per_token, bool)
            or not isinstance(self.max_concurrent_per_token, int)
            or not 1 <= self.max_concurrent_per_token <= self.max_concurrent
        ):
            raise ValueError(
                "max_concurrent_per_token must be an integer from 1 to max_concurrent; "
                f"got {self.max_concurrent_per_token!r}"
            )
        for name in ("watch_seconds", "rate_per_second", "limit_pause_seconds"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, int | float) or not 0 <= value < float("inf"):
                raise ValueError(f"{name} must be a finite number >= 0; got {value!r}")
        if isinstance(self.unknown_cost, bool) or not (
            isinstance(self.unknown_cost, int | float) and 1 <= self.unknown_cost <= 1000
        ):
            raise ValueError(f"unknown_cost must be a number from 1 to 1000; got {self.unknown_cost!r}")
        if isinstance(self.viewer_max_ttl, bool) or not (
            isinstance(self.viewer_max_ttl, int | float) and 0 < self.viewer_max_ttl <= 3600
        ):
            raise ValueError(
                f"viewer_max_ttl must be a number of seconds in (0, 3600]; got {self.viewer_max_ttl!r}"
            )
        if self.retention_days is not None and (
            not isinstance(self.retention_days, int) or self.retention_days < 1
        ):
            raise ValueError(
                f"retention_days must be a positive integer or None; got {self.retention_days!r}"
            )

    @classmethod
    def from_environment(cls, environ: Mapping[str, str] | None = None) -> ServiceSettings:
        """Settings from ``RANKREC_SERVE_<FIELD>`` variables (``os.environ`` by default).

        ``INDEX`` and ``TOKENS`` are required; an empty value counts as unset (the default).
        """
        environ = os.environ if environ is None else environ
        values = {}
        for field in fields(cls):
            key = PREFIX + field.name.upper()
            if not environ.get(key):  # unset or empty: the default
                continue
            try:
                values[field.name] = _CASTS[field.name](environ[key])
            except ValueError:
                raise ValueError(f"{key} must be a {field.type}; got {environ[key]!r}") from None
        for required in ("index", "tokens"):
            if required not in values:
                raise ValueError(f"{PREFIX}{required.upper()} is not set")
        return cls(**values)

    def environment(self) -> dict[str, str]:
        """The ``RANKREC_SERVE_*`` variables that :meth:`from_environment` turns back into these settings."""
        out = {}
        for field in fields(self):
            value = getattr(self, field.name)
            out[PREFIX + field.name.upper()] = "" if value is None else str(value)
        return out

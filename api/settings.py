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

    def __post_init__(self) -> None:
        for name in ("max_k", "max_batch", "max_body_bytes"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, int) or value < 1:
                raise ValueError(f"{name} must be a positive integer; got {value!r}")
        if not isinstance(self.watch_seconds, int | float) or not self.watch_seconds >= 0:
            raise ValueError(f"watch_seconds must be a number >= 0; got {self.watch_seconds!r}")
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

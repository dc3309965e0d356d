"""Reader for view events: CSV with header ``user,page,timestamp[,dwell]``, or JSON Lines."""

from __future__ import annotations

import time
from collections.abc import Iterator
from pathlib import Path

from ..errors import InputError
from ._fields import (
    FieldError,
    check_now,
    iter_mappings,
    parse_dwell,
    parse_id,
    parse_timestamp,
)
from ._text import check_encoding
from .records import Origin, ViewRecord

REQUIRED_COLUMNS = ("user", "page", "timestamp")


def read_view_events(
    path: str | Path, *, encoding: str = "utf-8", now: float | None = None
) -> Iterator[ViewRecord | InputError]:
    """Yield a ViewRecord per view event, or InputErrors for bad rows.

    CSV with a header naming ``user, page, timestamp`` and optionally ``dwell`` in any order
    (other columns ignored), or JSON Lines with those keys (chosen as for page exports).
    ``timestamp`` is ISO 8601 or Unix seconds (see :func:`parse_timestamp`); one later than
    ``now`` (Unix seconds, default: the time reading starts) plus 300 s is an InputError.
    ``dwell`` is seconds >= 0, or empty/absent/null for unknown.

    Examples
    --------
    >>> import tempfile, os
    >>> with tempfile.NamedTemporaryFile("w", suffix=".csv", delete=False) as f:
    ...     _ = f.write("page,user,timestamp\\nops/db,ines,2026-05-03T09:15:00Z\\n")
    >>> view = next(read_view_events(f.name, now=1.8e9))
    >>> view.user, view.page, view.timestamp
    ('ines', 'ops/db', 1777799700.0)
    >>> os.unlink(f.name)
    """
    check_encoding(encoding)
    return _read(path, encoding, check_now(now))


def _read(path: str | Path, encoding: str, now: float | None) -> Iterator[ViewRecord | InputError]:
    name = str(path)
    if now is None:
        now = time.time()
    for item in iter_mappings(path, encoding, REQUIRED_COLUMNS, ("dwell",)):
        if isinstance(item, InputError):
            yield item
            continue
        number, row = item
        try:
            user = parse_id(row.get("user"), "user id")
            page = parse_id(row.get("page"), "page id")
            if row.get("timestamp") is None:
                raise FieldError("missing timestamp")
            timestamp = parse_timestamp(row["timestamp"], now)
            dwell = parse_dwell(row.get("dwell"))
        except FieldError as error:
            yield InputError(name, number, str(error))
            continue
        yield ViewRecord(user, page, timestamp, Origin(name, number), dwell)

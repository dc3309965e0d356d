"""Reader for view events: CSV with header ``user,page,timestamp[,dwell]``, or JSON Lines.

:func:`check_view` is the check of one view event, shared with the service's ``POST /v1/views``.
"""

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
    ``dwell`` is seconds >= 0, or empty/absent/null for unknown. Each record is checked by
    :func:`check_view`.

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


def check_view(
    user: object,
    page: object,
    timestamp: object,
    dwell: object = None,
    *,
    origin: Origin,
    now: float | None = None,
) -> ViewRecord:
    """One view event, checked as the views reader checks each record; InputError at ``origin`` if bad.

    ``user`` and ``page`` are non-empty ids (JSON integers become strings), ``timestamp`` is ISO 8601
    or Unix seconds, at most 300 s after ``now`` (Unix seconds, default: the current time), and
    ``dwell`` is seconds >= 0 or None for unknown.

    Examples
    --------
    >>> check_view("ines", "ops/db", "2026-05-03T09:15:00Z", origin=Origin("api", 0), now=1.8e9).timestamp
    1777799700.0
    >>> check_view("ines", " ", 0, origin=Origin("views.csv", 7))
    Traceback (most recent call last):
    ...
    rankrec.errors.InputError: views.csv:7: empty page id
    """
    try:
        checked_user = parse_id(user, "user id")
        checked_page = parse_id(page, "page id")
        if timestamp is None:
            raise FieldError("missing timestamp")
        seconds = parse_timestamp(timestamp, now)
        checked_dwell = parse_dwell(dwell)
    except FieldError as error:
        raise InputError(origin.file, origin.line, str(error)) from None
    return ViewRecord(checked_user, checked_page, seconds, origin, checked_dwell)


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
            view = check_view(
                row.get("user"),
                row.get("page"),
                row.get("timestamp"),
                row.get("dwell"),
                origin=Origin(name, number),
                now=now,
            )
        except InputError as error:
            yield error
            continue
        yield view

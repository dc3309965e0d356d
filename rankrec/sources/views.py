"""Reader for view events: CSV with header ``user,page,timestamp[,dwell]``, or JSON Lines.

:func:`check_view` is the check of one view event, shared with the service's ``POST /v1/views``.
"""

from __future__ import annotations

import time
from collections.abc import Iterator
from functools import partial
from pathlib import Path

import numpy as np

from .._validation import ID_MAX_CHARS, refused_character
from ..errors import InputError
from ._fields import (
    CLOCK_SKEW,
    FieldError,
    check_now,
    column_count_reason,
    find_columns,
    first_data_line,
    is_json_lines,
    iter_json_objects,
    iter_rows,
    parse_dwell,
    parse_id,
    parse_timestamp,
)
from ._text import check_encoding
from .records import Origin, ViewRecord, ViewRows, expanded

REQUIRED_COLUMNS = ("user", "page", "timestamp")
RUN_ROWS = 50_000
"""Most views of one :class:`~rankrec.sources.records.ViewRows` run."""


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
    return expanded(_read(path, encoding, check_now(now)))


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


def read_view_rows(
    path: str | Path, *, encoding: str = "utf-8", now: float | None = None
) -> Iterator[ViewRows | InputError]:
    """What :func:`read_view_events` reads, its good rows in runs of at most :data:`RUN_ROWS` views
    (:class:`~rankrec.sources.records.ViewRows`), each bad row an InputError between two runs.

    Each distinct id and dwell is checked once; times of the usual shape (``2026-05-03T09:15:00Z``, or
    the same without ``Z``) are read a run at a time, others one by one. Every row gives the value or
    the error that :func:`check_view` gives.
    """
    check_encoding(encoding)
    return _read(path, encoding, check_now(now))


_CACHED = 500_000
"""Most distinct values of one column whose check is remembered (ids and dwells repeat)."""


class _Columns:
    """Checks a CSV run's rows column by column: each distinct id and dwell once (remembered, with the
    FieldError of a bad one), times of the usual shape together; a bad row is read again by
    :func:`check_view`, whose error it gives."""

    def __init__(self, name: str, now: float, columns: dict[str, int]) -> None:
        self.name, self.now = name, now
        self.at_user, self.at_page, self.at_time = columns["user"], columns["page"], columns["timestamp"]
        self.at_dwell = columns.get("dwell")
        self.users: dict[str, object] = {}
        self.pages: dict[str, object] = {}
        self.dwells: dict[str, object] = {}

    def runs(self, rows: list[list[str]], lines: list[int]) -> Iterator[ViewRows | InputError]:
        """The rows as runs, each bad row's InputError between two of them, in line order."""
        if not rows:
            return
        users = _column(rows, self.at_user, self.users, partial(_ids, what="user id"))
        pages = _column(rows, self.at_page, self.pages, partial(_ids, what="page id"))
        if self.at_dwell is None:
            dwells = [None] * len(rows)
        else:
            dwells = _column(rows, self.at_dwell, self.dwells, partial(_each, check=parse_dwell))
        stamps = [row[self.at_time] for row in rows]
        seconds = _times(stamps, self.now)
        bad = sorted({position for column in (users, pages, dwells, seconds) for position in _errors(column)})
        start = 0
        for position in bad:
            yield from _part(self.name, users, pages, seconds, dwells, lines, start, position)
            row = rows[position]
            dwell = None if self.at_dwell is None else row[self.at_dwell]
            try:  # the error check_view gives (the first bad field, in its order)
                check_view(
                    row[self.at_user],
                    row[self.at_page],
                    stamps[position],
                    dwell,
                    origin=Origin(self.name, lines[position]),
                    now=self.now,
                )
            except InputError as error:
                yield error
            else:  # pragma: no cover - the columns refuse only what check_view refuses
                raise AssertionError(f"{self.name}:{lines[position]}: checks disagree")
            start = position + 1
        yield from _part(self.name, users, pages, seconds, dwells, lines, start, len(rows))


def _errors(values: list) -> list[int]:
    return [position for position, value in enumerate(values) if isinstance(value, FieldError)]


def _part(name, users, pages, seconds, dwells, lines, start: int, stop: int) -> Iterator[ViewRows]:
    if start < stop:
        yield ViewRows(
            name,
            users[start:stop],
            pages[start:stop],
            seconds[start:stop],
            dwells[start:stop],
            lines[start:stop],
        )


def _column(rows: list[list[str]], at: int, cache: dict[str, object], check) -> list:
    """Each row's field ``at`` checked (its value, or its FieldError): fields new to ``cache`` by one
    ``check`` of them all (a list of fields -> a list of values or FieldErrors), then remembered."""
    fields = [row[at] for row in rows]
    values = [cache.get(field) for field in fields]
    if None not in values:
        return values
    fresh = list(dict.fromkeys(field for field, value in zip(fields, values, strict=True) if value is None))
    found = dict(zip(fresh, check(fresh), strict=True))
    if len(cache) < _CACHED:
        cache.update(found)
    return [found[field] if value is None else value for field, value in zip(fields, values, strict=True)]


def _each(fields: list[str], check) -> list:
    """``check`` of each field, or the FieldError it raises."""
    values: list = []
    for field in fields:
        try:
            values.append(check(field))
        except FieldError as error:
            values.append(error)
    return values


def _ids(fields: list[str], what: str) -> list:
    """:func:`parse_id` of each field (or its FieldError): when no field is blank, too long or holds a
    refused character (one search over them all), each stripped; otherwise one by one."""
    stripped = [field.strip() for field in fields]
    if (
        "" not in stripped
        and max(map(len, stripped)) <= ID_MAX_CHARS
        and not refused_character(" ".join(fields))
    ):
        return stripped
    return _each(fields, partial(parse_id, what=what))


_DIGITS = [0, 1, 2, 3, 5, 6, 8, 9, 11, 12, 14, 15, 17, 18]  # where YYYY-MM-DDTHH:MM:SS holds digits


def _times(stamps: list[str], now: float) -> list:
    """Unix seconds of each time (or the FieldError it raises). Those of the exact shape
    ``YYYY-MM-DDTHH:MM:SS[Z]`` are read together (numpy refuses a day, hour, minute or second out of
    range, as :func:`parse_timestamp` does); if one of them is refused, or lies before 1970 or after
    ``now`` plus the clock skew, and for every other shape, each is read by :func:`parse_timestamp`."""
    values: list = [None] * len(stamps)
    shaped = np.zeros(len(stamps), bool)
    try:
        raw = np.array(stamps, dtype="S20")
    except UnicodeEncodeError:  # not ASCII: the usual shape it is not
        raw = None
    if raw is not None and len(stamps):
        codes = raw.view(np.uint8).reshape(len(stamps), 20)
        lengths = np.fromiter(map(len, stamps), np.int64, len(stamps))
        digits = codes[:, _DIGITS]
        shaped = (lengths == 19) | ((lengths == 20) & (codes[:, 19] == ord("Z")))
        shaped &= ((digits >= ord("0")) & (digits <= ord("9"))).all(axis=1)
        shaped &= (codes[:, [4, 7]] == ord("-")).all(axis=1) & (codes[:, [13, 16]] == ord(":")).all(axis=1)
        shaped &= codes[:, 10] == ord("T")
        try:
            seconds = raw[shaped].astype("S19").astype("datetime64[s]").astype(np.int64).astype(np.float64)
        except ValueError:  # a date or time out of range among them
            shaped[:] = False
        else:
            inside = (seconds >= 0) & (seconds <= now + CLOCK_SKEW)
            positions = np.flatnonzero(shaped)
            shaped[positions[~inside]] = False
            for position, value in zip(positions[inside].tolist(), seconds[inside].tolist(), strict=True):
                values[position] = value
    for position in np.flatnonzero(~shaped).tolist():
        try:
            values[position] = parse_timestamp(stamps[position], now)
        except FieldError as error:
            values[position] = error
    return values


def _read(path: str | Path, encoding: str, now: float | None) -> Iterator[ViewRows | InputError]:
    name = str(path)
    now = time.time() if now is None else now
    if is_json_lines(path, first_data_line(path, encoding)):
        yield from _json_rows(name, iter_json_objects(path, encoding), now)
        return
    checks: _Columns | None = None
    width = 0
    rows: list[list[str]] = []
    lines: list[int] = []
    for item in iter_rows(path, encoding):
        if isinstance(item, InputError):
            if checks is not None:
                yield from checks.runs(rows, lines)
            rows, lines = [], []
            yield item
            continue
        number, fields = item
        if checks is None:
            try:
                checks = _Columns(name, now, find_columns(fields, REQUIRED_COLUMNS, ("dwell",)))
            except FieldError as error:
                yield InputError(name, number, str(error))
                return
            width = len(fields)
            continue
        if len(fields) != width:
            yield from checks.runs(rows, lines)
            rows, lines = [], []
            yield InputError(name, number, column_count_reason(len(fields), width))
            continue
        rows.append(fields)
        lines.append(number)
        if len(rows) >= RUN_ROWS:
            yield from checks.runs(rows, lines)
            rows, lines = [], []
    if checks is not None:
        yield from checks.runs(rows, lines)


def _json_rows(name: str, objects, now: float) -> Iterator[ViewRows | InputError]:
    """JSON Lines: each object checked by :func:`check_view`, good ones gathered in runs."""
    views: list[ViewRecord] = []
    for item in objects:
        if not isinstance(item, InputError):
            number, row = item
            values = (row.get("user"), row.get("page"), row.get("timestamp"), row.get("dwell"))
            try:
                views.append(check_view(*values, origin=Origin(name, number), now=now))
            except InputError as error:
                item = error
        if isinstance(item, InputError) or len(views) >= RUN_ROWS:
            yield from _gathered(name, views)
            views = []
        if isinstance(item, InputError):
            yield item
    yield from _gathered(name, views)


def _gathered(name: str, views: list[ViewRecord]) -> Iterator[ViewRows]:
    if views:
        yield ViewRows(
            name,
            [view.user for view in views],
            [view.page for view in views],
            [view.timestamp for view in views],
            [view.dwell for view in views],
            [view.origin.line for view in views],
        )

"""Field parsing shared by the line-oriented readers: rows, headers, timestamps, values.

Rows come from :func:`iter_rows`, which splits the lines of
:func:`rankrec.sources._text.iter_lines` into fields (tab-separated, or comma-separated
with RFC 4180 quoting, including quoted fields that span lines). The value parsers raise
:class:`FieldError` with a reason fit for an :class:`InputError`; the readers turn it into
one for the line at hand.
"""

from __future__ import annotations

import csv
import json
import math
import re
import time
from collections.abc import Iterable, Iterator, Sequence
from datetime import UTC, datetime
from pathlib import Path

from .._validation import id_problem, quoted
from ..errors import InputError
from ._text import iter_lines

CLOCK_SKEW = 300.0
"""Seconds a timestamp may lie after "now" before it counts as in the future (common practice)."""

_MAX_SPAN_LINES = 100
"""A quoted CSV field may span at most this many lines; past that the quote counts as unclosed."""

_TRUE = frozenset({"true", "1", "yes"})
_FALSE = frozenset({"false", "0", "no", ""})
_UNIX = re.compile(r"[0-9]+(?:\.[0-9]*)?|\.[0-9]+")
_ISO_SHAPE = re.compile(r"[0-9]{4}-?(?:[0-9]{2}-?[0-9]{2}|W[0-9]{2}-?[0-9]?)(?:[Tt ][0-9].*)?", re.DOTALL)

Row = tuple[int, list[str]]


class FieldError(ValueError):
    """A field that does not hold what its column needs; ``str(error)`` is the reason."""


def check_now(now: float | None) -> float | None:
    """Validate a reader's ``now`` argument (Unix seconds or None)."""
    if now is None:
        return None
    if isinstance(now, bool) or not isinstance(now, (int, float)) or not math.isfinite(now):
        raise ValueError(f"now must be finite Unix seconds or None, got {now!r}")
    return float(now)


def iter_rows(
    path: str | Path,
    encoding: str = "utf-8",
    *,
    comments: bool = False,
    delimiter: str | None = None,
) -> Iterator[Row | InputError]:
    """Yield ``(line_number, fields)`` for each non-blank line, or InputErrors.

    Parameters
    ----------
    path, encoding
        As for :func:`iter_lines`, whose errors are passed through.
    comments
        Skip lines whose first non-blank character is ``#``.
    delimiter
        ``"\\t"`` (fields split at tabs, no quoting), ``","`` (RFC 4180 quoting), or None:
        tab if the first data line holds a tab, else comma.

    Examples
    --------
    >>> import tempfile, os
    >>> with tempfile.NamedTemporaryFile("w", suffix=".csv", delete=False) as f:
    ...     _ = f.write('a,"b, c"\\n\\n"say ""hi"" now",d\\n')
    >>> list(iter_rows(f.name))
    [(1, ['a', 'b, c']), (3, ['say "hi" now', 'd'])]
    >>> os.unlink(f.name)
    """
    return rows_of(str(path), iter_lines(path, encoding), comments=comments, delimiter=delimiter)


def rows_of(
    name: str,
    lines: Iterator[tuple[int, str] | InputError],
    *,
    comments: bool = False,
    delimiter: str | None = None,
    chosen: list[str] | None = None,
) -> Iterator[Row | InputError]:
    """:func:`iter_rows` of the ``lines`` of the file ``name`` (as :func:`iter_lines` gives them);
    the delimiter decided on the first data line is appended to ``chosen`` (when given). A row
    consumes exactly its own lines (more than one for a quoted field that spans lines)."""
    for item in lines:
        if isinstance(item, InputError):
            yield item
            continue
        number, text = item
        stripped = text.strip()
        if not stripped or (comments and stripped[0] == "#"):
            continue
        if delimiter is None:
            delimiter = "\t" if "\t" in text else ","
            if chosen is not None:
                chosen.append(delimiter)
        if delimiter != "," or '"' not in text:
            yield number, text.split(delimiter)
            continue
        yield from _quoted_rows(name, number, text, lines)


def _quoted_rows(
    name: str, number: int, text: str, lines: Iterator[tuple[int, str] | InputError]
) -> Iterator[Row | InputError]:
    """Parse a CSV line holding quotes; join following lines while a quoted field is open."""
    held: list[tuple[int, str]] = []
    while True:
        try:
            yield number, next(csv.reader((text,), strict=True))
            return
        except csv.Error as error:
            if "unexpected end of data" not in str(error):
                yield InputError(name, number, f"cannot split the CSV row: {error}")
                return
        if len(held) >= _MAX_SPAN_LINES:
            break
        item = next(lines, None)
        if item is None or isinstance(item, InputError):
            if item is not None:
                yield item
            break
        held.append(item)
        text += "\n" + item[1]
    yield InputError(name, number, "quoted field is never closed (a '\"' without its closing '\"')")
    # Give the lines swallowed while looking for the closing quote their own chance.
    for line_number, line in held:
        if not line.strip():
            continue
        try:
            yield line_number, next(csv.reader((line,), strict=True))
        except csv.Error as error:
            yield InputError(name, line_number, f"cannot split the CSV row: {error}")


def find_columns(
    header: Sequence[str], required: Iterable[str], optional: Iterable[str] = ()
) -> dict[str, int]:
    """Map column name -> position from a header row (names compared stripped, case-insensitive).

    Raises FieldError when a required column is missing or a known column appears twice;
    unknown columns are ignored.

    >>> find_columns(["Page", "user", "timestamp", "note"], ["user", "page", "timestamp"], ["dwell"])
    {'page': 0, 'user': 1, 'timestamp': 2}
    """
    wanted = list(required) + list(optional)
    names = [field.strip().lower() for field in header]
    columns: dict[str, int] = {}
    for position, column in enumerate(names):
        if column in wanted:
            if column in columns:
                raise FieldError(f"column {column!r} appears twice in the header")
            columns[column] = position
    missing = [column for column in required if column not in columns]
    if missing:
        raise FieldError(
            f"header {_show_row(header)} lacks column(s) {', '.join(missing)} (expected {', '.join(wanted)})"
        )
    return columns


def _show_row(fields: Sequence[str]) -> str:
    shown = ",".join(fields)
    return repr(shown if len(shown) <= 80 else shown[:77] + "...")


def column_count_reason(found: int, expected: int | str) -> str:
    return f"wrong column count: {found} field(s), expected {expected}"


def parse_id(value: object, what: str) -> str:
    """A page, user, team or group id: a non-empty string (surrounding blanks dropped), bounded as
    every entry point bounds ids (:func:`rankrec._validation.check_id`).

    JSON integers are accepted and turned into strings; anything else is a FieldError.
    """
    if isinstance(value, str):
        text = value.strip()
    elif isinstance(value, int) and not isinstance(value, bool):
        text = str(value)
    elif value is None:
        raise FieldError(f"missing {what}")
    else:
        raise FieldError(f"{what} must be a string, not {type(value).__name__} {_short(value)}")
    if not text:
        raise FieldError(f"empty {what}")
    problem = id_problem(text)
    if problem is not None:
        raise FieldError(f"{what} {problem}; got {quoted(text)}")
    return text


def parse_optional_text(value: object, what: str) -> str | None:
    """A string field that may be absent: None or blank gives None."""
    if value is None:
        return None
    if not isinstance(value, str):
        raise FieldError(f"{what} must be a string, not {type(value).__name__} {_short(value)}")
    return value.strip() or None


def parse_bool(value: object, what: str = "value") -> bool:
    """true/false/1/0/yes/no (case-insensitive; empty or None is False), or a JSON boolean.

    >>> parse_bool("Yes"), parse_bool(""), parse_bool(0)
    (True, False, False)
    """
    if value is None or isinstance(value, bool):
        return bool(value)
    if isinstance(value, int) and value in (0, 1):
        return bool(value)
    if isinstance(value, str):
        text = value.strip().lower()
        if text in _TRUE:
            return True
        if text in _FALSE:
            return False
    raise FieldError(f"{what} {_short(value)} is not one of true/false/1/0/yes/no")


def parse_list(value: object, what: str = "list") -> tuple[str, ...]:
    """A ``;``-separated string or a JSON list of strings -> tuple, blanks and repeats dropped.

    >>> parse_list(" ops; db ;;ops")
    ('ops', 'db')
    """
    if value is None:
        return ()
    if isinstance(value, str):
        items: Iterable[object] = value.split(";")
    elif isinstance(value, list):
        items = value
    else:
        raise FieldError(f"{what} must be a list or a ';'-separated string, not {type(value).__name__}")
    seen: dict[str, None] = {}
    for item in items:
        if not isinstance(item, str):
            raise FieldError(f"{what} entries must be strings, not {type(item).__name__} {_short(item)}")
        text = item.strip()
        if text:
            seen[text] = None
    return tuple(seen)


def parse_number(value: object, what: str) -> float:
    """A finite number from a string or a JSON number (booleans refused)."""
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise FieldError(f"{what} must be a number, not {type(value).__name__} {_short(value)}")
    try:
        number = float(value.strip() if isinstance(value, str) else value)
    except (ValueError, OverflowError):
        raise FieldError(f"{what} {_short(value)} is not a number") from None
    if not math.isfinite(number):
        raise FieldError(f"{what} {_short(value)} is not a finite number")
    return number


def parse_weight(value: object) -> float:
    """A link weight: a positive finite number; empty or None means 1.

    >>> parse_weight("2.5"), parse_weight("")
    (2.5, 1.0)
    """
    if value is None or (isinstance(value, str) and not value.strip()):
        return 1.0
    weight = parse_number(value, "weight")
    if weight <= 0:
        raise FieldError(f"weight {_short(value)} is not positive")
    return weight


def parse_dwell(value: object) -> float | None:
    """Dwell time in seconds, >= 0; empty or None means unknown (None)."""
    if value is None or (isinstance(value, str) and not value.strip()):
        return None
    dwell = parse_number(value, "dwell")
    if dwell < 0:
        raise FieldError(f"negative dwell {_short(value)}")
    return dwell


def parse_timestamp(value: object, now: float | None = None) -> float:
    """Unix seconds (UTC) from ISO 8601 text or Unix seconds (integer or decimal).

    ISO 8601 with ``Z`` or an offset is converted; a naive time is UTC; a date alone is
    midnight UTC. Text of digits only is Unix seconds. A JSON number is Unix seconds. A
    time later than ``now + CLOCK_SKEW`` (``now`` defaults to the current time) is refused.

    >>> parse_timestamp("2000-10-10T13:55:36-07:00"), parse_timestamp("1970-01-02")
    (971211336.0, 86400.0)
    """
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise FieldError(f"timestamp must be text or a number, not {type(value).__name__} {_short(value)}")
    if isinstance(value, str):
        text = value.strip()
        if not text:
            raise FieldError("empty timestamp")
        seconds = parse_number(text, "timestamp") if _UNIX.fullmatch(text) else _iso_seconds(text)
    else:
        seconds = parse_number(value, "timestamp")
    if seconds < 0:
        raise FieldError(f"timestamp {_short(value)} is before 1970 (negative Unix seconds)")
    limit = (time.time() if now is None else now) + CLOCK_SKEW
    if seconds > limit:
        shown = _short(value)
        raise FieldError(f"timestamp {shown} is in the future (after {_iso(limit)}, clock skew included)")
    return seconds


def _iso_seconds(text: str) -> float:
    reason = f"timestamp {_short(text)} is neither ISO 8601 nor Unix seconds"
    if not _ISO_SHAPE.fullmatch(text):
        raise FieldError(reason)
    try:
        moment = datetime.fromisoformat(text)
    except ValueError as error:
        raise FieldError(f"{reason} ({error})") from None
    if moment.tzinfo is None:
        moment = moment.replace(tzinfo=UTC)
    return moment.timestamp()


def _iso(seconds: float) -> str:
    try:
        return datetime.fromtimestamp(seconds, UTC).isoformat(timespec="seconds")
    except (OverflowError, OSError, ValueError):
        return f"{seconds:.0f} Unix seconds"


def _short(value: object) -> str:
    shown = repr(value)
    return shown if len(shown) <= 60 else shown[:57] + "..."


def is_json_lines(path: str | Path, first_text: str | None) -> bool:
    """True for ``.jsonl``/``.ndjson`` names (also with ``.gz``) or a first data line starting ``{``."""
    suffixes = [suffix.lower() for suffix in Path(path).suffixes]
    if suffixes and suffixes[-1] == ".gz":
        suffixes.pop()
    if suffixes and suffixes[-1] in (".jsonl", ".ndjson"):
        return True
    return first_text is not None and first_text.lstrip().startswith("{")


def first_data_line(path: str | Path, encoding: str = "utf-8") -> str | None:
    """The first non-blank line of a file, or None (errors are left for the real read)."""
    for item in iter_lines(path, encoding):
        if isinstance(item, InputError):
            return None
        if item[1].strip():
            return item[1]
    return None


def iter_json_objects(path: str | Path, encoding: str = "utf-8") -> Iterator[tuple[int, dict] | InputError]:
    """Yield ``(line_number, object)`` for each non-blank JSON Lines line, or InputErrors."""
    name = str(path)
    for item in iter_lines(path, encoding):
        if isinstance(item, InputError):
            yield item
            continue
        number, text = item
        if not text.strip():
            continue
        try:
            value = json.loads(text)
        except ValueError as error:  # json.JSONDecodeError, or RecursionError-free bad input
            yield InputError(name, number, f"not valid JSON: {getattr(error, 'msg', error)}")
            continue
        except RecursionError:
            yield InputError(name, number, "not valid JSON: nested too deeply")
            continue
        if not isinstance(value, dict):
            yield InputError(name, number, f"JSON line is {_json_kind(value)}, not an object")
            continue
        yield number, value


def _json_kind(value: object) -> str:
    if isinstance(value, list):
        return "an array"
    if isinstance(value, str):
        return "a string"
    if isinstance(value, bool):
        return "a boolean"
    if value is None:
        return "null"
    return "a number"


def iter_mappings(
    path: str | Path,
    encoding: str,
    required: Sequence[str],
    optional: Sequence[str] = (),
) -> Iterator[tuple[int, dict[str, object]] | InputError]:
    """Yield ``(line_number, {column: value})`` from a CSV file with a header, or JSON Lines.

    JSON Lines (see :func:`is_json_lines`) give each object as it is (unknown keys stay, the
    reader ignores them). CSV needs a header row naming the ``required`` columns; a missing
    header is one InputError, after which nothing more is read. CSV values are strings.
    """
    name = str(path)
    if is_json_lines(path, first_data_line(path, encoding)):
        yield from iter_json_objects(path, encoding)
        return
    columns: dict[str, int] | None = None
    width = 0
    for item in iter_rows(path, encoding):
        if isinstance(item, InputError):
            yield item
            continue
        number, fields = item
        if columns is None:
            try:
                columns = find_columns(fields, required, optional)
            except FieldError as error:
                yield InputError(name, number, str(error))
                return
            width = len(fields)
            continue
        if len(fields) != width:
            yield InputError(name, number, column_count_reason(len(fields), width))
            continue
        yield number, {column: fields[position] for column, position in columns.items()}

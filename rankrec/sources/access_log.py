"""Reader for web server access logs in Common or Combined Log Format: page views.

Built for logs of tens of millions of lines: one precompiled regular expression per line;
time stamps, URL paths, user agents and anonymous ids are converted once and cached.
"""

from __future__ import annotations

import hashlib
import re
import time
from collections import Counter
from collections.abc import Iterator
from dataclasses import dataclass
from datetime import date
from pathlib import Path
from urllib.parse import unquote, urlsplit

from ..errors import InputError
from ._fields import CLOCK_SKEW, FieldError, check_now
from ._text import check_encoding, iter_lines
from .records import Origin, ViewRecord

DEFAULT_PAGE_PATTERN = r"^/wiki/(?P<page>[^?#]+?)(?:\.html?)?/?$"
ASSET_EXTENSIONS = frozenset(
    ["css", "js", "png", "jpg", "jpeg", "gif", "svg", "ico", "woff", "woff2", "ttf", "map", "webp"]
)
CRAWLER_MARKERS = ("bot", "crawl", "spider", "slurp", "monitoring", "headless")
CRAWLER_MARKERS += ("python-requests", "curl", "wget")
ANONYMOUS_MODES = ("host-agent", "host", "drop")

_QUOTED = r'"([^"\\]*(?:\\.[^"\\]*)*)"'  # Apache writes a '"' inside a field as '\"'
_PLAIN_QUOTED = r'"([^"]*)"'  # the same for a line without backslashes, and three times faster


def _line_pattern(quoted: str) -> re.Pattern[str]:
    field = "([^ \t]+)"
    common = f"{field} {field} {field} \\[([^\\]]*)\\] {quoted} ([0-9]{{3}}) ([0-9]+|-)"
    return re.compile(f"{common}(?: {quoted} {quoted})?[ \t]*\\Z")


_LINE = _line_pattern(_QUOTED)
_PLAIN_LINE = _line_pattern(_PLAIN_QUOTED)
_TIME = re.compile(
    r"([0-9]{2})/([A-Z][a-z]{2})/([0-9]{4}):([0-9]{2}):([0-9]{2}):([0-9]{2}) ([+-])([0-9]{2})([0-9]{2})"
)
_MONTHS = {
    name: number
    for number, name in enumerate(
        ["Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec"], 1
    )
}
_EPOCH_DAY = date(1970, 1, 1).toordinal()
_CRAWLER = re.compile("|".join(map(re.escape, CRAWLER_MARKERS)), re.IGNORECASE)
_CACHE_LIMIT = 100_000
_ASSET = 1
_NOT_PAGE = 2


@dataclass(frozen=True, slots=True)
class LogLine:
    """One parsed access-log line (fields as logged; ``time`` in Unix seconds).

    ``bytes`` is 0 for a logged ``-``; ``referer`` and ``agent`` are None in Common Log Format.
    """

    host: str
    ident: str
    user: str
    time: float
    request: str
    method: str
    target: str
    protocol: str
    status: int
    bytes: int
    referer: str | None
    agent: str | None


def parse_log_line(text: str) -> LogLine:
    """Parse one Common or Combined Log Format line; raise FieldError saying what is wrong.

    >>> line = parse_log_line('10.1.2.3 - ines [03/May/2026:09:15:00 +0000] "GET /wiki/db HTTP/1.1" 200 5')
    >>> line.user, line.time, line.target, line.status, line.agent is None
    ('ines', 1777799700.0, '/wiki/db', 200, True)
    """
    match = (_LINE if "\\" in text else _PLAIN_LINE).match(text)
    if match is None:
        raise FieldError(_diagnose(text))
    host, ident, user, stamp, request, status, size, referer, agent = match.groups()
    method, _, rest = request.partition(" ")
    target, _, protocol = rest.partition(" ")
    return LogLine(
        host, ident, user, _seconds(stamp, {}), request, method, target, protocol,
        int(status), 0 if size == "-" else int(size), referer, agent,
    )  # fmt: skip


def read_access_log(
    path: str | Path,
    *,
    page_pattern: str | re.Pattern[str] = DEFAULT_PAGE_PATTERN,
    anonymous: str = "host-agent",
    encoding: str = "utf-8",
    now: float | None = None,
    tally: Counter | None = None,
) -> Iterator[ViewRecord | InputError]:
    """Yield a ViewRecord per page view in an access log, InputErrors for lines that do not parse.

    A view is a GET or HEAD answered 2xx or 304 whose URL path (query and fragment dropped;
    an absolute URL reduced to its path) is searched by ``page_pattern``; its ``page``
    group, percent-decoded, is the page id. A static asset is a path ending in one of
    ASSET_EXTENSIONS, unless the pattern matches it and leaves that extension out of the
    ``page`` group (so a pattern can claim, say, ``.png`` URLs as pages). Lines that parse
    but are not views are dropped and counted in ``tally`` (if given) under "method",
    "status", "asset", "crawler" (user agent), "not a page" or "anonymous dropped", checked
    in that order.
    The user is ``%u`` unless it is ``-``; then ``anonymous`` decides: ``"host-agent"`` gives
    ``anon-`` + the first 16 hex digits of sha256(host + NUL + user agent), ``"host"`` the
    same of the host alone, ``"drop"`` drops the line. A time after ``now`` (default: when
    reading starts) + 300 s is an InputError. ``.gz`` logs are read transparently.
    """
    if isinstance(page_pattern, str):
        try:
            page_pattern = re.compile(page_pattern)
        except re.error as error:
            raise ValueError(f"page_pattern {page_pattern!r} is not a regular expression: {error}") from None
    elif not isinstance(page_pattern, re.Pattern):
        raise TypeError(f"page_pattern must be a string or compiled pattern, got {page_pattern!r}")
    if "page" not in page_pattern.groupindex:
        raise ValueError(f"page_pattern {page_pattern.pattern!r} has no (?P<page>...) group")
    if anonymous not in ANONYMOUS_MODES:
        raise ValueError(
            f"anonymous must be one of {', '.join(map(repr, ANONYMOUS_MODES))}, got {anonymous!r}"
        )
    if tally is not None and not isinstance(tally, Counter):
        raise TypeError(f"tally must be a collections.Counter or None, got {tally!r}")
    check_encoding(encoding)
    return _read(
        path, page_pattern, anonymous, encoding, check_now(now), Counter() if tally is None else tally
    )


def _read(
    path: str | Path,
    page_pattern: re.Pattern[str],
    anonymous: str,
    encoding: str,
    now: float | None,
    tally: Counter,
) -> Iterator[ViewRecord | InputError]:
    name = str(path)
    limit = (time.time() if now is None else now) + CLOCK_SKEW
    match, plain_match = _LINE.match, _PLAIN_LINE.match
    days: dict[str, int] = {}
    paths: dict[str, str | int] = {}
    crawlers: dict[str, bool] = {}
    anonymous_ids: dict[str, str] = {}
    last_stamp = ""
    seconds = 0.0
    for item in iter_lines(path, encoding):
        if type(item) is not tuple:
            yield item  # type: ignore[misc]
            continue
        number, text = item
        found = match(text) if "\\" in text else plain_match(text)
        if found is None:
            if text.strip():
                yield InputError(name, number, _diagnose(text))
            continue
        host, _ident, user, stamp, request, status, _size, _referer, agent = found.groups()
        if stamp != last_stamp:
            try:
                seconds = _seconds(stamp, days)
            except FieldError as error:
                yield InputError(name, number, str(error))
                continue
            last_stamp = stamp
        if seconds > limit:
            yield InputError(name, number, f"time [{stamp}] is in the future (clock skew of 300 s included)")
            continue
        method, _, rest = request.partition(" ")
        if method != "GET" and method != "HEAD":
            tally["method"] += 1
            continue
        if status[0] != "2" and status != "304":
            tally["status"] += 1
            continue
        target = rest.partition(" ")[0]
        page = paths.get(target)
        if page is None:
            try:
                page = _classify(target, page_pattern)
            except FieldError as error:
                yield InputError(name, number, str(error))
                continue
            if len(paths) >= _CACHE_LIMIT:
                paths.clear()
            paths[target] = page
        if page is _ASSET:
            tally["asset"] += 1
            continue
        if agent is not None:
            crawler = crawlers.get(agent)
            if crawler is None:
                if len(crawlers) >= _CACHE_LIMIT:
                    crawlers.clear()
                crawler = crawlers[agent] = _CRAWLER.search(agent) is not None
            if crawler:
                tally["crawler"] += 1
                continue
        if page is _NOT_PAGE:
            tally["not a page"] += 1
            continue
        if user == "-":
            if anonymous == "drop":
                tally["anonymous dropped"] += 1
                continue
            key = host if anonymous == "host" else f"{host}\0{agent or ''}"
            user = anonymous_ids.get(key)  # type: ignore[assignment]
            if user is None:
                if len(anonymous_ids) >= _CACHE_LIMIT:
                    anonymous_ids.clear()
                user = anonymous_ids[key] = "anon-" + hashlib.sha256(key.encode()).hexdigest()[:16]
        yield ViewRecord(user, page, seconds, Origin(name, number))  # type: ignore[arg-type]


def _classify(target: str, page_pattern: re.Pattern[str]) -> str | int:
    """The page id of a request target, or _ASSET / _NOT_PAGE."""
    if not target.startswith("/"):
        try:
            target = urlsplit(target).path
        except ValueError:
            return _NOT_PAGE
    path = target.partition("?")[0].partition("#")[0]
    found = page_pattern.search(path)
    if found is None or not found.group("page"):
        return _ASSET if _is_asset(path) else _NOT_PAGE
    page = found.group("page")
    if _is_asset(page):  # a pattern that takes the extension out of the page group means it
        return _ASSET
    if "%" in page:
        try:
            page = unquote(page, errors="strict")
        except UnicodeDecodeError:
            raise FieldError(f"page {page!r} in the URL is not valid percent-encoded UTF-8") from None
    return page if page.strip() else _NOT_PAGE


def _is_asset(path: str) -> bool:
    dot = path.rfind(".")
    return dot > path.rfind("/") and path[dot + 1 :].lower() in ASSET_EXTENSIONS


def _seconds(stamp: str, days: dict[str, int]) -> float:
    """Unix seconds of ``dd/Mon/yyyy:HH:MM:SS +hhmm``; ``days`` caches the date part."""
    found = _TIME.fullmatch(stamp)
    if found is None:
        raise FieldError(f"time [{stamp}] is not dd/Mon/yyyy:HH:MM:SS +hhmm")
    day, month, year, hour, minute, second, sign, zone_hours, zone_minutes = found.groups()
    start = days.get(stamp[:11])
    if start is None:
        if month not in _MONTHS:
            raise FieldError(f"time [{stamp}] has an unknown month {month!r}")
        try:
            start = (date(int(year), _MONTHS[month], int(day)).toordinal() - _EPOCH_DAY) * 86400
        except ValueError:
            raise FieldError(f"time [{stamp}] has no such date") from None
        days[stamp[:11]] = start
    hours, minutes, secs = int(hour), int(minute), int(second)
    offset = int(zone_hours) * 3600 + int(zone_minutes) * 60
    if hours > 23 or minutes > 59 or secs > 59 or int(zone_hours) > 23 or int(zone_minutes) > 59:
        raise FieldError(f"time [{stamp}] has an hour, minute, second or offset out of range")
    local = start + hours * 3600 + minutes * 60 + secs
    return float(local - offset if sign == "+" else local + offset)


_HEAD = re.compile(r"(\S+) (\S+) (\S+) \[([^\]]*)\]")
_QUOTED_AT = re.compile(_QUOTED)


def _diagnose(text: str) -> str:
    """Say why a line is not in Common or Combined Log Format (only called for bad lines)."""
    shown = text if len(text) <= 60 else text[:57] + "..."
    head = _HEAD.match(text)
    if head is None:
        return f"not Common/Combined Log Format: no 'host ident user [time]' at the start of {shown!r}"
    rest = text[head.end() :]
    if not rest.startswith(' "'):
        return "the request after [time] is not in double quotes"
    request = _QUOTED_AT.match(rest, 1)
    if request is None:
        return "the request's closing quote is missing (truncated line?)"
    fields = rest[request.end() :].split(" ", 3)
    if len(fields) < 2 or not fields[1]:
        return "no status code after the request (truncated line?)"
    if not (len(fields[1]) == 3 and fields[1].isascii() and fields[1].isdigit()):
        return f"status {fields[1]!r} is not a 3-digit code"
    if len(fields) < 3 or not fields[2]:
        return "no byte count after the status (truncated line?)"
    if fields[2] != "-" and not (fields[2].isascii() and fields[2].isdigit()):
        return f"byte count {fields[2]!r} is not a number or '-'"
    tail = fields[3] if len(fields) > 3 else ""
    referer = _QUOTED_AT.match(tail)
    if referer is None and tail.startswith('"'):
        return "the referer's closing quote is missing (truncated line?)"
    if referer is None:
        return f'unexpected text after the byte count: {tail[:40]!r} (expected "referer" "user agent")'
    agent = _QUOTED_AT.match(tail, referer.end() + 1)
    if agent is None or tail[referer.end() : referer.end() + 1] != " ":
        return "the user agent after the referer is missing or unquoted (truncated line?)"
    return f"unexpected text after the user agent: {tail[agent.end() :][:40]!r}"

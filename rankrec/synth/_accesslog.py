"""An access log in Combined Log Format: the views, plus noise, in time order.

Format string (Apache HTTP Server, mod_log_config, "combined"):
``%h %l %u %t "%r" %>s %b "%{Referer}i" "%{User-agent}i"``. Clocks run at UTC+02:00, so
``%t`` reads ``[03/May/2026:11:15:00 +0200]`` for 09:15:00Z. Noise lines (static assets,
crawlers, 404s for moved pages, POSTs of edits) are about a tenth of all lines; none of
them is a view under the reading rules of the access-log reader.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from . import _words
from ._people import People
from ._tables import CHUNK
from ._views import LOCAL_OFFSET, WINDOW_END, Views
from ._wiki import Wiki

NOISE_SHARE = 0.11  # noise lines per view line
# Shares of the noise: static assets, crawler fetches, 404s, POSTs.
NOISE_KINDS = (0.5, 0.25, 0.15, 0.1)
ANONYMOUS_SHARE = 0.03  # view lines without %u
NOT_MODIFIED_SHARE = 0.08
CRAWLER_HOSTS = 16
_MONTHS = (b"Jan", b"Feb", b"Mar", b"Apr", b"May", b"Jun", b"Jul", b"Aug", b"Sep", b"Oct", b"Nov", b"Dec")
_VIEW, _ASSET, _CRAWLER, _MISSING, _POST = range(5)


def _s(values) -> np.ndarray:
    return np.array([v if isinstance(v, bytes) else str(v).encode() for v in values], dtype="S")


def _add(*parts):
    result = parts[0]
    for part in parts[1:]:
        result = np.strings.add(result, part)
    return result


class _Lines:
    """Every line as numbers (time, host, user, ...); formatted chunk by chunk."""

    def __init__(self, views: Views, wiki: Wiki, people: People, days: int, rng: np.random.Generator):
        noise = int(round(NOISE_SHARE * views.size))
        kind_counts = rng.multinomial(noise, NOISE_KINDS)
        kind = np.repeat(np.arange(5, dtype=np.int8), np.r_[views.size, kind_counts])
        n = len(kind)
        start = WINDOW_END - days * 86400
        time = np.empty(n, dtype=np.int64)
        time[: views.size] = views.time
        time[views.size :] = rng.integers(start, WINDOW_END, size=noise)
        reader = np.empty(n, dtype=np.int64)
        reader[: views.size] = views.reader
        reader[views.size :] = rng.integers(0, people.size, size=noise)
        page = np.empty(n, dtype=np.int64)
        page[: views.size] = views.page
        public = np.flatnonzero(wiki.group < 0)  # noise touches public pages only
        page[views.size :] = public[rng.integers(0, len(public), size=noise)]
        crawler = kind == _CRAWLER
        self.host = np.where(crawler, people.size + rng.integers(0, CRAWLER_HOSTS, size=n), reader)
        user = reader.copy()
        user[crawler | ((kind == _VIEW) & (rng.random(n) < ANONYMOUS_SHARE))] = -1
        self.user = user
        self.agent = np.where(
            crawler,
            len(_words.BROWSER_AGENTS) + rng.integers(0, len(_words.CRAWLER_AGENTS), size=n),
            people.agent[reader],
        )
        self.asset = np.where(kind == _ASSET, rng.integers(0, len(_words.ASSET_PATHS), size=n), -1)
        self.page = page
        self.kind = kind
        status = np.full(n, 200, dtype=np.int16)
        status[(kind <= _ASSET) & (rng.random(n) < NOT_MODIFIED_SHARE)] = 304
        status[kind == _MISSING] = 404
        status[kind == _POST] = 302
        self.status = status
        size = rng.lognormal(np.log(9000.0), 0.8, size=n).astype(np.int64) + 200
        size[(status == 304) | (status == 302)] = 0
        size[kind == _MISSING] = 512
        self.size = size
        referer = np.full(n, -1, dtype=np.int64)
        referer[: views.size] = views.previous
        referer[(kind == _ASSET) | (kind == _POST)] = page[(kind == _ASSET) | (kind == _POST)]
        self.referer = referer
        self.time = time
        self.order = np.argsort(time, kind="stable")

    def __len__(self) -> int:
        return len(self.order)


class _Tables:
    def __init__(self, wiki: Wiki, people: People, days: int):
        readers = np.arange(people.size)
        reader_hosts = _add(
            b"10.",
            ((readers >> 16) & 255).astype("S"),
            b".",
            ((readers >> 8) & 255).astype("S"),
            b".",
            (readers & 255).astype("S"),
        )
        crawler_hosts = _add(b"192.0.2.", (np.arange(CRAWLER_HOSTS) + 10).astype("S"))  # RFC 5737 test net
        self.host = np.concatenate([reader_hosts, crawler_hosts])
        self.user = np.concatenate([people.user_ids, np.array([b"-"], dtype="S")])
        agents = _words.BROWSER_AGENTS + _words.CRAWLER_AGENTS
        self.agent = _s(f'" "{a}"\n' for a in agents)
        self.path = np.strings.add(b"/wiki/", wiki.quoted_ids)
        self.asset = _s(_words.ASSET_PATHS)
        first_day = (WINDOW_END - days * 86400 + LOCAL_OFFSET) // 86400
        self.first_day = first_day
        day = np.arange(first_day, first_day + days + 1).astype("datetime64[D]")
        month_start = day.astype("datetime64[M]")
        year = month_start.astype("datetime64[Y]").astype(np.int64) + 1970
        month = month_start.astype(np.int64) % 12
        dom = (day - month_start.astype("datetime64[D]")).astype(np.int64) + 1
        self.day = _add(
            b" [",
            np.char.zfill(dom.astype("S"), 2),
            b"/",
            np.array(_MONTHS)[month],
            b"/",
            year.astype("S"),
            b":",
        )
        two = np.char.zfill(np.arange(60).astype("S"), 2)
        sign = "+" if LOCAL_OFFSET >= 0 else "-"
        zone = f' {sign}{abs(LOCAL_OFFSET) // 3600:02d}{abs(LOCAL_OFFSET) % 3600 // 60:02d}] "'.encode()
        second = np.arange(86400)
        self.clock = _add(two[second // 3600], b":", two[second // 60 % 60], b":", two[second % 60], zone)
        self.referer_prefix = f"https://{_words.WIKI_HOST}".encode()


def _format(lines: _Lines, tables: _Tables, rows: np.ndarray) -> np.ndarray:
    kind = lines.kind[rows]
    local = lines.time[rows] + LOCAL_OFFSET
    page = lines.page[rows]
    path = tables.path[page]
    path = np.where(kind == _MISSING, np.strings.add(path, b"-old"), path)
    path = np.where(kind == _ASSET, tables.asset[np.maximum(lines.asset[rows], 0)], path)
    method = np.where(kind == _POST, b"POST ", b"GET ")
    size = lines.size[rows]
    size_text = np.where(size > 0, np.maximum(size, 0).astype("S"), b"-")
    referer = lines.referer[rows]
    referer_text = np.where(
        referer >= 0, np.strings.add(tables.referer_prefix, tables.path[np.maximum(referer, 0)]), b"-"
    )
    user = lines.user[rows]
    return _add(
        tables.host[lines.host[rows]],
        b" - ",
        tables.user[np.where(user >= 0, user, len(tables.user) - 1)],
        tables.day[local // 86400 - tables.first_day],
        tables.clock[local % 86400],
        method,
        path,
        b' HTTP/1.1" ',
        lines.status[rows].astype("S"),
        b" ",
        size_text,
        b' "',
        referer_text,
        tables.agent[lines.agent[rows]],
    )


def write_access_log(
    path: Path,
    views: Views,
    wiki: Wiki,
    people: People,
    *,
    days: int,
    rng: np.random.Generator,
    progress=None,
) -> int:
    """Write the log; return its number of lines."""
    lines = _Lines(views, wiki, people, days, rng)
    tables = _Tables(wiki, people, days)
    total = len(lines)
    with open(path, "wb") as out:
        for start in range(0, total, CHUNK):
            rows = lines.order[start : start + CHUNK]
            out.write(b"".join(_format(lines, tables, rows).tolist()))
            if progress is not None:
                progress("access log", min(total, start + CHUNK), total)
    return total

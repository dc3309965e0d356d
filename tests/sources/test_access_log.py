"""Access-log reader: Common and Combined Log Format, filters, users, gzip, malformed lines."""

from __future__ import annotations

import gzip
import hashlib
import re
import tempfile
from collections import Counter
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rankrec.errors import InputError
from rankrec.sources._fields import FieldError
from rankrec.sources.access_log import parse_log_line, read_access_log
from rankrec.sources.records import ViewRecord

# The example lines of the Apache HTTP Server log-file documentation (docs/current/logs.html,
# "Common Log Format" and "Combined Log Format").
APACHE_COMMON = '127.0.0.1 - frank [10/Oct/2000:13:55:36 -0700] "GET /apache_pb.gif HTTP/1.0" 200 2326'
APACHE_COMBINED = APACHE_COMMON + ' "http://www.example.com/start.html" "Mozilla/4.08 [en] (Win98; I ;Nav)"'
APACHE_TIME = 971211336  # 2000-10-10 20:55:36 UTC, the example's time in Unix seconds
NOW = 1_800_000_000.0  # a fixed "now" (2027-01-15)
BROWSER = "Mozilla/5.0 (X11; Linux x86_64; rv:128.0) Gecko/20100101 Firefox/128.0"


def _line(path="/wiki/ops/db", *, user="ines", method="GET", status="200", size="512", agent=BROWSER):
    return (
        f'10.0.0.7 - {user} [03/May/2026:09:15:00 +0000] "{method} {path} HTTP/1.1" {status} {size} '
        f'"http://wiki.invalid/wiki/home" "{agent}"'
    )


def _read(tmp_path, lines, **options):
    path = tmp_path / "access.log"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    tally = Counter()
    records = list(read_access_log(path, now=NOW, tally=tally, **options))
    return records, tally


def _views(records):
    return [(r.user, r.page, r.timestamp, r.origin.line) for r in records if isinstance(r, ViewRecord)]


def _errors(records):
    return [(r.line, r.reason) for r in records if isinstance(r, InputError)]


def test_apache_common_example_fields():
    line = parse_log_line(APACHE_COMMON)
    assert (line.host, line.ident, line.user, line.time) == ("127.0.0.1", "-", "frank", APACHE_TIME)
    assert (line.method, line.target, line.protocol) == ("GET", "/apache_pb.gif", "HTTP/1.0")
    assert (line.status, line.bytes, line.referer, line.agent) == (200, 2326, None, None)


def test_apache_combined_example_fields():
    line = parse_log_line(APACHE_COMBINED)
    assert (line.host, line.user, line.time, line.method, line.target) == (
        "127.0.0.1",
        "frank",
        APACHE_TIME,
        "GET",
        "/apache_pb.gif",
    )
    assert (line.status, line.bytes) == (200, 2326)
    assert line.referer == "http://www.example.com/start.html"
    assert line.agent == "Mozilla/4.08 [en] (Win98; I ;Nav)"


def test_apache_examples_as_views(tmp_path):
    # A pattern that claims the .gif (its extension outside the page group) gives views ...
    records, tally = _read(tmp_path, [APACHE_COMMON, APACHE_COMBINED], page_pattern=r"^/(?P<page>\w+)\.gif$")
    assert _views(records) == [("frank", "apache_pb", APACHE_TIME, 1), ("frank", "apache_pb", APACHE_TIME, 2)]
    assert sum(tally.values()) == 0
    # ... while the default pattern drops the .gif as a static asset (formats.md section 6).
    records, tally = _read(tmp_path, [APACHE_COMMON, APACHE_COMBINED])
    assert records == [] and tally == Counter({"asset": 2})


def test_time_zones_and_dash_bytes():
    # The same instant written in three offsets; "-" means no bytes sent (Apache %b).
    for stamp in ("10/Oct/2000:13:55:36 -0700", "10/Oct/2000:20:55:36 +0000", "11/Oct/2000:02:25:36 +0530"):
        line = parse_log_line(f'h - - [{stamp}] "GET / HTTP/1.0" 304 -')
        assert line.time == APACHE_TIME and line.bytes == 0 and line.status == 304


def test_escaped_quotes_in_fields():
    # Apache mod_log_config documentation: '"' and '\' in logged strings are escaped with '\'.
    line = parse_log_line(
        r'h - - [10/Oct/2000:13:55:36 -0700] "GET /a\"b HTTP/1.0" 200 1 "-" "Agent \"quoted\" x"'
    )
    assert line.target == r"/a\"b" and line.agent == r"Agent \"quoted\" x"


@pytest.mark.parametrize(
    ("text", "reason"),
    [
        (APACHE_COMBINED[:60], "closing quote is missing"),  # truncated inside the request
        (APACHE_COMMON.rsplit(" ", 1)[0], "no byte count"),  # truncated before the bytes
        (APACHE_COMMON.replace("10/Oct", "32/Oct"), "no such date"),
        (APACHE_COMMON.replace("10/Oct", "10/Okt"), "unknown month"),
        (APACHE_COMMON.replace(":13:55", ":24:55"), "out of range"),
        (APACHE_COMMON.replace("2000:13:55:36 -0700", "2000 13:55:36"), "dd/Mon/yyyy"),
        (APACHE_COMMON.replace(" 200 ", " 2O0 "), "status '2O0'"),
        (APACHE_COMMON.replace(" 200 ", " 2000 "), "status '2000'"),
        (
            APACHE_COMMON.replace('"GET /apache_pb.gif HTTP/1.0"', "GET /apache_pb.gif HTTP/1.0"),
            "double quotes",
        ),
        (APACHE_COMMON.replace(" 2326", " 23x6"), "byte count '23x6'"),
        (APACHE_COMBINED[:-8], "user agent"),  # truncated inside the user agent
        (APACHE_COMBINED + " extra", "unexpected text"),
        ("127.0.0.1 frank 10/Oct/2000", "host ident user [time]"),
    ],
)
def test_malformed_lines(tmp_path, text, reason):
    with pytest.raises(FieldError, match=re.escape(reason)):
        parse_log_line(text)
    records, _ = _read(tmp_path, [text, _line()])
    assert _errors(records)[0][0] == 1 and reason.split("'")[0] in _errors(records)[0][1]
    assert len(_views(records)) == 1  # the next line is still read


def test_filters_are_tallied(tmp_path):
    lines = [
        _line(),  # a view
        _line(method="POST"),
        _line(method="-"),
        _line(status="404"),
        _line(status="301"),
        _line("/static/app.css"),
        _line("/wiki/img/logo.PNG"),
        _line(agent="Mozilla/5.0 (compatible; Googlebot/2.1)"),
        _line(agent="curl/8.5.0"),
        _line("/search?q=db"),
        _line("/wiki/ops/db", status="304", method="HEAD"),
        _line("/wiki/ops/db.html?rev=2"),
        _line("http://wiki.invalid/wiki/hr/leave/"),
        _line("/wiki/Caf%C3%A9%20menu"),
    ]
    records, tally = _read(tmp_path, lines)
    assert [page for _, page, _, _ in _views(records)] == [
        "ops/db",
        "ops/db",
        "ops/db",
        "hr/leave",
        "Café menu",
    ]
    assert tally == Counter({"method": 2, "status": 2, "asset": 2, "crawler": 2, "not a page": 1})
    assert _errors(records) == []


def test_anonymous_users(tmp_path):
    lines = [_line(user="-"), _line(user="-", agent="Other/1.0"), _line(user="-")]
    # Expected ids per formats.md section 6, computed here with hashlib.
    by_agent = [
        "anon-" + hashlib.sha256(f"10.0.0.7\0{a}".encode()).hexdigest()[:16] for a in (BROWSER, "Other/1.0")
    ]
    records, _ = _read(tmp_path, lines)
    assert [user for user, _, _, _ in _views(records)] == [by_agent[0], by_agent[1], by_agent[0]]
    records, _ = _read(tmp_path, lines, anonymous="host")
    by_host = "anon-" + hashlib.sha256(b"10.0.0.7").hexdigest()[:16]
    assert {user for user, _, _, _ in _views(records)} == {by_host}
    records, tally = _read(tmp_path, lines + [_line()], anonymous="drop")
    assert [user for user, _, _, _ in _views(records)] == ["ines"] and tally["anonymous dropped"] == 3


def test_future_time(tmp_path):
    future = _line().replace("03/May/2026", "03/May/2030")
    records, _ = _read(tmp_path, [future, _line()])
    assert _errors(records)[0][0] == 1 and "in the future" in _errors(records)[0][1]


def test_gzip_and_truncated_gzip(tmp_path):
    lines = [_line(f"/wiki/page-{i}") for i in range(2000)]
    whole = gzip.compress(("\n".join(lines) + "\n").encode())
    path = tmp_path / "access.log.gz"
    path.write_bytes(whole)
    records = list(read_access_log(path, now=NOW))
    assert [r.page for r in records] == [f"page-{i}" for i in range(2000)]
    path.write_bytes(whole[: len(whole) // 2])  # cut the stream in the middle
    records = list(read_access_log(path, now=NOW))
    *views, error = records
    assert 0 < len(views) < 2000 and all(isinstance(r, ViewRecord) for r in views)
    assert isinstance(error, InputError) and "truncated" in error.reason
    assert [r.page for r in views] == [f"page-{i}" for i in range(len(views))]


def test_blank_and_undecodable_lines(tmp_path):
    path = tmp_path / "access.log"
    path.write_bytes(_line().encode() + b"\n\n\xff\xfe\n" + _line().encode() + b"\n")
    records = list(read_access_log(path, now=NOW))
    assert [type(r).__name__ for r in records] == ["ViewRecord", "InputError", "ViewRecord"]
    assert records[1].line == 3


def test_bad_arguments():
    with pytest.raises(ValueError, match="page_pattern"):
        read_access_log("access.log", page_pattern=r"^/wiki/(.+)$")
    with pytest.raises(ValueError, match="page_pattern"):
        read_access_log("access.log", page_pattern=r"^/wiki/(?P<page>")
    with pytest.raises(ValueError, match="anonymous"):
        read_access_log("access.log", anonymous="hash")
    with pytest.raises(TypeError, match="tally"):
        read_access_log("access.log", tally={})


@settings(max_examples=80, deadline=None)
@given(data=st.binary(max_size=300))
def test_arbitrary_bytes_never_raise(data):
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "access.log"
        path.write_bytes(data)
        records = list(read_access_log(path, now=NOW, tally=Counter()))
    assert all(isinstance(r, ViewRecord | InputError) for r in records)


@settings(max_examples=80, deadline=None)
@given(
    cut=st.integers(min_value=0, max_value=len(APACHE_COMBINED)),
    junk=st.text(alphabet=' "[]-/:\\0123456789GET', max_size=8),
)
def test_damaged_lines_never_raise(cut, junk):
    text = APACHE_COMBINED[:cut] + junk + APACHE_COMBINED[cut:]
    try:
        parse_log_line(text)
    except FieldError as error:
        assert str(error)
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "access.log"
        path.write_text(text + "\n")
        records = list(read_access_log(path, now=NOW, page_pattern=r"^/(?P<page>\w+)"))
    assert all(isinstance(r, ViewRecord | InputError) for r in records)

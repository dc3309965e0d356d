"""Shared field parsing: CSV rows (RFC 4180), timestamps (ISO 8601 / RFC 3339), values."""

from __future__ import annotations

import calendar
import gzip
from datetime import UTC, datetime, timedelta, timezone

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rankrec.errors import InputError
from rankrec.sources._fields import (
    CLOCK_SKEW,
    FieldError,
    find_columns,
    iter_rows,
    parse_bool,
    parse_dwell,
    parse_list,
    parse_timestamp,
    parse_weight,
)
from rankrec.sources._text import check_encoding

NOW = 1_800_000_000.0  # 2027-01-15: a fixed "now" so that no test depends on the clock


def _rows(tmp_path, data: bytes | str, name: str = "rows.csv", **options):
    path = tmp_path / name
    path.write_bytes(data.encode() if isinstance(data, str) else data)
    return list(iter_rows(path, **options))


# --- CSV rows -------------------------------------------------------------------------------------


def test_rfc4180_quoted_fields(tmp_path):
    # RFC 4180 section 2, rules 5-7: fields may be enclosed in double quotes; fields holding
    # commas, double quotes or line breaks must be; a double quote inside is doubled.
    data = (
        '"aaa","bbb","ccc"\r\n'  # rule 5 example
        '"aaa","b\r\nbb","ccc"\r\n'  # rule 6 example: a line break inside a quoted field
        '"aaa","b""bb","ccc"\r\n'  # rule 7 example
        'zzz,"x, y",z\r\n'  # a quoted comma
    )
    rows = _rows(tmp_path, data)
    assert rows == [
        (1, ["aaa", "bbb", "ccc"]),
        (2, ["aaa", "b\nbb", "ccc"]),
        (4, ["aaa", 'b"bb', "ccc"]),
        (5, ["zzz", "x, y", "z"]),
    ]


def test_rfc4180_quote_inside_unquoted_field_is_literal(tmp_path):
    # RFC 4180 rule 5 says unquoted fields may not hold quotes; Python's csv module (the
    # reference here) takes such a quote literally, and so do we.
    assert _rows(tmp_path, 'a 5" screen,b\n') == [(1, ['a 5" screen', "b"])]


def test_unclosed_quote_is_an_error_and_following_lines_still_read(tmp_path):
    data = 'ok,1\n"never closed,2\n' + "".join(f"row{i},{i}\n" for i in range(150))
    rows = _rows(tmp_path, data)
    errors = [row for row in rows if isinstance(row, InputError)]
    assert len(errors) == 1 and errors[0].line == 2 and "never closed" in errors[0].reason
    good = [row for row in rows if not isinstance(row, InputError)]
    assert good[0] == (1, ["ok", "1"])
    assert [number for number, _ in good[1:]] == list(range(3, 153))  # none of the 150 rows lost


def test_quote_after_closing_quote_is_an_error(tmp_path):
    rows = _rows(tmp_path, 'a,"b"c\nd,e\n')
    assert isinstance(rows[0], InputError) and rows[0].line == 1 and "CSV row" in rows[0].reason
    assert rows[1] == (2, ["d", "e"])


def test_tab_separated_when_first_data_line_holds_a_tab(tmp_path):
    # formats.md section 3: tab-separated if the first data line holds a tab, without quoting.
    rows = _rows(tmp_path, '# note, with comma\n\na\t"b,c"\n', comments=True)
    assert rows == [(3, ["a", '"b,c"'])]


def test_comments_kept_unless_asked(tmp_path):
    assert _rows(tmp_path, "#a,b\n") == [(1, ["#a", "b"])]


def test_gzip_rows_and_errors_passed_through(tmp_path):
    path = tmp_path / "rows.csv.gz"
    path.write_bytes(gzip.compress(b"a,b\n\xff,c\nd,e\n"))
    rows = list(iter_rows(path))
    assert rows[0] == (1, ["a", "b"]) and rows[2] == (3, ["d", "e"])
    assert isinstance(rows[1], InputError) and rows[1].line == 2 and "utf-8" in rows[1].reason


def test_find_columns():
    assert find_columns([" User", "PAGE", "timestamp"], ["user", "page", "timestamp"]) == {
        "user": 0,
        "page": 1,
        "timestamp": 2,
    }
    with pytest.raises(FieldError, match="lacks column"):
        find_columns(["user", "page"], ["user", "page", "timestamp"])
    with pytest.raises(FieldError, match="twice"):
        find_columns(["user", "user", "page", "timestamp"], ["user", "page", "timestamp"])


def test_check_encoding():
    assert check_encoding("latin-1") == "latin-1"
    with pytest.raises(ValueError, match="'no-such-codec'"):
        check_encoding("no-such-codec")


# --- timestamps -----------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        # RFC 3339 section 5.8 examples (an ISO 8601 profile); expectations via calendar.timegm.
        ("1985-04-12T23:20:50.52Z", calendar.timegm((1985, 4, 12, 23, 20, 50)) + 0.52),
        ("1996-12-19T16:39:57-08:00", calendar.timegm((1996, 12, 20, 0, 39, 57))),
        # The Apache log-format documentation's example time, 10/Oct/2000:13:55:36 -0700.
        ("2000-10-10T13:55:36-07:00", 971211336),
        ("2026-05-03T09:15:00Z", calendar.timegm((2026, 5, 3, 9, 15, 0))),
        ("2026-05-03T09:15:00", calendar.timegm((2026, 5, 3, 9, 15, 0))),  # naive = UTC (formats.md)
        ("2026-05-03T11:15:00+02:00", calendar.timegm((2026, 5, 3, 9, 15, 0))),
        ("2026-05-03 09:15:00Z", calendar.timegm((2026, 5, 3, 9, 15, 0))),  # RFC 3339 allows a space
        ("2026-05-03", calendar.timegm((2026, 5, 3, 0, 0, 0))),  # date alone = midnight UTC
        ("20260503T091500Z", calendar.timegm((2026, 5, 3, 9, 15, 0))),  # ISO 8601 basic format
        ("2026-W18-7", calendar.timegm((2026, 5, 3, 0, 0, 0))),  # ISO week date: Sunday of week 18
        ("1777799700", 1777799700),  # Unix seconds
        ("1777799700.25", 1777799700.25),
    ],
)
def test_timestamp_forms(text, expected):
    assert parse_timestamp(text, NOW) == pytest.approx(expected, abs=1e-6)


def test_timestamp_json_numbers():
    assert parse_timestamp(1777799700, NOW) == 1777799700.0
    assert parse_timestamp(1.5, NOW) == 1.5
    with pytest.raises(FieldError):
        parse_timestamp(True, NOW)


@pytest.mark.parametrize(
    "text",
    ["soon", "2026-13-01", "2026-05-03T25:00", "2026-05-03x09:15", "1990-12-31T23:59:60Z", "-5", "", "nan"],
)
def test_bad_timestamps(text):
    # The leap second of RFC 3339's example 1990-12-31T23:59:60Z has no Unix time: refused.
    with pytest.raises(FieldError, match="timestamp"):
        parse_timestamp(text, NOW)


def test_future_timestamp_with_clock_skew():
    # 300 s of allowed clock skew is common practice.
    assert CLOCK_SKEW == 300
    assert parse_timestamp(NOW + 300, NOW) == NOW + 300
    with pytest.raises(FieldError, match="in the future"):
        parse_timestamp(NOW + 301, NOW)
    moment = datetime.fromtimestamp(NOW + 3600, UTC).isoformat()
    with pytest.raises(FieldError, match="in the future"):
        parse_timestamp(moment, NOW)


def test_future_uses_the_clock_by_default():
    with pytest.raises(FieldError, match="in the future"):
        parse_timestamp("2999-01-01")


@settings(max_examples=100, deadline=None)
@given(
    moment=st.datetimes(min_value=datetime(1970, 1, 2), max_value=datetime(2026, 1, 1)),
    offset_minutes=st.integers(min_value=-14 * 60, max_value=14 * 60),
)
def test_timestamp_matches_calendar_timegm(moment, offset_minutes):
    # Reference: the standard library's calendar.timegm on the UTC time tuple.
    zone = timezone(timedelta(minutes=offset_minutes))
    aware = moment.replace(tzinfo=zone)
    expected = calendar.timegm(aware.utctimetuple()) + aware.microsecond / 1e6
    assert parse_timestamp(aware.isoformat(), NOW) == pytest.approx(expected, abs=1e-6)


# --- other values ---------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("text", "expected"),
    [("true", True), ("TRUE", True), ("1", True), ("yes", True), ("false", False), ("0", False)]
    + [("No", False), ("", False), (None, False), (True, True), (0, False)],
)
def test_booleans(text, expected):
    assert parse_bool(text) is expected


@pytest.mark.parametrize("text", ["maybe", "2", 2, 1.0, []])
def test_bad_booleans(text):
    with pytest.raises(FieldError):
        parse_bool(text)


def test_lists():
    assert parse_list("ops;db") == ("ops", "db")
    assert parse_list(" a ; ;b;a ") == ("a", "b")
    assert parse_list(["x", " y", ""]) == ("x", "y")
    assert parse_list("") == () and parse_list(None) == ()
    with pytest.raises(FieldError):
        parse_list([1])
    with pytest.raises(FieldError):
        parse_list({"a": 1})


def test_weights():
    assert parse_weight("2.5") == 2.5 and parse_weight(" 3 ") == 3.0 and parse_weight("") == 1.0
    assert parse_weight("1e-3") == 0.001
    for bad, reason in [("0", "positive"), ("-1", "positive"), ("nan", "finite"), ("inf", "finite")] + [
        ("heavy", "not a number"),
        ("1e999", "finite"),
    ]:
        with pytest.raises(FieldError, match=reason):
            parse_weight(bad)


def test_dwell():
    assert parse_dwell("") is None and parse_dwell(None) is None
    assert parse_dwell("0") == 0.0 and parse_dwell(12.5) == 12.5
    with pytest.raises(FieldError, match="negative dwell"):
        parse_dwell("-1")

"""View-event reader: CSV and JSON Lines, timestamps, dwell."""

from __future__ import annotations

import calendar
import json
import tempfile
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rankrec.errors import InputError
from rankrec.sources import Origin, check_view
from rankrec.sources.records import ViewRecord
from rankrec.sources.views import read_view_events

NOW = 1_800_000_000.0  # a fixed "now" (2027-01-15) so that no test depends on the clock


def _read(tmp_path, text: str, name: str = "views.csv", now: float | None = NOW):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return list(read_view_events(path, now=now))


def _views(records):
    return [
        (r.user, r.page, r.timestamp, r.dwell, r.origin.line) for r in records if isinstance(r, ViewRecord)
    ]


def _errors(records):
    return [(r.line, r.reason) for r in records if isinstance(r, InputError)]


def test_csv_views_any_column_order(tmp_path):
    text = (
        "timestamp,dwell,page,user,device\n"
        "2026-05-03T09:15:00Z,12.5,ops/db,ines,laptop\n"
        "2026-05-03T11:15:00+02:00,,ops/db,ines,\n"
        "1777799700,0,hr/leave,tor,\n"
    )
    expected = calendar.timegm((2026, 5, 3, 9, 15, 0))  # reference: stdlib calendar.timegm
    assert _views(_read(tmp_path, text)) == [
        ("ines", "ops/db", expected, 12.5, 2),
        ("ines", "ops/db", expected, None, 3),
        ("tor", "hr/leave", 1777799700.0, 0.0, 4),
    ]


def test_dwell_column_optional(tmp_path):
    assert _views(_read(tmp_path, "user,page,timestamp\nines,ops/db,2026-05-03\n")) == [
        ("ines", "ops/db", calendar.timegm((2026, 5, 3, 0, 0, 0)), None, 2)
    ]


def test_missing_header(tmp_path):
    (error,) = _read(tmp_path, "ines,ops/db,2026-05-03\n")
    assert error.line == 1 and "lacks column(s)" in error.reason


def test_bad_rows(tmp_path):
    text = (
        "user,page,timestamp,dwell\n"
        "ines,ops/db,soon,\n"
        "ines,ops/db,2030-01-01T00:00:00Z,\n"
        "ines,ops/db,2026-05-03,-3\n"
        ",ops/db,2026-05-03,\n"
        "ines,,2026-05-03,\n"
        "ines,ops/db,2026-05-03,long\n"
        "ines,ops/db\n"
        "ines,ops/db,2026-05-03,4\n"
    )
    records = _read(tmp_path, text)
    errors = _errors(records)
    assert [line for line, _ in errors] == [2, 3, 4, 5, 6, 7, 8]
    reasons = [reason for _, reason in errors]
    assert "neither ISO 8601 nor Unix seconds" in reasons[0]
    assert "in the future" in reasons[1]
    assert "negative dwell" in reasons[2]
    assert "empty user id" in reasons[3] and "empty page id" in reasons[4]
    assert "dwell" in reasons[5] and "not a number" in reasons[5]
    assert "wrong column count" in reasons[6]
    assert len(_views(records)) == 1


def test_json_lines(tmp_path):
    lines = [
        {"user": "ines", "page": "ops/db", "timestamp": 1777799700, "dwell": 3, "client": "web"},
        {"user": "tor", "page": "hr/leave", "timestamp": "2026-05-03T09:15:00Z", "dwell": None},
        {"user": "tor", "page": "hr/leave"},
        {"user": "tor", "page": "hr/leave", "timestamp": True},
        "not an object",
    ]
    records = _read(tmp_path, "\n".join(json.dumps(line) for line in lines) + "\n", name="views.jsonl")
    assert _views(records) == [
        ("ines", "ops/db", 1777799700.0, 3.0, 1),
        ("tor", "hr/leave", 1777799700.0, None, 2),
    ]
    errors = _errors(records)
    assert [line for line, _ in errors] == [3, 4, 5]
    assert "missing timestamp" in errors[0][1] and "timestamp" in errors[1][1]
    assert "not an object" in errors[2][1]


def test_check_view_is_the_readers_check_with_file_line_and_reason():
    # one record checked alone: the same record, or the same reason, as the reader gives for that row
    where = Origin("POST /v1/views", 3)
    view = check_view(42, " ops/db ", "2026-05-03T11:15:00+02:00", 7, origin=where, now=NOW)
    assert view == ViewRecord("42", "ops/db", calendar.timegm((2026, 5, 3, 9, 15, 0)), where, 7.0)
    with pytest.raises(InputError) as raised:
        check_view("ines", "ops/db", "soon", origin=where, now=NOW)
    assert (raised.value.file, raised.value.line) == ("POST /v1/views", 3)
    assert str(raised.value).startswith("POST /v1/views:3: timestamp 'soon' is neither ISO 8601")
    for user, page, timestamp, dwell, reason in [
        ("", "ops/db", 0, None, "empty user id"),
        ("ines", 1.5, 0, None, "page id must be a string"),
        ("ines", "ops/db", None, None, "missing timestamp"),
        ("ines", "ops/db", NOW + 301, None, "in the future"),
        ("ines", "ops/db", 0, -1, "negative dwell"),
    ]:
        with pytest.raises(InputError, match=reason):
            check_view(user, page, timestamp, dwell, origin=where, now=NOW)


def test_default_now_is_the_clock(tmp_path):
    records = _read(
        tmp_path, "user,page,timestamp\nines,ops/db,2999-01-01\nines,ops/db,2020-01-01\n", now=None
    )
    assert [line for line, _ in _errors(records)] == [2] and len(_views(records)) == 1


def test_bad_arguments():
    with pytest.raises(ValueError, match="now"):
        read_view_events("views.csv", now=float("nan"))
    with pytest.raises(ValueError, match="encoding"):
        read_view_events("views.csv", encoding="no-such-codec")


@settings(max_examples=80, deadline=None)
@given(data=st.binary(max_size=300), name=st.sampled_from(["views.csv", "views.ndjson"]))
def test_arbitrary_bytes_never_raise(data, name):
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / name
        path.write_bytes(data)
        records = list(read_view_events(path, now=NOW))
    assert all(isinstance(r, ViewRecord | InputError) for r in records)


@settings(max_examples=60, deadline=None)
@given(
    rows=st.lists(
        st.tuples(st.text(max_size=5), st.text(max_size=5), st.text(max_size=12), st.text(max_size=4)),
        max_size=10,
    )
)
def test_arbitrary_fields_never_raise(rows):
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "views.csv"
        lines = ["user,page,timestamp,dwell"] + [",".join(row) for row in rows]
        path.write_text("\n".join(lines) + "\n", encoding="utf-8", errors="surrogatepass")
        records = list(read_view_events(path, now=NOW))
    assert all(isinstance(r, ViewRecord | InputError) for r in records)

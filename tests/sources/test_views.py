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


_STAMPS = [
    "2026-05-03T09:15:00Z",
    "2026-05-03T09:15:00",
    "2024-02-29T23:59:59Z",  # a leap day
    "2026-02-29T00:00:00Z",  # no such day
    "2026-05-03T24:00:00Z",  # no such hour
    "2026-05-03T09:60:00",  # no such minute
    "0000-01-01T00:00:00Z",  # year 0: before 1970 for numpy, no year at all for the stdlib
    "1969-12-31T23:59:59Z",  # before 1970
    "2027-01-15T08:05:00Z",  # 300 s after NOW: the clock skew, still accepted
    "2027-01-15T08:05:01Z",  # one second past it
    "2026-05-03T09:15:00+02:00",
    " 2026-05-03T09:15:00Z",
    "2026-05-03 09:15:00",
    "2026-05-03T09:15:00z",
    "2026-05-03T09:15:00ZZ",
    "2026-05-03",
    "1777799700",
    "١٧٧٧٧٩٩٧٠٠",  # Arabic-Indic digits
    "soon",
    "",
]


def _rows_against_check_view(rows, run):
    """What the reader gives for ``rows`` (user, page, stamp, dwell, short) read in runs of ``run``, and
    what check_view gives for each row alone (a short row: its column-count error), as comparable tuples."""
    import rankrec.sources.views as views

    lines = ["user,page,timestamp,dwell"]
    expected: list = []
    for number, (user, page, stamp, dwell, short) in enumerate(rows, 2):
        if short:
            lines.append(f"{user},{page},{stamp}")
            expected.append((number, "wrong column count: 3 field(s), expected 4"))
            continue
        lines.append(f"{user},{page},{stamp},{dwell}")
        try:
            view = check_view(user, page, stamp, dwell, origin=Origin("f", number), now=NOW)
            expected.append((view.user, view.page, view.timestamp, view.dwell, number))
        except InputError as error:
            expected.append((number, error.reason))
    kept = views.RUN_ROWS
    views.RUN_ROWS = run
    try:
        with tempfile.TemporaryDirectory() as folder:
            path = Path(folder) / "views.csv"
            path.write_text("\n".join(lines) + "\n", encoding="utf-8")
            records = list(read_view_events(path, now=NOW))
            runs = [item for item in views.read_view_rows(path, now=NOW) if not isinstance(item, InputError)]
    finally:
        views.RUN_ROWS = kept
    got = [
        (r.line, r.reason)
        if isinstance(r, InputError)
        else (r.user, r.page, r.timestamp, r.dwell, r.origin.line)
        for r in records
    ]
    assert all(0 < len(item.lines) <= run for item in runs)
    return got, expected


@pytest.mark.parametrize("run", [1, 3, 50])
def test_every_time_shape_reads_as_check_view_reads_it(run):
    # Each time shape of _STAMPS on a good row, then on rows whose id or dwell is bad: the reader reads
    # the usual ISO shape through numpy, a run at a time. Reference: check_view on each row alone
    # (datetime.fromisoformat of the standard library behind it).
    rows = [("ines", "ops/db", stamp, "3", False) for stamp in _STAMPS]
    rows += [("", "ops/db", stamp, "3", False) for stamp in _STAMPS[:10]]
    rows += [("ines", "ops/db", stamp, "-1", False) for stamp in _STAMPS[:10]]
    got, expected = _rows_against_check_view(rows, run)
    assert got == expected
    assert sum(len(item) == 5 for item in got) == 9  # the good shapes, the skew's last second included


@settings(max_examples=80, deadline=None)
@given(
    rows=st.lists(
        st.tuples(
            st.sampled_from(["ines", " ines", "tor ", "", "u\x01", "x" * 257, "ö"]),
            st.sampled_from(["ops/db", "hr/leave ", "  ", "p\u2028q", "ops/db"]),
            st.sampled_from(_STAMPS),
            st.sampled_from(["", "3", "2.5", "-1", "many", " 4 "]),
            st.booleans(),  # a row with a column missing
        ),
        max_size=30,
    ),
    run=st.integers(1, 5),
)
def test_runs_give_what_check_view_gives_row_by_row(rows, run):
    # The CSV reader checks a run's rows column by column (distinct ids once, times of the usual
    # shape together through numpy). Whatever the run length, each row must give exactly what
    # check_view gives for its fields (the value, or the same reason), in line order. Reference:
    # check_view on each row alone, and datetime.fromisoformat (stdlib) behind it.
    got, expected = _rows_against_check_view(rows, run)
    assert got == expected

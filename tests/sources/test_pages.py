"""Page-export reader: CSV and JSON Lines, field parsing, repeated ids."""

from __future__ import annotations

import gzip
import json
import tempfile
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rankrec.errors import InputError
from rankrec.sources.pages import read_page_export
from rankrec.sources.records import PageRecord


def _read(tmp_path, text: str, name: str = "pages.csv"):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return list(read_page_export(path))


def _errors(records):
    return [(r.line, r.reason) for r in records if isinstance(r, InputError)]


def test_csv_export(tmp_path):
    text = (
        "id,title,space,tags,groups,archived,url,owner\n"
        "ops/db,Database runbook,ops,sql;ops,,no,http://wiki.invalid/ops/db,ines\n"
        'hr/leave,"Leave, holidays",hr,,staff;hr,TRUE,,\n'
        "misc,,,,,,,\n"
    )
    db, leave, misc = _read(tmp_path, text)
    assert (db.page, db.title, db.space, db.tags, db.groups, db.archived, db.url) == (
        "ops/db",
        "Database runbook",
        "ops",
        ("sql", "ops"),
        (),
        False,
        "http://wiki.invalid/ops/db",
    )
    assert db.origin.line == 2 and db.origin.file.endswith("pages.csv")
    # RFC 4180: the quoted comma belongs to the title.
    assert (leave.title, leave.groups, leave.archived) == ("Leave, holidays", ("staff", "hr"), True)
    assert (misc.title, misc.space, misc.tags, misc.url) == ("misc", None, (), None)  # title defaults to id


def test_columns_in_any_order_and_only_id_required(tmp_path):
    (page,) = _read(tmp_path, "Title,ID\nBackups,ops/backup\n")
    assert (page.page, page.title) == ("ops/backup", "Backups")


def test_csv_without_id_column(tmp_path):
    records = _read(tmp_path, "name,title\nx,y\n")
    assert len(records) == 1 and _errors(records)[0][0] == 1 and "lacks column(s) id" in records[0].reason


def test_csv_bad_rows(tmp_path):
    records = _read(tmp_path, "id,title,archived\na,A\n,B,no\nc,C,perhaps\nd,D,1\n")
    assert [line for line, _ in _errors(records)] == [2, 3, 4]
    reasons = [reason for _, reason in _errors(records)]
    assert "wrong column count" in reasons[0] and "empty page id" in reasons[1] and "archived" in reasons[2]
    assert [r.page for r in records if isinstance(r, PageRecord)] == ["d"]


def test_repeated_ids(tmp_path):
    records = _read(tmp_path, "id,title,tags\na,A,x\nb,B,\na,A,x\na,Other,x\na,A,y\n")
    assert [r.page for r in records if isinstance(r, PageRecord)] == ["a", "b"]  # same fields: once
    errors = _errors(records)
    assert [line for line, _ in errors] == [5, 6]
    assert "different title" in errors[0][1] and "first on line 2" in errors[0][1]
    assert "different tags" in errors[1][1]


def test_json_lines(tmp_path):
    lines = [
        {"id": "ops/db", "title": "Database", "tags": ["sql", "ops"], "groups": "staff;ops", "extra": 1},
        {"id": "ops/old", "archived": True, "space": "ops"},
        {"id": 42, "title": None},
    ]
    text = "\n".join(json.dumps(line) for line in lines) + "\n\n"
    db, old, number = _read(tmp_path, text, name="pages.ndjson")
    assert (db.title, db.tags, db.groups) == ("Database", ("sql", "ops"), ("staff", "ops"))
    assert (old.archived, old.space, old.title) == (True, "ops", "ops/old")
    assert (number.page, number.title) == ("42", "42")


def test_json_lines_by_first_character(tmp_path):
    (page,) = _read(tmp_path, '{"id": "a"}\n', name="pages.txt")
    assert page.page == "a"


def test_json_bad_lines(tmp_path):
    text = '{"id": "a"}\n[1, 2]\n{"id": "b"\n"text"\n{"title": "no id"}\n{"id": "c", "tags": 5}\n'
    records = _read(tmp_path, text, name="pages.jsonl")
    errors = _errors(records)
    assert [line for line, _ in errors] == [2, 3, 4, 5, 6]
    assert "an array, not an object" in errors[0][1] and "not valid JSON" in errors[1][1]
    assert "a string, not an object" in errors[2][1] and "missing page id" in errors[3][1]
    assert "tags" in errors[4][1]


def test_gzipped_json_lines(tmp_path):
    path = tmp_path / "pages.jsonl.gz"
    path.write_bytes(gzip.compress(b'{"id": "a", "title": "A"}\n'))
    (page,) = list(read_page_export(path))
    assert page.title == "A"


def test_empty_file(tmp_path):
    (error,) = _read(tmp_path, "")
    assert isinstance(error, InputError) and "empty" in error.reason


@settings(max_examples=80, deadline=None)
@given(data=st.binary(max_size=300), name=st.sampled_from(["pages.csv", "pages.jsonl"]))
def test_arbitrary_bytes_never_raise(data, name):
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / name
        path.write_bytes(data)
        records = list(read_page_export(path))
    assert all(isinstance(r, PageRecord | InputError) for r in records)


@settings(max_examples=50, deadline=None)
@given(objects=st.lists(st.dictionaries(st.sampled_from(["id", "title", "tags", "archived"]), st.text())))
def test_arbitrary_json_objects_never_raise(objects):
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "pages.jsonl"
        path.write_text("\n".join(json.dumps(o) for o in objects) + "\n")
        records = list(read_page_export(path))
    assert all(isinstance(r, PageRecord | InputError) for r in records)


def test_bad_encoding_argument():
    with pytest.raises(ValueError, match="encoding"):
        read_page_export("pages.csv", encoding="no-such-codec")


def test_optional_text_column_and_key(tmp_path):
    # RFC 4180: a quoted field may hold line breaks; whitespace is then collapsed as every reader does.
    (csv_page, plain) = _read(tmp_path, 'id,title,text\nops/db,Database,"Back up\n  nightly."\nops/x,X,\n')
    assert (csv_page.text, csv_page.headings) == ("Back up nightly.", "Database")
    assert plain.text == ""
    lines = [{"id": "a", "title": "A  page", "text": "Line one.\nLine two."}, {"id": "b", "text": None}]
    a, b = _read(tmp_path, "\n".join(json.dumps(line) for line in lines) + "\n", name="pages.jsonl")
    assert (a.text, a.headings, b.text) == ("Line one. Line two.", "A page", "")


def test_text_is_capped_and_must_be_a_string(tmp_path):
    # RFC 3629: a cut between the bytes of one UTF-8 character would not decode; 64 KiB = 65,536 bytes,
    # which "a" and 21,845 three-byte characters (U+20AC) fill exactly.
    lines = [{"id": "a", "text": "a" + "€" * 30_000}, {"id": "b", "text": 5}]
    a, error = _read(tmp_path, "\n".join(json.dumps(line) for line in lines) + "\n", name="pages.jsonl")
    assert a.text == "a" + "€" * 21_845 and len(a.text.encode("utf-8")) == 65_536
    assert isinstance(error, InputError) and "text must be a string" in error.reason


def test_repeated_id_with_other_text_is_an_error(tmp_path):
    records = _read(tmp_path, "id,text\na,one\na,two\n")
    assert [line for line, _ in _errors(records)] == [3] and "different text" in _errors(records)[0][1]

"""Team and access-group membership reader."""

from __future__ import annotations

import tempfile
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rankrec.errors import InputError
from rankrec.sources.membership import read_memberships
from rankrec.sources.records import MembershipRecord


def _read(tmp_path, text: str, kind: str, name: str = "teams.csv"):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return list(read_memberships(path, kind))


def _members(records):
    return [(r.user, r.name, r.kind, r.origin.line) for r in records if isinstance(r, MembershipRecord)]


def _errors(records):
    return [(r.line, r.reason) for r in records if isinstance(r, InputError)]


def test_teams_with_header(tmp_path):
    records = _read(tmp_path, "User,Team\nines,platform\ntor,platform\nines,payroll\n", "team")
    assert _members(records) == [
        ("ines", "platform", "team", 2),
        ("tor", "platform", "team", 3),
        ("ines", "payroll", "team", 4),
    ]


def test_groups_without_header(tmp_path):
    records = _read(tmp_path, "ines,staff\n\n tor , hr \n", "group", name="groups.csv")
    assert _members(records) == [("ines", "staff", "group", 1), ("tor", "hr", "group", 3)]


def test_rfc4180_quoting_and_tabs(tmp_path):
    # RFC 4180 section 2 rule 6: a field holding a comma is quoted.
    assert _members(_read(tmp_path, 'ines,"Oslo, floor 3"\n', "team")) == [
        ("ines", "Oslo, floor 3", "team", 1)
    ]
    assert _members(_read(tmp_path, "user\tteam\nines\tplatform\n", "team", name="teams.tsv")) == [
        ("ines", "platform", "team", 2)
    ]


def test_header_of_the_other_kind(tmp_path):
    records = _read(tmp_path, "user,group\nines,staff\n", "team")
    assert len(records) == 1 and _errors(records)[0][0] == 1 and "user,group" in records[0].reason


def test_bad_rows_and_repeats(tmp_path):
    records = _read(
        tmp_path, "user,team\nines\nines,a,b\n,platform\nines,\nines,platform\nines,platform\n", "team"
    )
    errors = _errors(records)
    assert [line for line, _ in errors] == [2, 3, 4, 5]
    assert "wrong column count" in errors[0][1] and "wrong column count" in errors[1][1]
    assert "empty user id" in errors[2][1] and "empty team name" in errors[3][1]
    assert _members(records) == [("ines", "platform", "team", 6)]  # the repeat on line 7 dropped


def test_missing_and_empty_files(tmp_path):
    (missing,) = list(read_memberships(tmp_path / "absent.csv", "team"))
    assert isinstance(missing, InputError) and "cannot open" in missing.reason
    (empty,) = _read(tmp_path, "", "group")
    assert isinstance(empty, InputError) and "empty" in empty.reason


def test_bad_arguments():
    with pytest.raises(ValueError, match="kind"):
        read_memberships("teams.csv", "department")
    with pytest.raises(ValueError, match="encoding"):
        read_memberships("teams.csv", "team", encoding="no-such-codec")


@settings(max_examples=80, deadline=None)
@given(data=st.binary(max_size=300), kind=st.sampled_from(["team", "group"]))
def test_arbitrary_bytes_never_raise(data, kind):
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "members.csv"
        path.write_bytes(data)
        records = list(read_memberships(path, kind))
    assert all(isinstance(r, MembershipRecord | InputError) for r in records)

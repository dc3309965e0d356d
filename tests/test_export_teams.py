"""rankrec export --teams: every eligible team's landing ordering in one file, as `rankrec landing`."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import pytest

import rankrec.export
from rankrec.cli import main
from rankrec.demo import import_demo
from rankrec.export import LANDING_CSV_COLUMNS
from rankrec.index import load_index
from rankrec.store import Store

_FIELDS = ("page", "title", "score", "reason")


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """The invented demo wiki imported and built: (index folder, store path, access groups, teams)."""
    folder = tmp_path_factory.mktemp("export-teams")
    wiki = import_demo(folder)
    assert main(["build", "--wiki", str(wiki), "--index", str(folder / "index")]) == 0
    with Store(wiki, create=False) as store:
        groups, teams = store.names_of("group"), store.names_of("team")
    return folder / "index", wiki, groups, teams


def _export(index: Path, out: Path, *options: str) -> int:
    return main(["export", "--index", str(index), "--teams", "--out", str(out), *options])


def _landing(index: Path, team: str, capsys, *options: str) -> list[dict] | None:
    """`rankrec landing TEAM --format json` for ``team``, or None when it refuses the team."""
    capsys.readouterr()
    code = main(["landing", team, "--index", str(index), "--format", "json", *options])
    out = capsys.readouterr().out
    return json.loads(out) if code == 0 else None


def _restricted(index: Path) -> set[str]:
    loaded = load_index(index)
    return {loaded.pages[number] for number in range(loaded.size) if not loaded.public[number]}


def test_every_eligible_team_gets_the_landing_list_item_by_item(demo, tmp_path, capsys):
    index, _, groups, teams = demo
    # a viewer in every access group sees all a team may: the lists are exactly `rankrec landing`'s
    everyone = [option for group in groups for option in ("--viewer-group", group)]
    assert _export(index, tmp_path / "teams.json", *everyone) == 0
    exported = json.loads((tmp_path / "teams.json").read_text(encoding="utf-8"))  # RFC 8259 JSON
    answered = {team: _landing(index, team, capsys) for team in teams}
    eligible = {team for team, items in answered.items() if items is not None}
    assert eligible == set(load_index(index).team_names)  # the teams the build kept
    assert eligible and set(exported) == eligible
    for team in eligible:
        served = answered[team]
        assert len(exported[team]) == len(served) == 20  # the default k is `rankrec landing`'s
        for mine, theirs in zip(exported[team], served, strict=True):
            assert {name: mine[name] for name in _FIELDS} == {name: theirs[name] for name in _FIELDS}
            assert set(mine) == {"page", "title", "url", "score", "reason"}


def test_public_lists_equal_landing_wherever_the_team_reads_no_restricted_page(demo, tmp_path, capsys):
    index, _, _, teams = demo
    assert _export(index, tmp_path / "public.json", "-k", "5") == 0
    exported = json.loads((tmp_path / "public.json").read_text(encoding="utf-8"))
    restricted = _restricted(index)
    compared = 0
    for team, items in exported.items():
        served = _landing(index, team, capsys, "-k", "5")
        assert served is not None and len(items) == 5
        if not {item["page"] for item in served} & restricted:
            assert [item["page"] for item in items] == [item["page"] for item in served]
            assert [item["reason"] for item in items] == [item["reason"] for item in served]
            compared += 1
    assert compared >= 2


def test_a_restricted_page_never_reaches_the_public_viewer_but_reaches_a_member_group(demo, tmp_path):
    index, _, _, _ = demo
    restricted = _restricted(index)
    assert _export(index, tmp_path / "public.json") == 0
    assert _export(index, tmp_path / "finance.json", "--viewer-group", "finance-staff") == 0
    public = json.loads((tmp_path / "public.json").read_text(encoding="utf-8"))
    finance = json.loads((tmp_path / "finance.json").read_text(encoding="utf-8"))
    assert not {item["page"] for items in public.values() for item in items} & restricted
    shown = {item["page"] for item in finance["accounting"]} & restricted
    assert shown and all(page.startswith("finance/") for page in shown)
    assert len(public["accounting"]) == len(finance["accounting"])  # refilled, not cut short


def test_csv_and_json_lines_parse_with_the_standard_library(demo, tmp_path):
    index, _, _, _ = demo
    template = "https://wiki.example/{page}"
    for name in ("teams.json", "teams.jsonl", "teams.csv"):
        assert _export(index, tmp_path / name, "-k", "4", "--url-template", template) == 0
    exported = json.loads((tmp_path / "teams.json").read_text(encoding="utf-8"))
    # JSON Lines (jsonlines.org): one JSON object per line, UTF-8, each with the team and its items
    lines = (tmp_path / "teams.jsonl").read_text(encoding="utf-8").splitlines()
    records = [json.loads(line) for line in lines]
    assert [record["team"] for record in records] == list(exported)
    assert {record["team"]: record["items"] for record in records} == exported
    # CSV (RFC 4180), read by Python's csv module: a header, then one row per item
    with open(tmp_path / "teams.csv", newline="", encoding="utf-8") as handle:
        reader = csv.DictReader(handle)
        assert tuple(reader.fieldnames) == LANDING_CSV_COLUMNS
        rows = list(reader)
    assert len(rows) == sum(len(items) for items in exported.values())
    for row in rows:
        item = exported[row["team"]][int(row["rank"]) - 1]
        assert row["page"] == item["page"] and row["title"] == item["title"]
        assert float(row["score"]) == pytest.approx(item["score"])
        assert row["reason"] == item["reason"]
        assert row["url"] == item["url"] == f"https://wiki.example/{item['page']}"


def test_a_failed_write_leaves_no_partial_file(demo, tmp_path, monkeypatch, capsys):
    index, _, _, _ = demo
    blocker = tmp_path / "not-a-folder"
    blocker.write_text("a file where the folder should be\n")
    assert _export(index, blocker / "teams.json") == 2
    assert "cannot write" in capsys.readouterr().err
    assert blocker.read_text() == "a file where the folder should be\n"

    out = tmp_path / "teams.jsonl"
    out.write_text("the previous export\n")
    calls = []

    def failing(*args, **kwargs):
        calls.append(1)
        if len(calls) == 2:  # the first team is written already
            raise OSError(28, "No space left on device")
        return real(*args, **kwargs)

    real = rankrec.export.landing
    monkeypatch.setattr(rankrec.export, "landing", failing)
    assert _export(index, out) == 2
    assert "no space left" in capsys.readouterr().err
    assert out.read_text() == "the previous export\n"
    assert sorted(path.name for path in tmp_path.iterdir()) == ["not-a-folder", "teams.jsonl"]


def test_a_team_below_the_minimum_is_counted_never_named(demo, tmp_path, capsys):
    index, wiki, _, teams = demo
    with Store(wiki, create=False) as store:
        members = {team: store.members_of("team", team) for team in teams}
    small = [team for team in teams if team not in load_index(index).team_names]
    assert small  # the demo has a team with too few distinct active readers
    capsys.readouterr()
    assert _export(index, tmp_path / "teams.csv") == 0
    err = capsys.readouterr().err
    with open(tmp_path / "teams.csv", newline="", encoding="utf-8") as handle:
        listed = {row["team"] for row in csv.DictReader(handle)}
    assert not listed & set(small)
    assert f"{len(small)} team" in err and "fewer than 5 distinct active readers" in err
    for team in small:
        assert team not in err
        assert not [member for member in members[team] if member in err]

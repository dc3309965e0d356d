"""`rankrec build`, `related`, `recommend` and `landing` through the command line."""

from __future__ import annotations

import csv
import io
import json

import pytest

from rankrec.cli import main
from rankrec.store import Store
from tests.test_index import make_wiki


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    folder = tmp_path_factory.mktemp("cli")
    wiki = make_wiki(folder / "wiki.db", pages=50, seed=8, users=12, teams=2, views=10)
    assert main(["build", "--wiki", str(wiki), "--index", str(folder / "index"), "--hubs", "3"]) == 0
    return folder, wiki


def _run(capsys, *argv):
    code = main(list(argv))
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_build_reports_and_related_defaults_to_the_recorded_store(built, capsys):
    folder, _ = built
    code, out, _ = _run(capsys, "related", "s0/page-3", "--index", str(folder / "index"), "--format", "json")
    assert code == 0
    rows = json.loads(out)
    assert len(rows) == 10 and {"page", "title", "score", "reason"} <= set(rows[0])
    assert all(row["page"] != "s0/page-3" for row in rows)
    scores = [row["score"] for row in rows]
    assert scores == sorted(scores, reverse=True)


def test_without_viewer_only_public_pages(built, capsys):
    folder, wiki = built
    with Store(wiki) as store:
        restricted = {
            row[0]
            for row in store.connection.execute("SELECT page FROM page_groups JOIN pages ON id = page_id")
        }
    for page in ("s0/page-0", "s1/page-7", "s2/page-20"):
        _, out, _ = _run(
            capsys, "related", page, "--index", str(folder / "index"), "--format", "json", "-k", "30"
        )
        assert not {row["page"] for row in json.loads(out)} & restricted


def test_every_format(built, capsys):
    folder, _ = built
    index = str(folder / "index")
    _, out, _ = _run(capsys, "recommend", "user01", "--index", index, "--format", "csv", "-k", "4")
    assert [row["rank"] for row in csv.DictReader(io.StringIO(out))] == ["1", "2", "3", "4"]
    _, out, _ = _run(capsys, "recommend", "user01", "--index", index, "--format", "json", "-k", "4")
    listed = json.loads(out)
    template = "https://wiki.example.invalid/{page}"
    argv = ("recommend", "user01", "--index", index, "--format", "md", "-k", "4", "--url-template", template)
    _, out, _ = _run(capsys, *argv)
    lines = out.splitlines()
    # a CommonMark heading, a blank line and one list item per page, each an inline link (CommonMark 0.31
    # sections 4.2, 5.2 and 6.3), with the served page, URL and reason
    assert lines[0].startswith("## ") and lines[1] == "" and len(lines) == 2 + len(listed)
    for line, row in zip(lines[2:], listed, strict=True):
        assert (
            line.startswith("- [")
            and f"]({template.replace('{page}', row['page'])}): {row['reason']}" in line
        )
    _, out, _ = _run(capsys, "related", "s0/page-3", "--index", index, "--viewer", "user02", "-k", "3")
    assert out.splitlines()[0].split()[:3] == ["rank", "page", "title"] and len(out.splitlines()) == 4


def test_unknown_ids_exit_2_with_the_closest(built, capsys):
    folder, _ = built
    index = str(folder / "index")
    for argv, closest in (
        (["related", "s0/page_3", "--index", index], "s0/page-3"),
        (["recommend", "usr01", "--index", index], "user01"),
        (["landing", "taem0", "--index", index], "team0"),
    ):
        code, _, err = _run(capsys, *argv)
        assert code == 2 and closest in err and len(err.strip().splitlines()) == 1


def test_landing_refuses_small_teams_and_names_no_member(built, capsys):
    folder, wiki = built
    index = str(folder / "index")
    with Store(wiki) as store:
        members = [row[0] for row in store.connection.execute("SELECT user FROM users")]
    code, _, err = _run(capsys, "landing", "team0", "--index", index, "--min-readers", "7")
    assert code == 2 and "distinct active readers" in err
    outputs = [err]
    for format in ("table", "json", "csv", "md"):
        code, out, err = _run(capsys, "landing", "team0", "--index", index, "--format", format)
        assert code == 0
        outputs += [out, err]
    assert not any(member in text for member in members for text in outputs)


def test_landing_since_marks_what_entered_and_left(built, capsys, tmp_path):
    folder, _ = built
    index = str(folder / "index")
    _, out, _ = _run(capsys, "landing", "team1", "--index", index, "--format", "json", "-k", "6")
    previous = json.loads(out)
    kept = previous[:4] + [{"page": "s9/retired-page", "title": "x", "score": 0.1, "reason": "x"}]
    (tmp_path / "previous.json").write_text(json.dumps(kept))
    _, out, _ = _run(
        capsys,
        "landing",
        "team1",
        "--index",
        index,
        "--format",
        "json",
        "-k",
        "6",
        "--since",
        str(tmp_path / "previous.json"),
    )
    rows = json.loads(out)
    entered = {row["page"] for row in rows if row["change"] == "entered"}
    assert entered == {row["page"] for row in previous[4:]}
    assert [row["page"] for row in rows if row["change"] == "left"] == ["s9/retired-page"]
    _, out, _ = _run(
        capsys,
        "landing",
        "team1",
        "--index",
        index,
        "--format",
        "md",
        "-k",
        "6",
        "--since",
        str(tmp_path / "previous.json"),
    )
    assert out.rstrip().endswith("left the list since the last export: s9/retired-page")


def test_a_stale_index_is_refused(tmp_path, capsys):
    wiki = make_wiki(tmp_path / "wiki.db", pages=20, seed=3)
    assert main(["build", "--wiki", str(wiki), "--index", str(tmp_path / "index"), "--hubs", "1"]) == 0
    capsys.readouterr()
    with Store(wiki) as store:
        store.put_links([("s0/page-0", "s1/page-1", 1.0), ("s1/page-1", "s0/page-0", 1.0)])
        store.log_import("more", "edges", 2, 0)
    code, _, err = _run(capsys, "related", "s0/page-0", "--index", str(tmp_path / "index"))
    assert code == 2 and "index is stale" in err


def test_demo_prints_the_three_lists_and_where_the_index_is(demo_run):
    from rankrec.index import load_index

    folder, text = demo_run
    assert text.count("Related to ") == 2
    assert "Personal list for reader" in text and "Landing ordering for team" in text
    assert f"The index is in {folder / 'index'}" in text
    index = load_index(folder / "index")
    assert index.manifest.counts["precomputed"] == index.size

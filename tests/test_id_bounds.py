"""One bound on ids for every entry point (issue finding 9): the check itself, and the importers.

Whatever the format (line-oriented files, Markdown whose ids come from file names and links), a page,
user, team or group id longer than 256 characters or holding a control character is refused as an
InputError with file and line, quoting at most a short prefix, and nothing of it is stored.
"""

from __future__ import annotations

import sys
import unicodedata

import pytest

from rankrec._validation import ID_MAX_CHARS, check_id, id_problem, quoted
from rankrec.errors import InputError
from rankrec.importer import import_sources
from rankrec.sources import check_id as public_check_id
from rankrec.store import Store


def test_the_bound_refuses_exactly_the_control_and_separator_characters():
    # Unicode general categories (UAX #44): Cc controls, Zl/Zp line and paragraph separators, Cs
    # surrogates (not encodable in UTF-8, RFC 3629) are refused; every other character is allowed
    refused = {"Cc", "Zl", "Zp", "Cs"}
    for code in range(sys.maxunicode + 1):
        character = chr(code)
        expected = unicodedata.category(character) in refused
        assert (id_problem(f"a{character}b") is not None) == expected, hex(code)


def test_the_bound_on_length_and_blank_ids():
    assert check_id("page id", "p" * ID_MAX_CHARS) == "p" * ID_MAX_CHARS
    for bad in ("p" * (ID_MAX_CHARS + 1), "", "   "):
        with pytest.raises(ValueError, match="page id"):
            check_id("page id", bad)
    with pytest.raises(TypeError):
        check_id("page id", 42)
    assert public_check_id is check_id  # the service uses this very function
    assert len(quoted("x" * 300_000)) < 70


def _import(tmp_path, name: str, text: str, **options):
    source = tmp_path / name
    source.write_text(text, encoding="utf-8")
    with Store(tmp_path / "wiki.db") as store:
        reports = import_sources(store, [source], **options)
        users = {row[0] for row in store.connection.execute("SELECT user FROM users")}
        pages = {row[0] for row in store.connection.execute("SELECT page FROM pages")}
        teams = {row[0] for row in store.connection.execute("SELECT name FROM memberships")}
    return reports[0], users, pages, teams


@pytest.mark.parametrize(
    ("name", "text", "what"),
    [
        ("views.csv", "user,page,timestamp\n{long},ops/a,1000\nana,ops/a,1000\n", "user id"),
        ("views.csv", "user,page,timestamp\nana,{long},1000\nana,ops/a,1000\n", "page id"),
        ("edges.csv", "source,target\nops/a,{long}\nops/a,ops/b\n", "target id"),
        ("teams.csv", "user,team\nana,{long}\nbo,ops\n", "team name"),
    ],
    ids=["views-user", "views-page", "edges-target", "teams-name"],
)
def test_line_importers_refuse_ids_over_the_bound(tmp_path, name, text, what):
    long = "x" * 300_000
    report, users, pages, teams = _import(tmp_path, name, text.format(long=long))
    assert report.error_count == 1 and report.good >= 1
    error = report.errors[0]
    assert error.line == 2 and what in error.reason and "256" in error.reason
    assert len(str(error)) < 200  # a short prefix, not the id
    assert long not in users | pages | teams
    strict = tmp_path / "strict"
    strict.mkdir()
    with pytest.raises(InputError, match=what):
        _import(strict, name, text.format(long=long), strict=True)


def test_markdown_ids_from_long_paths_and_links_are_refused(tmp_path):
    wiki = tmp_path / "wiki"
    deep = wiki / ("d" * 200) / ("e" * 100)  # a page id (the path) of over 300 characters
    deep.mkdir(parents=True)
    (deep / "page.md").write_text("# Deep\n\n[ok](../../short.md)\n", encoding="utf-8")
    (wiki / "short.md").write_text("# Short\n\n[far](" + "f" * 400 + ".md)\n", encoding="utf-8")
    with Store(tmp_path / "wiki.db") as store:
        report = import_sources(store, [(wiki, "markdown")])[0]
        pages = [row[0] for row in store.connection.execute("SELECT page FROM pages")]
    assert all(len(page) <= ID_MAX_CHARS for page in pages) and any("short" in page for page in pages)
    reasons = [error.reason for error in report.errors]
    assert any("page id" in reason and "256" in reason for reason in reasons), reasons
    assert any("target id" in reason for reason in reasons), reasons
    assert all(len(reason) < 200 for reason in reasons)

"""Choosing a reader from what a source is, its name and its first line."""

from __future__ import annotations

import gzip

import pytest

from rankrec.errors import InputError
from rankrec.sources import detect_format, read_source

# The Common Log Format example line of the Apache HTTP Server log-format documentation.
APACHE_COMMON = '127.0.0.1 - frank [10/Oct/2000:13:55:36 -0700] "GET /apache_pb.gif HTTP/1.0" 200 2326\n'


@pytest.mark.parametrize(
    ("name", "text", "expected"),
    [
        ("requests.txt", APACHE_COMMON, "access-log"),
        ("server.log", "anything\n", "access-log"),
        ("v.csv", "user,page,timestamp,dwell\nu,a,2026-01-01,3\n", "views"),
        ("v.csv", "page,timestamp,user\na,1,u\n", "views"),
        ("v.jsonl", '{"user": "u", "page": "a", "timestamp": 1}\n', "views"),
        ("p.jsonl", '{"id": "a", "title": "A"}\n', "pages"),
        ("p.csv", "id,title,space\na,A,ops\n", "pages"),
        ("m.csv", "user,team\nu,core\n", "teams"),
        ("m.csv", "user,group\nu,finance\n", "groups"),
        ("teams.csv", "u,core\n", "teams"),
        ("groups.csv", "u,finance\n", "groups"),
        ("links.tsv", "# a comment\na\tb\n", "edges"),
        ("links.csv", "source,target,weight\na,b,2\n", "edges"),
    ],
)
def test_files_are_recognised(tmp_path, name, text, expected):
    path = tmp_path / name
    path.write_text(text)
    assert detect_format(path) == expected


def test_gzip_log_is_recognised_by_its_content(tmp_path):
    path = tmp_path / "requests.gz"
    path.write_bytes(gzip.compress(APACHE_COMMON.encode()))
    assert detect_format(path) == "access-log"


def test_folders_are_recognised_by_their_pages(tmp_path):
    (tmp_path / "md").mkdir()
    (tmp_path / "md" / "a.md").write_text("# A\n")
    (tmp_path / "web").mkdir()
    (tmp_path / "web" / "a.html").write_text("<title>A</title>")
    assert detect_format(tmp_path / "md") == "markdown"
    assert detect_format(tmp_path / "web") == "html"


@pytest.mark.parametrize(
    ("setup", "reason"),
    [
        (lambda p: p.mkdir(), "holds no Markdown"),
        (lambda p: None, "no such file"),
        (lambda p: p.write_text(""), "empty"),
        (lambda p: p.write_text("# only a comment\n\n"), "holds no records"),
        (lambda p: p.write_text('{"colour": "red"}\n'), "neither view events nor a page export"),
    ],
)
def test_unrecognisable_sources_are_input_errors(tmp_path, setup, reason):
    path = tmp_path / "source"
    setup(path)
    with pytest.raises(InputError, match=reason):
        detect_format(path)


def test_unknown_format_name_is_a_value_error(tmp_path):
    with pytest.raises(ValueError, match="format must be one of"):
        read_source(tmp_path, "docx")

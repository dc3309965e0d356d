"""Edge-list reader: header detection, weights, self-links, duplicates, the Wikispeedia links."""

from __future__ import annotations

import csv
import gzip
import tempfile
from pathlib import Path

import pytest
from hypothesis import example, given, settings
from hypothesis import strategies as st

from rankrec.errors import InputError
from rankrec.sources.edges import read_edge_list
from rankrec.sources.records import LinkRecord, PageRecord
from tests.conftest import require_shared


def _read(tmp_path, text: str, name: str = "links.csv"):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return list(read_edge_list(path))


def _links(records):
    return [(r.source, r.target, r.weight, r.origin.line) for r in records if isinstance(r, LinkRecord)]


def _pages(records):
    return [r.page for r in records if isinstance(r, PageRecord)]


def _errors(records):
    return [(r.line, r.reason) for r in records if isinstance(r, InputError)]


@pytest.mark.parametrize("header", ["source,target", "From,To", "SRC,DST,weight", "source,target,Weight"])
def test_known_header_names(tmp_path, header):
    records = _read(tmp_path, f"{header}\nops/db,ops/backup\n")
    assert _links(records) == [("ops/db", "ops/backup", 1.0, 2)]
    assert _pages(records) == ["ops/db", "ops/backup"]


def test_header_by_fields_that_occur_nowhere_else(tmp_path):
    # formats.md section 3: a first row whose two fields occur nowhere else is a header.
    records = _read(tmp_path, "page_a,page_b\na,b\nb,c\n")
    assert _links(records) == [("a", "b", 1.0, 2), ("b", "c", 1.0, 3)]
    assert _pages(records) == ["a", "b", "c"]
    assert _errors(records) == []


def test_first_row_is_data_when_a_field_recurs(tmp_path):
    records = _read(tmp_path, "a,b\nc,d\nd,a\n")
    assert sorted(_links(records), key=lambda link: link[3]) == [
        ("a", "b", 1.0, 1),
        ("c", "d", 1.0, 2),
        ("d", "a", 1.0, 3),
    ]
    assert sorted(_pages(records)) == ["a", "b", "c", "d"]
    # Every link comes after the pages it joins.
    seen: set[str] = set()
    for record in records:
        if isinstance(record, PageRecord):
            seen.add(record.page)
        elif isinstance(record, LinkRecord):
            assert {record.source, record.target} <= seen


def test_lone_row_is_data(tmp_path):
    assert _links(_read(tmp_path, "a,b\n")) == [("a", "b", 1.0, 1)]
    assert _links(_read(tmp_path, "source,target\n")) == []


def test_weights_and_bad_weights(tmp_path):
    records = _read(tmp_path, "source,target,weight\na,b,2.5\nb,c,\nc,a,0\nc,d,heavy\nd,a,nan\n")
    assert _links(records) == [("a", "b", 2.5, 2), ("b", "c", 1.0, 3)]
    errors = _errors(records)
    assert [line for line, _ in errors] == [4, 5, 6]
    assert "not positive" in errors[0][1] and "not a number" in errors[1][1] and "finite" in errors[2][1]


def test_self_links_and_duplicates(tmp_path):
    records = _read(tmp_path, "source,target\na,b\na,a\nb,a\na,b\n")
    assert _links(records) == [("a", "b", 1.0, 2), ("b", "a", 1.0, 4)]
    errors = _errors(records)
    assert errors[0][0] == 3 and "self-link" in errors[0][1]
    assert errors[1][0] == 5 and "duplicate" in errors[1][1] and "first on line 2" in errors[1][1]


def test_bad_rows(tmp_path):
    records = _read(tmp_path, "source,target\na\na,b,1,2\n,b\na, \n  c , d \n")
    assert [line for line, _ in _errors(records)] == [2, 3, 4, 5]
    reasons = [reason for _, reason in _errors(records)]
    assert "wrong column count" in reasons[0] and "wrong column count" in reasons[1]
    assert "empty source id" in reasons[2] and "empty target id" in reasons[3]
    assert _links(records) == [("c", "d", 1.0, 6)]  # surrounding blanks stripped


def test_tabs_comments_quotes(tmp_path):
    records = _read(tmp_path, "# wiki links\n\nops/db\tteam, platform\n", name="links.tsv")
    assert _links(records) == [("ops/db", "team, platform", 1.0, 3)]
    # RFC 4180: a quoted comma stays inside the field of a comma-separated list.
    records = _read(tmp_path, 'source,target\n"Halvard, Oslo",ops\n')
    assert _links(records) == [("Halvard, Oslo", "ops", 1.0, 2)]


def test_gzip_and_missing_file(tmp_path):
    path = tmp_path / "links.edges"
    path.write_bytes(gzip.compress(b"source,target\na,b\n"))
    assert _links(list(read_edge_list(path))) == [("a", "b", 1.0, 2)]
    (error,) = list(read_edge_list(tmp_path / "absent.csv"))
    assert isinstance(error, InputError) and "cannot open" in error.reason


def test_bad_encoding_argument():
    with pytest.raises(ValueError, match="encoding"):
        read_edge_list("links.csv", encoding="no-such-codec")


def test_wikispeedia_links():
    # Outside data: the Wikispeedia hyperlink graph (SNAP); expectations computed here with csv.
    path = require_shared("wikispeedia", "links.tsv")
    with open(path, encoding="utf-8", newline="") as handle:
        rows = [row for row in csv.reader(handle, delimiter="\t") if row and not row[0].startswith("#")]
    header, data = rows[0], rows[1:]
    assert header == ["Article_Name1", "Article_Name2"]
    self_links = sum(1 for source, target in data if source == target)
    distinct_pairs = len({(source, target) for source, target in data})

    records = list(read_edge_list(path))
    links = [r for r in records if isinstance(r, LinkRecord)]
    pages = [r for r in records if isinstance(r, PageRecord)]
    errors = [r for r in records if isinstance(r, InputError)]
    assert len(data) == 119_882  # as the dataset's description states
    # Every data line is a link, except self-links (InputErrors by our contract).
    assert len(links) + len(errors) == len(data)
    assert len(errors) == self_links and all("self-link" in e.reason for e in errors)
    assert len(links) == distinct_pairs - self_links
    assert len(pages) == len({page for row in data for page in row})
    assert header[0] not in {p.page for p in pages}  # the header row was detected
    assert links[0].origin.line == 2


rows = st.lists(
    st.tuples(st.sampled_from("abcde"), st.sampled_from("abcde"), st.none() | st.integers(1, 3)),
    max_size=30,
)


@settings(max_examples=60, deadline=None)
@given(rows=rows)
def test_against_a_plain_model(rows):
    # Independent model of the contract: a known header, then each distinct non-self pair once.
    lines = ["source,target,weight"] + [f"{s},{t},{'' if w is None else w}" for s, t, w in rows]
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "links.csv"
        path.write_text("\n".join(lines) + "\n")
        records = list(read_edge_list(path))
    expected, seen = [], set()
    for number, (s, t, w) in enumerate(rows, 2):
        if s != t and (s, t) not in seen:
            seen.add((s, t))
            expected.append((s, t, float(w or 1), number))
    assert _links(records) == expected
    assert _pages(records) == list(dict.fromkeys(page for s, t, _ in rows for page in (s, t)))
    assert len(_errors(records)) == len(rows) - len(expected)


@settings(max_examples=80, deadline=None)
@given(data=st.binary(max_size=300))
def test_arbitrary_bytes_never_raise(data):
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "links.csv"
        path.write_bytes(data)
        records = list(read_edge_list(path))
    assert all(isinstance(r, PageRecord | LinkRecord | InputError) for r in records)


def _same(item):
    """A record as it is; an InputError (no equality of its own) by its message."""
    return str(item) if isinstance(item, InputError) else item


padded_rows = st.lists(
    st.tuples(
        st.sampled_from(["a", " a", "b ", "c", "c"]),
        st.sampled_from(["a", "b", " b", "c", "x\x01"]),
        st.sampled_from(["", "2", "-1"]),
    ),
    max_size=25,
)


@settings(max_examples=60, deadline=None)
@given(rows=padded_rows, run=st.integers(1, 4))
def test_runs_of_any_length_read_as_one_record_per_row_in_line_order(rows, run):
    # The reader hands out its good rows in runs (EdgeRows); how long a run is changes nothing: the
    # records (and InputErrors) are those of one long run, in line order, each endpoint before its
    # first link. Ids padded with blanks are checked once and stripped (as parse_id strips them).
    import rankrec.sources.edges as edges

    lines = ["source,target,weight"] + [f"{s},{t},{w}" for s, t, w in rows]
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "links.csv"
        path.write_text("\n".join(lines) + "\n")
        whole = list(read_edge_list(path))
        kept = edges.RUN_ROWS
        edges.RUN_ROWS = run
        try:
            pieces = list(read_edge_list(path))
            runs = [item for item in edges.read_edge_rows(path) if not isinstance(item, InputError)]
        finally:
            edges.RUN_ROWS = kept
    assert [_same(item) for item in pieces] == [_same(item) for item in whole]
    assert all(len(item.sources) <= run for item in runs)
    where = [r.line if isinstance(r, InputError) else r.origin.line for r in whole]
    assert where == sorted(where)
    named = set()
    for record in whole:
        if isinstance(record, PageRecord):
            named.add(record.page)
        elif isinstance(record, LinkRecord):
            assert {record.source, record.target} <= named
            assert record.source == record.source.strip() and record.target == record.target.strip()
    expected, seen = [], set()
    for number, (s, t, w) in enumerate(rows, 2):
        s, t = s.strip(), t.strip()
        if "\x01" not in t and w != "-1" and s != t and (s, t) not in seen:
            seen.add((s, t))
            expected.append((s, t, float(w or 1), number))
    assert _links(whole) == expected


plain_rows = st.lists(
    st.tuples(
        st.sampled_from(["a", "b", "c", "d", " a", "x\x01", ""]), st.sampled_from(["a", "b", "c", "e"])
    ),
    max_size=40,
)


@settings(max_examples=80, deadline=None)
# found by CI: a block's bad row before any page was numbered (its own error, not a self-link's)
@example(rows=[("", "a")] * 3, header=True, chunk=4, run=1, extra="")
@given(
    rows=plain_rows,
    header=st.booleans(),
    chunk=st.integers(4, 40),
    run=st.integers(1, 7),
    extra=st.sampled_from(["", "# note\n", "\n", 'q,"r"\n', "f,g,2\n"]),
)
def test_plain_blocks_read_whole_give_what_row_by_row_reading_gives(rows, header, chunk, run, extra):
    # Blocks of plain "source,target" lines are read a block at a time (edges._plain_fields and
    # _block_links); every other line row by row. With tiny blocks (so that pages, self-links, repeated
    # links, bad ids and runs fall across block boundaries) the records, errors and runs must be exactly
    # those of reading every line row by row (the block reading switched off), in line order.
    import rankrec.sources._text as text
    import rankrec.sources.edges as edges

    lines = [f"{s},{t}" for s, t in rows]
    lines.insert(len(lines) // 2, extra.rstrip("\n")) if extra else None
    content = ("source,target\n" if header else "") + "\n".join(lines) + "\n"
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "links.csv"
        path.write_text(content)
        kept = text._CHUNK_BYTES, edges.RUN_ROWS, edges._plain_fields
        try:
            text._CHUNK_BYTES, edges.RUN_ROWS = chunk, run
            by_blocks = [_same(item) for item in read_edge_list(path)]
            runs = [
                len(item.sources) for item in edges.read_edge_rows(path) if not isinstance(item, InputError)
            ]
            edges._plain_fields = lambda block: None
            by_rows = [_same(item) for item in read_edge_list(path)]
        finally:
            text._CHUNK_BYTES, edges.RUN_ROWS, edges._plain_fields = kept
    assert by_blocks == by_rows
    assert all(size <= run for size in runs)

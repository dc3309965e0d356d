"""Reader for edge lists: ``source,target[,weight]`` rows, comma- or tab-separated.

An edge list alone defines a graph: every endpoint is a page (its title is its id).
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

from ..errors import InputError
from ._fields import FieldError, column_count_reason, iter_rows, parse_id, parse_weight
from ._text import check_encoding
from .records import EdgeRows, LinkRecord, PageRecord

HEADER_PAIRS = frozenset({("source", "target"), ("from", "to"), ("src", "dst")})
"""Known names of the two endpoint columns (compared case-insensitively); a third is ``weight``."""

_PACK = 1 << 32  # ids are numbered densely, so (source, target) packs into one int key
RUN_ROWS = 50_000
"""Most links of one :class:`~rankrec.sources.records.EdgeRows` run."""


def read_edge_list(
    path: str | Path, *, encoding: str = "utf-8"
) -> Iterator[PageRecord | LinkRecord | InputError]:
    """Yield a PageRecord per endpoint (when first seen), then LinkRecords; bad rows as InputErrors.

    Rows are ``source,target[,weight]`` (tab-separated if the first data line holds a tab,
    else CSV with RFC 4180 quoting); blank lines and ``#`` lines are skipped; fields are
    stripped of surrounding blanks. The first row is a header when it names known columns
    (``source,target``, ``from,to``, ``src,dst``, optionally ``weight``) or when neither of
    its two fields occurs as an endpoint anywhere else in the file; such a row is held back
    (not the file) until that is known. A file whose only row has unknown names treats that
    row as data. Self-links and repeated ``(source, target)`` pairs are InputErrors; the
    endpoints of a self-link are still pages.

    Examples
    --------
    >>> import tempfile, os
    >>> with tempfile.NamedTemporaryFile("w", suffix=".csv", delete=False) as f:
    ...     _ = f.write("from,to\\nops/db,ops/backup,2\\nops/backup,ops/db\\n")
    >>> [type(r).__name__ for r in read_edge_list(f.name)]
    ['PageRecord', 'PageRecord', 'LinkRecord', 'LinkRecord']
    >>> os.unlink(f.name)
    """
    check_encoding(encoding)
    return _records(_read(path, encoding))


def _records(items: Iterator[EdgeRows | InputError]) -> Iterator[PageRecord | LinkRecord | InputError]:
    for item in items:
        if isinstance(item, InputError):
            yield item
        else:
            yield from item.records()


def read_edge_rows(path: str | Path, *, encoding: str = "utf-8") -> Iterator[EdgeRows | InputError]:
    """What :func:`read_edge_list` reads, its good rows in runs of at most :data:`RUN_ROWS` links
    (:class:`~rankrec.sources.records.EdgeRows`), each bad row an InputError between two runs."""
    check_encoding(encoding)
    return _read(path, encoding)


def is_known_header(fields: list[str]) -> bool:
    """True if a row names the columns of an edge list (``source,target[,weight]`` and the like)."""
    names = [field.strip().lower() for field in fields]
    if len(names) == 3 and names[2] != "weight":
        return False
    return len(names) in (2, 3) and (names[0], names[1]) in HEADER_PAIRS


class _Run:
    """The good rows read since the last run was handed out (see :class:`EdgeRows`)."""

    def __init__(self, name: str, checked: dict[str, str] | None = None) -> None:
        self.name = name
        self.checked = {} if checked is None else checked  # kept from run to run
        self.pages: list[str] = []
        self.page_lines: list[int] = []
        self.sources: list[str] = []
        self.targets: list[str] = []
        self.weights: list[float] = []
        self.lines: list[int] = []

    def taken(self) -> Iterator[EdgeRows]:
        """The run so far (if it holds anything), then an empty one."""
        if self.pages or self.sources:
            yield EdgeRows(
                self.name, self.pages, self.page_lines, self.sources, self.targets, self.weights, self.lines
            )
            self.__init__(self.name, self.checked)


def _read(path: str | Path, encoding: str) -> Iterator[EdgeRows | InputError]:
    name = str(path)
    ids: dict[str, int] = {}
    edges: dict[int, int] = {}
    held: tuple[int, list[str]] | None = None  # the first row while it may still be a header
    watch: tuple[str, str] = ("", "")
    rows = 0
    run = _Run(name)
    for item in iter_rows(path, encoding, comments=True):
        if isinstance(item, InputError):
            yield from run.taken()
            yield item
            continue
        number, fields = item
        rows += 1
        if rows == 1:
            if is_known_header(fields):
                continue
            if len(fields) in (2, 3) and fields[0].strip() and fields[1].strip():
                held = item
                watch = (fields[0].strip(), fields[1].strip())
                continue
        elif held is not None and len(fields) >= 2:
            source, target = fields[0].strip(), fields[1].strip()
            if source in watch or target in watch:  # the first row's fields occur again: it is data
                yield from _edge(run, *held, ids, edges)
                held = None
        yield from _edge(run, number, fields, ids, edges)
        if len(run.sources) >= RUN_ROWS:
            yield from run.taken()
    if held is not None and rows == 1:
        yield from _edge(run, *held, ids, edges)
    yield from run.taken()


def _edge(
    run: _Run, number: int, fields: list[str], ids: dict[str, int], edges: dict[int, int]
) -> Iterator[EdgeRows | InputError]:
    """Add one row to ``run``; a bad row hands out the run so far, then its InputError."""
    name = run.name
    if len(fields) not in (2, 3):
        yield from run.taken()
        yield InputError(name, number, column_count_reason(len(fields), "2 or 3 (source,target[,weight])"))
        return
    raw_source, raw_target = fields[0], fields[1]
    checked = run.checked  # fields as given -> their ids: each distinct field is checked once
    try:
        source = checked.get(raw_source) or parse_id(raw_source, "source id")
        target = checked.get(raw_target) or parse_id(raw_target, "target id")
        weight = parse_weight(fields[2]) if len(fields) == 3 else 1.0
    except FieldError as error:
        yield from run.taken()
        yield InputError(name, number, str(error))
        return
    checked[raw_source], checked[raw_target] = source, target
    for page in (source, target):
        if page not in ids:
            ids[page] = len(ids)
            run.pages.append(page)
            run.page_lines.append(number)
    if source == target:
        yield from run.taken()
        yield InputError(name, number, f"self-link: source and target are both {source!r}")
        return
    key = ids[source] * _PACK + ids[target]
    first = edges.setdefault(key, number)
    if first != number:
        yield from run.taken()
        yield InputError(name, number, f"duplicate link {source!r} -> {target!r} (first on line {first})")
        return
    run.sources.append(source)
    run.targets.append(target)
    run.weights.append(weight)
    run.lines.append(number)

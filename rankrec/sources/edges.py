"""Reader for edge lists: ``source,target[,weight]`` rows, comma- or tab-separated.

An edge list alone defines a graph: every endpoint is a page (its title is its id).
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

from ..errors import InputError
from ._fields import FieldError, column_count_reason, iter_rows, parse_id, parse_weight
from ._text import check_encoding
from .records import LinkRecord, Origin, PageRecord

HEADER_PAIRS = frozenset({("source", "target"), ("from", "to"), ("src", "dst")})
"""Known names of the two endpoint columns (compared case-insensitively); a third is ``weight``."""

_PACK = 1 << 32  # ids are numbered densely, so (source, target) packs into one int key


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
    return _read(path, encoding)


def is_known_header(fields: list[str]) -> bool:
    """True if a row names the columns of an edge list (``source,target[,weight]`` and the like)."""
    names = [field.strip().lower() for field in fields]
    if len(names) == 3 and names[2] != "weight":
        return False
    return len(names) in (2, 3) and (names[0], names[1]) in HEADER_PAIRS


def _read(path: str | Path, encoding: str) -> Iterator[PageRecord | LinkRecord | InputError]:
    name = str(path)
    ids: dict[str, int] = {}
    edges: dict[int, int] = {}
    held: tuple[int, list[str]] | None = None  # the first row while it may still be a header
    watch: tuple[str, str] = ("", "")
    rows = 0
    for item in iter_rows(path, encoding, comments=True):
        if isinstance(item, InputError):
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
                yield from _edge(name, *held, ids, edges)
                held = None
        yield from _edge(name, number, fields, ids, edges)
    if held is not None and rows == 1:
        yield from _edge(name, *held, ids, edges)


def _edge(
    name: str, number: int, fields: list[str], ids: dict[str, int], edges: dict[int, int]
) -> Iterator[PageRecord | LinkRecord | InputError]:
    if len(fields) not in (2, 3):
        yield InputError(name, number, column_count_reason(len(fields), "2 or 3 (source,target[,weight])"))
        return
    try:
        source = parse_id(fields[0], "source id")
        target = parse_id(fields[1], "target id")
        weight = parse_weight(fields[2]) if len(fields) == 3 else 1.0
    except FieldError as error:
        yield InputError(name, number, str(error))
        return
    origin = Origin(name, number)
    for page in (source, target):
        if page not in ids:
            ids[page] = len(ids)
            yield PageRecord(page, page, origin)
    if source == target:
        yield InputError(name, number, f"self-link: source and target are both {source!r}")
        return
    key = ids[source] * _PACK + ids[target]
    first = edges.setdefault(key, number)
    if first != number:
        yield InputError(name, number, f"duplicate link {source!r} -> {target!r} (first on line {first})")
        return
    yield LinkRecord(source, target, origin, weight)

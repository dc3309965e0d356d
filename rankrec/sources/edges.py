"""Reader for edge lists: ``source,target[,weight]`` rows, comma- or tab-separated.

An edge list alone defines a graph: every endpoint is a page (its title is its id).
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import numpy as np

from ..errors import InputError
from ._fields import FieldError, column_count_reason, iter_rows, parse_id, parse_weight
from ._text import check_encoding
from .records import EdgeRows, LinkRecord, PageRecord, expanded

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
    return expanded(_read(path, encoding))


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
    """The rows read since the last run was handed out (see :class:`EdgeRows`); each link's endpoints
    packed into one key, so that repeated links are found a run at a time (:meth:`taken`)."""

    def __init__(self, name: str) -> None:
        self.name = name
        self.pages: list[str] = []
        self.page_lines: list[int] = []
        self.sources: list[str] = []
        self.targets: list[str] = []
        self.weights: list[float] = []
        self.lines: list[int] = []
        self.keys: list[int] = []

    def taken(self, seen: _SeenLinks) -> Iterator[EdgeRows | InputError]:
        """The run so far (if it holds anything), split where a row repeats a link read before (in
        this run or an earlier one), that row's InputError between; then an empty run."""
        if not (self.pages or self.sources):
            return
        keys = np.asarray(self.keys, dtype=np.int64)
        lines = np.asarray(self.lines, dtype=np.int64)
        first = seen.first_lines(keys)
        order = np.argsort(keys, kind="stable")  # a key's rows in line order
        ordered = keys[order]
        again = np.flatnonzero(ordered[1:] == ordered[:-1]) + 1
        if again.size:
            starts = np.flatnonzero(np.r_[True, ordered[1:] != ordered[:-1]])
            group_start = starts[np.searchsorted(starts, again, side="right") - 1]
            inside = first[order[again]] < 0  # repeated within the run only: first seen at the group's head
            first[order[again[inside]]] = lines[order[group_start[inside]]]
        repeated = first >= 0
        seen.add(keys[~repeated], lines[~repeated])
        page_lines = np.asarray(self.page_lines, dtype=np.int64)  # ascending: pages come in line order
        start = given = 0
        for position in np.flatnonzero(repeated).tolist():
            # a repeated link names no page first: the pages read before its line go with the part before
            upto = int(np.searchsorted(page_lines, self.lines[position]))
            yield from self._part(start, position, given, upto)
            source, target = self.sources[position], self.targets[position]
            reason = f"duplicate link {source!r} -> {target!r} (first on line {int(first[position])})"
            yield InputError(self.name, self.lines[position], reason)
            start, given = position + 1, upto
        yield from self._part(start, len(self.sources), given, len(self.pages))
        self.__init__(self.name)

    def _part(self, start: int, stop: int, first_page: int, last_page: int) -> Iterator[EdgeRows]:
        """Links ``start:stop`` and pages ``first_page:last_page`` as one run (if it holds anything)."""
        if start < stop or first_page < last_page:
            yield EdgeRows(
                self.name,
                self.pages[first_page:last_page],
                self.page_lines[first_page:last_page],
                self.sources[start:stop],
                self.targets[start:stop],
                self.weights[start:stop],
                self.lines[start:stop],
            )


class _SeenLinks:
    """Every link key handed out so far with its line, in sorted levels that merge as they grow (a
    level holds at least twice the next): 16 bytes a link, and a run is looked up in a few searches."""

    def __init__(self) -> None:
        self.levels: list[tuple[np.ndarray, np.ndarray]] = []

    def first_lines(self, keys: np.ndarray) -> np.ndarray:
        """The line each key was first read on, or -1 for a key not seen before."""
        found = np.full(keys.size, -1, dtype=np.int64)
        for level_keys, level_lines in self.levels:
            at = np.minimum(np.searchsorted(level_keys, keys), level_keys.size - 1)
            hit = level_keys[at] == keys
            found[hit] = level_lines[at[hit]]
        return found

    def add(self, keys: np.ndarray, lines: np.ndarray) -> None:
        """Remember new keys (none seen before, each once) and their lines."""
        if not keys.size:
            return
        order = np.argsort(keys)
        self.levels.append((keys[order], lines[order]))
        while len(self.levels) > 1 and self.levels[-2][0].size <= 2 * self.levels[-1][0].size:
            (upper_keys, upper_lines), (lower_keys, lower_lines) = self.levels.pop(), self.levels.pop()
            keys, lines = np.concatenate([lower_keys, upper_keys]), np.concatenate([lower_lines, upper_lines])
            order = np.argsort(keys, kind="stable")
            self.levels.append((keys[order], lines[order]))


def _read(path: str | Path, encoding: str) -> Iterator[EdgeRows | InputError]:
    name = str(path)
    numbers: dict[str, int] = {}  # page id, and each field as given (blanks and all) -> page number
    names: list[str] = []  # page number -> page id
    seen = _SeenLinks()  # every link handed out, packed (source and target numbers) -> first line
    held: tuple[int, list[str]] | None = None  # the first row while it may still be a header
    watch: tuple[str, str] = ("", "")
    rows = 0
    run = _Run(name)
    for item in iter_rows(path, encoding, comments=True):
        if isinstance(item, InputError):
            yield from run.taken(seen)
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
                yield from _checked(run, seen, _edge(run, *held, numbers, names))
                held = None
        error = _edge(run, number, fields, numbers, names)
        if error is not None:
            yield from run.taken(seen)
            yield error
        elif len(run.sources) >= RUN_ROWS:
            yield from run.taken(seen)
    if held is not None and rows == 1:
        yield from _checked(run, seen, _edge(run, *held, numbers, names))
    yield from run.taken(seen)


def _checked(run: _Run, seen: _SeenLinks, error: InputError | None) -> Iterator[EdgeRows | InputError]:
    """After a bad row: the run so far, then the row's InputError; after a good one nothing."""
    if error is not None:
        yield from run.taken(seen)
        yield error


def _edge(
    run: _Run, line: int, fields: list[str], numbers: dict[str, int], names: list[str]
) -> InputError | None:
    """Add one row to ``run`` (its endpoints first seen to ``run.pages``, even for a self-link), or
    say why it is bad; a repeated link is found when the run is handed out. One dictionary look-up per
    field once its id has been seen."""
    if len(fields) not in (2, 3):
        return InputError(run.name, line, column_count_reason(len(fields), "2 or 3 (source,target[,weight])"))
    source_number, target_number = numbers.get(fields[0]), numbers.get(fields[1])
    try:
        source = parse_id(fields[0], "source id") if source_number is None else names[source_number]
        target = parse_id(fields[1], "target id") if target_number is None else names[target_number]
        weight = parse_weight(fields[2]) if len(fields) == 3 else 1.0
    except FieldError as error:
        return InputError(run.name, line, str(error))
    if source_number is None:
        source_number = _numbered(run, line, fields[0], source, numbers, names)
    if target_number is None:
        target_number = _numbered(run, line, fields[1], target, numbers, names)
    if source_number == target_number:
        return InputError(run.name, line, f"self-link: source and target are both {source!r}")
    run.keys.append(source_number * _PACK + target_number)
    run.sources.append(source)
    run.targets.append(target)
    run.weights.append(weight)
    run.lines.append(line)
    return None


def _numbered(run: _Run, line: int, field: str, page: str, numbers: dict[str, int], names: list[str]) -> int:
    """The number of ``page`` (the checked id of ``field``), a new one (and a page of ``run``) when first
    seen; ``field`` as given maps to it too."""
    found = numbers.get(page)
    if found is None:
        found = numbers[page] = len(names)
        names.append(page)
        run.pages.append(page)
        run.page_lines.append(line)
    numbers[field] = found
    return found

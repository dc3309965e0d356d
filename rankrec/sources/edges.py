"""Reader for edge lists: ``source,target[,weight]`` rows, comma- or tab-separated.

An edge list alone defines a graph: every endpoint is a page (its title is its id).
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from itertools import repeat
from operator import itemgetter
from pathlib import Path

import numpy as np

from .._validation import ID_MAX_CHARS
from ..errors import InputError
from ._fields import FieldError, column_count_reason, parse_id, parse_weight, rows_of
from ._text import check_encoding, line_blocks
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
    """The rows read since the last run was handed out (see :class:`EdgeRows`): each link's endpoints
    by page number (``names`` gives their ids); the two packed into one key when the run is handed out,
    so that repeated links are found a run at a time (:meth:`taken`)."""

    def __init__(self, name: str, names: list[str]) -> None:
        self.name = name
        self.names = names
        self.pages: list[str] = []
        self.page_lines: list[int] = []
        self.sources: list[int] = []
        self.targets: list[int] = []
        self.weights: list[float] = []
        self.lines: list[int] = []

    def taken(self, seen: _SeenLinks) -> Iterator[EdgeRows | InputError]:
        """The run so far (if it holds anything), split where a row repeats a link read before (in
        this run or an earlier one), that row's InputError between; then an empty run."""
        if not (self.pages or self.sources):
            return
        sources = np.asarray(self.sources, dtype=np.int64)
        targets = np.asarray(self.targets, dtype=np.int64)
        keys = sources * _PACK + targets
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
            yield from self._part(sources, targets, start, position, given, upto)
            source, target = self.names[self.sources[position]], self.names[self.targets[position]]
            reason = f"duplicate link {source!r} -> {target!r} (first on line {int(first[position])})"
            yield InputError(self.name, self.lines[position], reason)
            start, given = position + 1, upto
        yield from self._part(sources, targets, start, len(self.sources), given, len(self.pages))
        self.__init__(self.name, self.names)

    def _part(self, sources, targets, start: int, stop: int, first_page: int, last_page: int):
        """Links ``start:stop`` (``sources`` and ``targets`` their page numbers) and pages
        ``first_page:last_page`` as one run (if it holds anything)."""
        if start < stop or first_page < last_page:
            yield EdgeRows(
                self.name,
                self.pages[first_page:last_page],
                self.page_lines[first_page:last_page],
                sources[start:stop],
                targets[start:stop],
                self.weights[start:stop],
                self.lines[start:stop],
                self.names,
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
    run = _Run(name, names)
    lines = _Lines(line_blocks(path, encoding))
    delimiter: list[str] = []  # the delimiter, once the first data line has decided it
    each_row = rows_of(name, lines, comments=True, chosen=delimiter)
    while True:
        if held is None and rows > 1 and delimiter == [","]:  # between blocks: a plain one read whole
            plain = _plain_fields(lines.next_block())
            if plain is not None:
                lines.skip_block()
                yield from _block_links(run, seen, *plain, numbers, names)
                continue
        item = next(each_row, None)
        if item is None:
            break
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
                if len(run.sources) >= RUN_ROWS:
                    yield from run.taken(seen)
        error = _edge(run, number, fields, numbers, names)
        if error is not None:
            yield from run.taken(seen)
            yield error
        elif len(run.sources) >= RUN_ROWS:
            yield from run.taken(seen)
    if held is not None and rows == 1:
        yield from _checked(run, seen, _edge(run, *held, numbers, names))
    yield from run.taken(seen)


class _Lines:
    """The lines of :func:`~rankrec.sources._text.line_blocks` one at a time (for the row-by-row path),
    with a look at the next whole block when every line of the current one has been handed out."""

    def __init__(self, blocks: Iterator[list]) -> None:
        self._blocks = blocks
        self._block: list = []
        self._at = 0

    def __iter__(self) -> _Lines:
        return self

    def __next__(self):
        while self._at >= len(self._block):
            self._block, self._at = next(self._blocks), 0
        self._at += 1
        return self._block[self._at - 1]

    def next_block(self) -> list | None:
        """The next block (it becomes the current one, none of it handed out), or None when lines of
        the current block are still to come or there are no more blocks."""
        if self._at < len(self._block):
            return None
        block = next(self._blocks, None)
        if block is not None:
            self._block, self._at = block, 0
        return block

    def skip_block(self) -> None:
        """Count the current block as handed out (it was read whole)."""
        self._at = len(self._block)


def _plain_fields(block: list | None) -> tuple[int, list[str], list[str], bool] | None:
    """``(first line, sources, targets, clean)`` of a block of lines that are all plain ``source,target``
    rows (one comma each; no quote, tab or ``#``; no bad line), split in C, ``clean`` when every field is
    an id as it stands (:func:`_clean`); None for any other block."""
    if not block:
        return None
    try:
        texts = list(map(itemgetter(1), block))
    except TypeError:  # an InputError among the lines
        return None
    joined = "\n".join(texts)
    if '"' in joined or "\t" in joined or "#" in joined or set(map(str.count, texts, repeat(","))) != {1}:
        return None
    flat = joined.replace("\n", ",")
    fields = flat.split(",")
    return block[0][0], fields[0::2], fields[1::2], _clean(flat, fields)


def _clean(flat: str, fields: list[str]) -> bool:
    """Whether every one of ``fields`` (``flat``: them joined by commas) is an id as it stands, judged in
    C for ASCII text: not empty, no blank at either end, no control character, not too long (what
    :func:`parse_id` checks field by field; other text is checked that way)."""
    if not flat.isascii() or min(flat) < " " or "\x7f" in flat:
        return False
    if flat[0] in ", " or flat[-1] in ", " or ",," in flat or " ," in flat or ", " in flat:
        return False
    return max(map(len, fields)) <= ID_MAX_CHARS


def _block_links(
    run: _Run,
    seen: _SeenLinks,
    first: int,
    sources: list[str],
    targets: list[str],
    clean: bool,
    numbers,
    names,
) -> Iterator[EdgeRows | InputError]:
    """The rows of a plain block (lines ``first``, ``first + 1``, ...) as :func:`_read` reads them one by
    one: the ids seen before looked up a column at a time, the others checked and numbered row by row
    (:func:`_endpoints`; in a ``clean`` block, whose fields are all ids as they stand, only numbered),
    then every row added to ``run`` in line order, each endpoint first seen with the row that brought
    it, and each bad row an InputError after the run so far."""
    count, get = len(sources), numbers.get
    # a row's source is mostly the row before's: each distinct one looked up once in the (large) map
    distinct = {field: get(field, -1) for field in dict.fromkeys(sources)}
    source_numbers = np.fromiter(map(distinct.__getitem__, sources), dtype=np.int64, count=count)
    target_numbers = np.fromiter(map(get, targets, repeat(-1, count)), dtype=np.int64, count=count)
    new_pages: list[tuple[int, str]] = []  # (line, page) of the pages first seen in the block
    errors: dict[int, InputError] = {}
    for row in np.flatnonzero((source_numbers < 0) | (target_numbers < 0)).tolist():
        fields = [sources[row], targets[row]]
        source, target = get(fields[0]), get(fields[1])
        if source is not None and target is not None and source != target:  # both seen earlier in the block
            source_numbers[row], target_numbers[row] = source, target
            continue
        if clean:  # ids as they stand: what _endpoints does, without checking them one by one
            if source is None:
                source = _new_page(fields[0], first + row, numbers, names, new_pages)
            target = get(fields[1])  # (the source, when it is the target too)
            if target is None:
                target = _new_page(fields[1], first + row, numbers, names, new_pages)
            found = _self_link(run.name, first + row, fields[0]) if source == target else (source, target)
        else:
            found = _endpoints(run.name, first + row, fields, numbers, names, new_pages)
        if isinstance(found, InputError):
            errors[row] = found
        else:
            source_numbers[row], target_numbers[row] = found[0], found[1]
    for row in np.flatnonzero(source_numbers == target_numbers).tolist():
        if row not in errors:  # a self-link of a page seen before (a bad row keeps its own error)
            errors[row] = _self_link(run.name, first + row, names[source_numbers[row]])
    block = _Block(first, source_numbers, target_numbers, new_pages)
    start = 0
    for row in sorted(errors):
        yield from block.rows(run, seen, start, row)
        block.pages_to(run, first + row)
        yield from run.taken(seen)
        yield errors[row]
        start = row + 1
    yield from block.rows(run, seen, start, count)
    block.pages_to(run, first + count)


@dataclass
class _Block:
    """A plain block's rows by page number, and the pages first seen in it, added to runs in order."""

    first: int
    sources: np.ndarray
    targets: np.ndarray
    pages: list[tuple[int, str]]
    given: int = 0  # pages already added to a run

    def pages_to(self, run: _Run, line: int) -> None:
        """Add the pages first seen on lines up to ``line`` to ``run``."""
        while self.given < len(self.pages) and self.pages[self.given][0] <= line:
            page_line, page = self.pages[self.given]
            run.pages.append(page)
            run.page_lines.append(page_line)
            self.given += 1

    def rows(self, run: _Run, seen: _SeenLinks, start: int, stop: int) -> Iterator[EdgeRows | InputError]:
        """Add rows ``start:stop`` (all good) to ``run``, handing it out whenever it holds
        :data:`RUN_ROWS` links."""
        while start < stop:
            end = min(stop, start + max(RUN_ROWS - len(run.sources), 1))
            self.pages_to(run, self.first + end - 1)
            run.sources.extend(self.sources[start:end].tolist())
            run.targets.extend(self.targets[start:end].tolist())
            run.weights.extend([1.0] * (end - start))
            run.lines.extend(range(self.first + start, self.first + end))
            start = end
            if len(run.sources) >= RUN_ROWS:
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
    say why it is bad; a repeated link is found when the run is handed out."""
    new_pages: list[tuple[int, str]] = []
    found = _endpoints(run.name, line, fields, numbers, names, new_pages)
    for page_line, page in new_pages:
        run.pages.append(page)
        run.page_lines.append(page_line)
    if isinstance(found, InputError):
        return found
    run.sources.append(found[0])
    run.targets.append(found[1])
    run.weights.append(found[2])
    run.lines.append(line)
    return None


def _endpoints(
    name: str, line: int, fields: list[str], numbers: dict[str, int], names: list[str], new_pages: list
) -> tuple[int, int, float] | InputError:
    """A row's source and target numbers and weight, or why it is bad. Its endpoints first seen (even
    for a self-link) are numbered and added to ``new_pages`` as ``(line, page)``. One dictionary
    look-up per field once its id has been seen."""
    if len(fields) not in (2, 3):
        return InputError(name, line, column_count_reason(len(fields), "2 or 3 (source,target[,weight])"))
    source_number, target_number = numbers.get(fields[0]), numbers.get(fields[1])
    try:
        source = parse_id(fields[0], "source id") if source_number is None else names[source_number]
        target = parse_id(fields[1], "target id") if target_number is None else names[target_number]
        weight = parse_weight(fields[2]) if len(fields) == 3 else 1.0
    except FieldError as error:
        return InputError(name, line, str(error))
    if source_number is None:
        source_number = _numbered(line, fields[0], source, numbers, names, new_pages)
    if target_number is None:
        target_number = _numbered(line, fields[1], target, numbers, names, new_pages)
    if source_number == target_number:
        return _self_link(name, line, source)
    return source_number, target_number, weight


def _self_link(name: str, line: int, page: str) -> InputError:
    return InputError(name, line, f"self-link: source and target are both {page!r}")


def _new_page(page: str, line: int, numbers: dict[str, int], names: list[str], new_pages: list) -> int:
    """The number of ``page``, an id first seen on ``line`` (numbered, added to ``new_pages``)."""
    number = numbers[page] = len(names)
    names.append(page)
    new_pages.append((line, page))
    return number


def _numbered(
    line: int, field: str, page: str, numbers: dict[str, int], names: list[str], new_pages: list
) -> int:
    """The number of ``page`` (the checked id of ``field``), a new one (added to ``new_pages`` with its
    line) when first seen; ``field`` as given maps to it too."""
    found = numbers.get(page)
    if found is None:
        found = _new_page(page, line, numbers, names, new_pages)
    numbers[field] = found
    return found

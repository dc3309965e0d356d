"""Parsing a folder's page files in worker processes, the results coming back in file order.

The folder readers hand :func:`parse_in_order` a module-level ``parse(context, relative, file)`` function
(so that a worker process can find it by name) and a picklable ``context``; the results are what one
process would have made, in the same order, so an import with workers writes exactly what one without
them writes. The workers only parse: nothing they do touches the store.
"""

from __future__ import annotations

import multiprocessing
from collections import deque
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import Future, ProcessPoolExecutor
from typing import Any

from .._validation import check_count
from ..errors import InputError
from ..progress import Progress, report

PARSING = "parsing files"
"""The progress step of the folder readers: ``progress("parsing files", files parsed, files)``."""

_CHUNK_FILES = 16  # files a worker parses per task (fewer round trips than one per file)
_IN_FLIGHT = 4  # tasks per worker submitted ahead of the one being read (bounds what waits in memory)


def _parse_chunk(parse: Callable, context: Any, chunk: list[tuple[str, str]]) -> list:
    return [parse(context, relative, file) for relative, file in chunk]


def parse_in_order(
    parse: Callable[[Any, str, str], Any],
    context: Any,
    entries: Iterable[tuple[str, str] | InputError],
    *,
    workers: int = 1,
    progress: Progress | None = None,
) -> Iterator[Any]:
    """``parse(context, relative, file)`` of every ``(relative, file)`` entry, InputError entries passed
    through, all in the order of ``entries``; with ``workers`` > 1 the files are parsed in that many
    processes. ``progress("parsing files", done, total)`` counts the files parsed.

    >>> list(parse_in_order(lambda context, relative, file: context + relative, "+", [("a", "a.md")]))
    ['+a']
    """
    workers = check_count("workers", workers)
    entries = list(entries)
    total = sum(not isinstance(entry, InputError) for entry in entries)
    done = 0
    report(progress, PARSING, 0, total)
    if workers == 1 or total < 2:
        for entry in entries:
            if isinstance(entry, InputError):
                yield entry
                continue
            yield parse(context, *entry)
            done += 1
            report(progress, PARSING, done, total)
        return
    chunks: list[list] = []  # runs of InputErrors, and chunks of files to parse
    for entry in entries:
        if isinstance(entry, InputError):
            chunks.append([entry])
        else:
            if not chunks or isinstance(chunks[-1][0], InputError) or len(chunks[-1]) == _CHUNK_FILES:
                chunks.append([])
            chunks[-1].append(entry)
    # spawn, not fork: the parent holds an open store connection and progress threads, which a fork
    # would copy mid-state (SQLite's own advice: never carry a connection across fork)
    context_of_pool = multiprocessing.get_context("spawn")
    with ProcessPoolExecutor(max_workers=min(workers, total), mp_context=context_of_pool) as pool:
        waiting: deque[list | Future] = deque()
        pending = iter(chunks)
        for chunk in pending:
            waiting.append(_submit(pool, parse, context, chunk))
            if len(waiting) >= _IN_FLIGHT * workers:
                break
        while waiting:
            head = waiting.popleft()
            results = head if isinstance(head, list) else head.result()
            for chunk in pending:  # keep the pool busy: one more task in for the one taken out
                waiting.append(_submit(pool, parse, context, chunk))
                break
            for result in results:
                yield result
                if not isinstance(head, list):  # a parse result (InputErrors of the walk are no files)
                    done += 1
                    report(progress, PARSING, done, total)


def _submit(pool: ProcessPoolExecutor, parse, context, chunk: list) -> list | Future:
    """A chunk of InputErrors as it is; a chunk of files as the future of their parse results."""
    if isinstance(chunk[0], InputError):
        return chunk
    return pool.submit(_parse_chunk, parse, context, chunk)

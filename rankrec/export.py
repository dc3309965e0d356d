"""Every page's related list at once into a file (:func:`export_lists`; into the pages of a Markdown wiki:
:mod:`rankrec.export_wiki`); every team's landing ordering into a file (:func:`export_landing`).

Related lists come from :func:`rankrec.recommend.related` for each page, as the service would answer a
viewer in the given access groups (none: a public viewer, who gets lists of public pages only), in
page-id order; archived pages and pages the viewer may not see get no list. Landing orderings come from
:func:`rankrec.recommend.team_from_store` and :func:`rankrec.recommend.landing`, the path of `rankrec
landing` and of the service, for every team of the store in name order; the pages are those every member
may see *and* the viewer may see, as the service filters them; a team with too few distinct active
readers gets no list and is only counted (:attr:`LandingSummary.too_few_readers`), never named by member.
A file is written beside its target and renamed over it at the end, so a failed export leaves the
previous file (or none).
"""

from __future__ import annotations

import csv
import dataclasses
import errno
import io
import json
import os
import tempfile
import time
from collections.abc import Callable, Iterator
from contextlib import closing
from dataclasses import dataclass
from pathlib import Path
from urllib.parse import quote

import numpy as np

from ._output import EXPORT_FORMATS
from ._pool import block_runner
from ._validation import check_choice, check_count
from .errors import GroupTooSmall, NoSpace, StaleIndex, UsageError
from .index import Index, IndexManifest, load_index
from .progress import Progress, report
from .recommend import Item, Reader, landing, related, team_from_store
from .recommend.candidates import fill_candidates

FORMATS = EXPORT_FORMATS
CSV_COLUMNS = ("page", "rank", "related_page", "title", "url", "score", "reason")
LANDING_CSV_COLUMNS = ("team", "rank", "page", "title", "url", "score", "reason")
_CHUNK_PAGES = 512  # pages a task lists: their candidates are scored together, and progress moves by it
_REPORT_TEAMS_EVERY = 20  # teams between progress reports


@dataclass(frozen=True)
class ExportSummary:
    """What :func:`export_lists` wrote: lists, items in all, the file and the seconds it took."""

    lists: int
    items: int
    path: str
    seconds: float


@dataclass(frozen=True)
class LandingSummary:
    """What :func:`export_landing` wrote: lists (one per team), items in all, the file, the seconds it
    took, and how many teams were left out for too few distinct active readers (fewer than ``minimum``)."""

    lists: int
    items: int
    path: str
    seconds: float
    too_few_readers: int
    minimum: int


def _viewer(groups: frozenset[str] | None, size: int) -> Reader | None:
    if not groups:
        return None
    empty = np.zeros(0, dtype=np.int64)
    return Reader(user="export", groups=frozenset(groups), restart=np.zeros(size), recent=empty)


def url_of(urls: dict[str, str], template: str | None) -> Callable[[str], str | None]:
    """Page id -> its URL: ``template`` with ``{page}`` replaced by the percent-encoded id when given,
    else the store's URL (None without one).

    >>> url_of({}, "https://wiki.example/{page}.html")("ops/db backup")
    'https://wiki.example/ops/db%20backup.html'
    """
    if template is not None:
        if "{page}" not in template:
            raise ValueError(f"a URL template must hold {{page}}; got {template!r}")
        return lambda page: template.replace("{page}", quote(page, safe="/"))
    return urls.get


def _chunk_lists(index: Index, groups, k: int, numbers: np.ndarray) -> list[tuple[str, tuple[Item, ...]]]:
    """(page id, items) of each of ``numbers``, as :func:`related` serves them; the candidates of pages
    not precomputed are scored a block at a time first (:func:`fill_candidates`), then let go again."""
    reader = _viewer(groups, index.size)
    added = fill_candidates(index, numbers)
    try:
        return [(index.pages[number], related(index, number, reader=reader, k=k).items) for number in numbers]
    finally:
        for number in added:
            index.cache.pop(number, None)


_LOADED: dict[str, Index] = {}  # a worker process's index, loaded on its first task


def _worker_index(folder: str, manifest: IndexManifest) -> Index:
    index = _LOADED.get(folder)
    if index is None:
        _LOADED.clear()
        index = _LOADED[folder] = load_index(folder)
    if index.manifest != manifest:  # rebuilt while the export ran: its lists would mix two indexes
        raise StaleIndex(expected="the index the export started from", found="an index published since")
    return index


def _worker_lists(folder: str, manifest: IndexManifest, groups, k: int, numbers: np.ndarray) -> list:
    """:func:`_chunk_lists` in a worker process, on the index loaded once per process."""
    return _chunk_lists(_worker_index(folder, manifest), groups, k, numbers)


def _listed(
    index: Index, groups, k: int, progress: Progress | None, workers: int = 1, cluster=None
) -> Iterator[tuple[str, tuple]]:
    """(page id, items) of every page the viewer may see, in page-id order, chunk by chunk (here, or in
    ``workers`` processes, or on the Dask ``cluster``, that each load the index)."""
    visible = index.visible(groups) & ~np.asarray(index.archived)
    order = np.asarray(index.page_order)
    order = order[visible[order]]
    chunks = [order[first : first + _CHUNK_PAGES] for first in range(0, order.size, _CHUNK_PAGES)]
    folder = str(index.folder)
    here = cluster is None and (workers == 1 or len(chunks) <= 1)
    done = 0
    report(progress, "related lists", 0, int(order.size))
    with block_runner(None if here else cluster, folder) as run:
        if here:
            found = (_chunk_lists(index, groups, k, chunk) for chunk in chunks)
        else:
            tasks = [(folder, index.manifest, groups, k, chunk) for chunk in chunks]
            found = run(_worker_lists, tasks, workers)
        for lists in found:
            yield from lists
            done += len(lists)
            report(progress, "related lists", done, int(order.size))


def _write_atomically(path: Path, write: Callable[[io.TextIOBase], None], *, newline: str | None) -> None:
    """Call ``write(handle)`` on a new file beside ``path`` (0600, made with its folders), then rename it
    over ``path``; if anything fails the staging file is removed and ``path`` is as it was. A folder or
    file that cannot be made raises UsageError, a full disk or quota NoSpace."""
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        descriptor, staging = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent)
    except OSError as error:
        if error.errno in (errno.ENOSPC, errno.EDQUOT):
            raise NoSpace(str(path)) from error
        where = f"{error.filename}: " if error.filename and str(error.filename) != str(path) else ""
        raise UsageError(f"cannot write {path} ({where}{error.strerror or error})") from error
    try:
        with os.fdopen(descriptor, "w", encoding="utf-8", newline=newline) as handle:
            write(handle)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(staging, path)
    except BaseException as error:
        Path(staging).unlink(missing_ok=True)
        if isinstance(error, OSError) and error.errno in (errno.ENOSPC, errno.EDQUOT):
            raise NoSpace(str(path)) from error
        raise


def _items_of(found, url: Callable[[str], str | None]) -> list[dict]:
    """Items as the file holds them: page id, title, URL (``url(page)``), score and reason."""
    return [
        {
            "page": item.page,
            "title": item.title,
            "url": url(item.page),
            "score": item.score,
            "reason": item.reason,
        }
        for item in found
    ]


def _write_lists(
    target: Path,
    lists: Iterator[tuple[str, tuple[Item, ...]]],
    *,
    format: str,
    subject: str,
    columns: tuple[str, ...],
    url: Callable[[str], str | None],
) -> tuple[int, int]:
    """Stream ``lists`` ((subject, items) pairs) into ``target`` atomically; (lists, items) written.

    ``json``: one object, subject -> items (RFC 8259); ``jsonl``: one object per line, ``subject`` and
    ``items`` (jsonlines.org); ``csv``: ``columns``, one row per item, the subject and rank first (RFC 4180).
    """
    counts = [0, 0]

    def write(handle) -> None:
        if format == "csv":
            writer = csv.writer(handle, lineterminator="\n")
            writer.writerow(columns)
        elif format == "json":
            handle.write("{")
        for name, found in lists:
            entries = _items_of(found, url)
            if format == "csv":
                for rank, item in enumerate(entries, start=1):
                    writer.writerow([name, rank, *item.values()])
            elif format == "jsonl":
                handle.write(json.dumps({subject: name, "items": entries}, ensure_ascii=False) + "\n")
            else:
                separator = "," if counts[0] else ""
                handle.write(f"{separator}\n{json.dumps(name, ensure_ascii=False)}: ")
                handle.write(json.dumps(entries, ensure_ascii=False))
            counts[0] += 1
            counts[1] += len(entries)
        if format == "json":
            handle.write("\n}\n")

    _write_atomically(target, write, newline="")
    return counts[0], counts[1]


def export_lists(
    index: Index,
    path: str | Path,
    *,
    format: str = "json",
    groups: frozenset[str] | None = None,
    k: int = 10,
    url: Callable[[str], str | None] = lambda page: None,
    progress: Progress | None = None,
    workers: int = 1,
    cluster=None,
) -> ExportSummary:
    """Write every page's related list to ``path`` (see the module docstring) and say what was written.

    ``format``: ``json`` (one object, page id -> its items), ``jsonl`` (one object per line: ``page`` and
    ``items``) or ``csv`` (:data:`CSV_COLUMNS`, one row per item). Each item has the related page's id,
    title, URL (``url(page)``, None without one), score and reason. ``workers`` processes make the
    lists (each loads the index), or the tasks of the Dask ``cluster`` (a :class:`rankrec.cluster.
    ClusterAddress`; its workers must read the index folder at the same path); the file is the same
    whatever their number.
    """
    check_choice("format", format, FORMATS)
    check_count("k", k)
    check_count("workers", workers)
    started = time.perf_counter()
    target = Path(path)
    lists, items = _write_lists(
        target,
        _listed(index, groups, k, progress, workers, cluster),
        format=format,
        subject="page",
        columns=CSV_COLUMNS,
        url=url,
    )
    return ExportSummary(lists, items, str(target), time.perf_counter() - started)


def _landing_lists(
    index: Index, store, groups, k: int, progress: Progress | None, left_out: list[int]
) -> Iterator[tuple[str, tuple[Item, ...]]]:
    """(team, items) of every team of ``store`` that `rankrec landing` answers, in name order, as the
    service answers a viewer in ``groups``; teams refused for too few readers are counted in ``left_out``."""
    audience = index.visible(groups or None)
    with store.reading():  # every team's members, views and groups from one snapshot
        names = store.names_of("team")
        for done, name in enumerate(names, start=1):
            try:
                team = team_from_store(store, index, name)
            except GroupTooSmall:
                left_out[0] += 1
            else:
                team = dataclasses.replace(team, visible=team.visible & audience)
                yield name, landing(index, team, k=k).items
            if done % _REPORT_TEAMS_EVERY == 0 or done == len(names):
                report(progress, "landing lists", done, len(names))


def export_landing(
    index: Index,
    store,
    path: str | Path,
    *,
    format: str = "json",
    groups: frozenset[str] | None = None,
    k: int = 20,
    url: Callable[[str], str | None] = lambda page: None,
    progress: Progress | None = None,
) -> LandingSummary:
    """Write every team's landing ordering to ``path`` (see the module docstring) and say what was written.

    ``store`` is the store ``index`` was built from (checked current by the caller). ``format``: ``json``
    (one object, team -> its items), ``jsonl`` (one object per line: ``team`` and ``items``) or ``csv``
    (:data:`LANDING_CSV_COLUMNS`, one row per item). Items are those of :func:`export_lists`; reasons are
    the landing reasons, which band how many of a team read a page and never name a reader.
    """
    check_choice("format", format, FORMATS)
    check_count("k", k)
    started = time.perf_counter()
    target = Path(path)
    left_out = [0]
    with closing(_landing_lists(index, store, groups, k, progress, left_out)) as landings:
        lists, items = _write_lists(
            target, landings, format=format, subject="team", columns=LANDING_CSV_COLUMNS, url=url
        )
    return LandingSummary(
        lists,
        items,
        str(target),
        time.perf_counter() - started,
        too_few_readers=left_out[0],
        minimum=index.configuration.team_min_readers,
    )


# -- into a Markdown wiki ----------------------------------------------------------------------------
__all__ = [
    "FORMATS",
    "ExportSummary",
    "LandingSummary",
    "export_landing",
    "export_lists",
    "url_of",
]

"""Every page's related list at once: into a file (:func:`export_lists`) or into the pages of a Markdown
wiki (:func:`write_into_wiki`); every team's landing ordering into a file (:func:`export_landing`).

Related lists come from :func:`rankrec.recommend.related` for each page, as the service would answer a
viewer in the given access groups (none: a public viewer, who gets lists of public pages only), in
page-id order; archived pages and pages the viewer may not see get no list. Landing orderings come from
:func:`rankrec.recommend.team_from_store` and :func:`rankrec.recommend.landing`, the path of `rankrec
landing` and of the service, for every team of the store in name order; the pages are those every member
may see *and* the viewer may see, as the service filters them; a team with too few distinct active
readers gets no list and is only counted (:attr:`LandingSummary.too_few_readers`), never named by member.
A file is written beside its target and renamed over it at the end, so a failed export leaves the
previous file (or none); a page is written the same way, one at a time, keeping its encoding,
byte-order mark, line endings and permissions.
"""

from __future__ import annotations

import csv
import dataclasses
import difflib
import errno
import hashlib
import io
import json
import os
import tempfile
import time
from collections.abc import Callable, Iterator
from contextlib import closing
from dataclasses import dataclass, field
from pathlib import Path
from urllib.parse import quote

import numpy as np

from ._pool import in_order
from ._validation import check_choice, check_count
from .blocks import line_ending, link_target, render_block, with_block
from .errors import GroupTooSmall, InputError, NoSpace, StaleIndex, UsageError
from .index import Index, IndexManifest, load_index
from .progress import Progress, report
from .recommend import Item, Reader, landing, related, team_from_store
from .recommend.candidates import fill_candidates

FORMATS = ("json", "jsonl", "csv")
CSV_COLUMNS = ("page", "rank", "related_page", "title", "url", "score", "reason")
LANDING_CSV_COLUMNS = ("team", "rank", "page", "title", "url", "score", "reason")
_CHUNK_PAGES = 512  # pages a task lists: their candidates are scored together, and progress moves by it
_REPORT_TEAMS_EVERY = 20  # teams between progress reports
_UTF8_BOM = b"\xef\xbb\xbf"


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


@dataclass(frozen=True)
class WikiSummary:
    """What :func:`write_into_wiki` did to the Markdown files of a wiki folder.

    ``changed_since_import`` lists the files whose text differs from what the store imported (left as
    they are: import and build again first); ``not_in_index`` counts files of pages the index does not
    hold; ``unreadable`` the files that could not be read (with why); ``diffs`` the unified diffs of the
    files that would change (``dry_run``) or did.
    """

    files: int
    written: int
    unchanged: int
    without_list: int
    not_in_index: int
    changed_since_import: tuple[str, ...]
    unreadable: tuple[str, ...]
    diffs: tuple[str, ...] = field(repr=False)
    dry_run: bool
    seconds: float


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
    index: Index, groups, k: int, progress: Progress | None, workers: int = 1
) -> Iterator[tuple[str, tuple]]:
    """(page id, items) of every page the viewer may see, in page-id order, chunk by chunk (here, or in
    ``workers`` processes that each load the index)."""
    visible = index.visible(groups) & ~np.asarray(index.archived)
    order = np.asarray(index.page_order)
    order = order[visible[order]]
    chunks = [order[first : first + _CHUNK_PAGES] for first in range(0, order.size, _CHUNK_PAGES)]
    if workers == 1 or len(chunks) <= 1:
        found = (_chunk_lists(index, groups, k, chunk) for chunk in chunks)
    else:
        folder = str(index.folder)
        found = in_order(
            _worker_lists, [(folder, index.manifest, groups, k, chunk) for chunk in chunks], workers
        )
    done = 0
    report(progress, "related lists", 0, int(order.size))
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
) -> ExportSummary:
    """Write every page's related list to ``path`` (see the module docstring) and say what was written.

    ``format``: ``json`` (one object, page id -> its items), ``jsonl`` (one object per line: ``page`` and
    ``items``) or ``csv`` (:data:`CSV_COLUMNS`, one row per item). Each item has the related page's id,
    title, URL (``url(page)``, None without one), score and reason. ``workers`` processes make the
    lists (each loads the index); the file is the same whatever their number.
    """
    check_choice("format", format, FORMATS)
    check_count("k", k)
    check_count("workers", workers)
    started = time.perf_counter()
    target = Path(path)
    lists, items = _write_lists(
        target,
        _listed(index, groups, k, progress, workers),
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
def _page_text_hash(relative: str, file: str, text: str, others: set[str]) -> str | None:
    """SHA-256 of the main text the Markdown reader takes from ``text`` (its block left out), as the
    store keeps it (None: no text); InputError when the page does not parse."""
    from .sources.markdown import parse_page
    from .sources.records import TEXT_BYTES, clip_utf8

    record = parse_page(relative, file, text, others)
    if isinstance(record, InputError):
        raise record
    data = clip_utf8(record.text or "", TEXT_BYTES).encode("utf-8")
    return hashlib.sha256(data).hexdigest() if data else None


def stored_page_hashes(store) -> dict[str, str]:
    """Page id -> SHA-256 of the text ``store`` imported for it (pages with text only)."""
    rows, hashes = store.page_text_hashes()
    ids, pages = store.present_pages()
    page_of = dict(zip(ids.tolist(), pages, strict=True))
    return {page_of[row]: digest for row, digest in zip(rows.tolist(), hashes, strict=True)}


def _decoded(data: bytes, encoding: str) -> tuple[bytes, str]:
    """(byte-order mark, text): a UTF-8 mark is kept apart and written back; line endings stay."""
    if data.startswith(_UTF8_BOM):
        return _UTF8_BOM, data[len(_UTF8_BOM) :].decode("utf-8")
    return b"", data.decode(encoding)


def write_into_wiki(
    index: Index,
    folder: str | Path,
    *,
    stored_hashes: dict[str, str],
    groups: frozenset[str] | None = None,
    k: int = 10,
    encoding: str = "utf-8",
    dry_run: bool = False,
    progress: Progress | None = None,
) -> WikiSummary:
    """Write each Markdown page's related block (:mod:`rankrec.blocks`) into the pages of ``folder``.

    ``stored_hashes`` maps page ids to the SHA-256 of the text the store imported for them: a page
    whose file now reads otherwise is left alone and named in ``changed_since_import``. Links go to
    other pages of the folder only (relative to the page), so every link of a block resolves.
    """
    from .sources._links import folder_pages, page_id_for_path
    from .sources._text import read_page_bytes
    from .sources.markdown import MARKDOWN_SUFFIXES

    check_count("k", k)
    started = time.perf_counter()
    files, entries = folder_pages(folder, MARKDOWN_SUFFIXES, "Markdown")
    entries = list(entries)
    pages = [entry for entry in entries if not isinstance(entry, InputError)]
    refused = [str(entry) for entry in entries if isinstance(entry, InputError)]
    others = files.others if files is not None else set()
    file_of = {page_id_for_path(relative): relative for relative, _ in pages}
    reader = _viewer(groups, index.size)
    visible = index.visible(None if reader is None else reader.groups) & ~np.asarray(index.archived)
    written = unchanged = without_list = not_in_index = 0
    changed, unreadable, diffs = [], refused, []
    report(progress, "pages", 0, len(pages))
    for first in range(0, len(pages), _CHUNK_PAGES):
        chunk = pages[first : first + _CHUNK_PAGES]
        numbers = [index.find(page_id_for_path(relative)) for relative, _ in chunk]
        listed = [number for number in numbers if number is not None and visible[number]]
        added = fill_candidates(index, listed)  # the chunk's candidates scored as one block
        for (relative, file), number in zip(chunk, numbers, strict=True):
            if number is None or not visible[number]:
                not_in_index += 1
                continue
            if Path(file).is_symlink():  # replacing it would put a file where the wiki keeps a link
                unreadable.append(f"{relative}: a symbolic link; not written")
                continue
            try:
                mark, text = _decoded(read_page_bytes(file), encoding)
                normalised = text.replace("\r\n", "\n").replace("\r", "\n")
                if _page_text_hash(relative, file, normalised, others) != stored_hashes.get(
                    page_id_for_path(relative)
                ):
                    changed.append(relative)
                    continue
            except (InputError, UnicodeDecodeError, OSError) as error:
                unreadable.append(f"{relative}: {error}")
                continue
            found = related(index, number, reader=reader, k=k).items
            items = [
                (item.title, link_target(relative, file_of[item.page]))
                for item in found
                if item.page in file_of
            ]
            if not items:
                without_list += 1
                continue
            updated = with_block(text, render_block(items, line_ending(text)))
            if updated == text:
                unchanged += 1
                continue
            diffs.append(
                "".join(
                    difflib.unified_diff(text.splitlines(True), updated.splitlines(True), relative, relative)
                )
            )
            if not dry_run:
                _replace_page(Path(file), mark + updated.encode("utf-8" if mark else encoding))
            written += 1
        for number in added:
            index.cache.pop(number, None)
        report(progress, "pages", first + len(chunk), len(pages))
    return WikiSummary(
        files=len(pages),
        written=written,
        unchanged=unchanged,
        without_list=without_list,
        not_in_index=not_in_index,
        changed_since_import=tuple(changed),
        unreadable=tuple(unreadable),
        diffs=tuple(diffs),
        dry_run=dry_run,
        seconds=time.perf_counter() - started,
    )


def _replace_page(path: Path, data: bytes) -> None:
    """Write ``data`` over ``path`` atomically, keeping its permission bits."""
    mode = path.stat().st_mode & 0o7777
    descriptor, staging = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent)
    try:
        with os.fdopen(descriptor, "wb") as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
        os.chmod(staging, mode)
        os.replace(staging, path)
    except BaseException:
        Path(staging).unlink(missing_ok=True)
        raise


__all__ = [
    "FORMATS",
    "ExportSummary",
    "LandingSummary",
    "WikiSummary",
    "export_landing",
    "export_lists",
    "stored_page_hashes",
    "url_of",
    "write_into_wiki",
]

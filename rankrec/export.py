"""Every page's related list at once: into a file (:func:`export_lists`) or into the pages of a Markdown
wiki (:func:`write_into_wiki`).

Both ask :func:`rankrec.recommend.related` for each page's list, as the service would for a viewer in the
given access groups (none: a public viewer, who gets lists of public pages only), in page-id order;
archived pages and pages the viewer may not see get no list. A file is written beside its target and
renamed over it at the end, so a failed export leaves the previous file; a page is written the same way,
one at a time, keeping its encoding, byte-order mark, line endings and permissions.
"""

from __future__ import annotations

import csv
import difflib
import hashlib
import io
import json
import os
import tempfile
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from urllib.parse import quote

import numpy as np

from ._validation import check_choice, check_count
from .blocks import line_ending, link_target, render_block, with_block
from .errors import InputError
from .index import Index
from .progress import Progress, report
from .recommend import Reader, related

FORMATS = ("json", "jsonl", "csv")
CSV_COLUMNS = ("page", "rank", "related_page", "title", "url", "score", "reason")
_REPORT_EVERY = 500  # pages between progress reports
_UTF8_BOM = b"\xef\xbb\xbf"


@dataclass(frozen=True)
class ExportSummary:
    """What :func:`export_lists` wrote: lists, items in all, the file and the seconds it took."""

    lists: int
    items: int
    path: str
    seconds: float


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


def _listed(index: Index, groups, k: int, progress: Progress | None) -> Iterator[tuple[str, list]]:
    """(page id, items) of every page the viewer may see, in page-id order."""
    reader = _viewer(groups, index.size)
    visible = index.visible(None if reader is None else reader.groups) & ~np.asarray(index.archived)
    order = np.asarray(index.page_order)
    order = order[visible[order]]
    for done, number in enumerate(order.tolist(), start=1):
        yield index.pages[number], list(related(index, number, reader=reader, k=k).items)
        if done % _REPORT_EVERY == 0 or done == order.size:
            report(progress, "related lists", done, int(order.size))


def _write_atomically(path: Path, write: Callable[[io.TextIOBase], None], *, newline: str | None) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    descriptor, staging = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent)
    try:
        with os.fdopen(descriptor, "w", encoding="utf-8", newline=newline) as handle:
            write(handle)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(staging, path)
    except BaseException:
        Path(staging).unlink(missing_ok=True)
        raise


def export_lists(
    index: Index,
    path: str | Path,
    *,
    format: str = "json",
    groups: frozenset[str] | None = None,
    k: int = 10,
    url: Callable[[str], str | None] = lambda page: None,
    progress: Progress | None = None,
) -> ExportSummary:
    """Write every page's related list to ``path`` (see the module docstring) and say what was written.

    ``format``: ``json`` (one object, page id -> its items), ``jsonl`` (one object per line: ``page`` and
    ``items``) or ``csv`` (:data:`CSV_COLUMNS`, one row per item). Each item has the related page's id,
    title, URL (``url(page)``, None without one), score and reason.
    """
    check_choice("format", format, FORMATS)
    check_count("k", k)
    started = time.perf_counter()
    counts = [0, 0]

    def items_of(found: list) -> list[dict]:
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

    def write(handle) -> None:
        lists = _listed(index, groups, k, progress)
        if format == "csv":
            writer = csv.writer(handle, lineterminator="\n")
            writer.writerow(CSV_COLUMNS)
        elif format == "json":
            handle.write("{")
        for page, found in lists:
            entries = items_of(found)
            if format == "csv":
                for rank, item in enumerate(entries, start=1):
                    writer.writerow([page, rank, *item.values()])
            elif format == "jsonl":
                handle.write(json.dumps({"page": page, "items": entries}, ensure_ascii=False) + "\n")
            else:
                separator = "," if counts[0] else ""
                handle.write(f"{separator}\n{json.dumps(page, ensure_ascii=False)}: ")
                handle.write(json.dumps(entries, ensure_ascii=False))
            counts[0] += 1
            counts[1] += len(entries)
        if format == "json":
            handle.write("\n}\n")

    target = Path(path)
    _write_atomically(target, write, newline="")
    return ExportSummary(counts[0], counts[1], str(target), time.perf_counter() - started)


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
    for done, (relative, file) in enumerate(pages, start=1):
        page = page_id_for_path(relative)
        number = index.find(page)
        if number is None or not visible[number]:
            not_in_index += 1
            continue
        if Path(file).is_symlink():  # replacing it would put a file where the wiki keeps a link
            unreadable.append(f"{relative}: a symbolic link; not written")
            continue
        try:
            mark, text = _decoded(read_page_bytes(file), encoding)
            normalised = text.replace("\r\n", "\n").replace("\r", "\n")
            if _page_text_hash(relative, file, normalised, others) != stored_hashes.get(page):
                changed.append(relative)
                continue
        except (InputError, UnicodeDecodeError, OSError) as error:
            unreadable.append(f"{relative}: {error}")
            continue
        found = related(index, number, reader=reader, k=k).items
        items = [
            (item.title, link_target(relative, file_of[item.page])) for item in found if item.page in file_of
        ]
        if not items:
            without_list += 1
            continue
        updated = with_block(text, render_block(items, line_ending(text)))
        if updated == text:
            unchanged += 1
            continue
        diffs.append(
            "".join(difflib.unified_diff(text.splitlines(True), updated.splitlines(True), relative, relative))
        )
        if not dry_run:
            _replace_page(Path(file), mark + updated.encode("utf-8" if mark else encoding))
        written += 1
        if done % _REPORT_EVERY == 0 or done == len(pages):
            report(progress, "pages", done, len(pages))
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
    "WikiSummary",
    "export_lists",
    "stored_page_hashes",
    "url_of",
    "write_into_wiki",
]

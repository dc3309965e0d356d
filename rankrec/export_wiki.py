"""Every Markdown page's related block written into the pages of a wiki folder (`rankrec export --into`).

Each list is the one :func:`rankrec.recommend.related` serves the viewer (as :mod:`rankrec.export` makes
it for files), a chunk of pages scored as one block; the block itself is :mod:`rankrec.blocks`'. A page
is written atomically, keeping its encoding, byte-order mark, line endings and permissions; a page whose
text changed since the import is left alone and named.
"""

from __future__ import annotations

import difflib
import hashlib
import os
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ._validation import check_count
from .blocks import line_ending, link_target, render_block, with_block
from .errors import InputError
from .export import _CHUNK_PAGES, _viewer
from .index import Index
from .progress import Progress, report
from .recommend import related
from .recommend.candidates import fill_candidates

_UTF8_BOM = b"\xef\xbb\xbf"


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


__all__ = ["WikiSummary", "stored_page_hashes", "write_into_wiki"]

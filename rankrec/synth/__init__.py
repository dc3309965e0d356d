"""A deterministic generator of an invented organisation's wiki, at any size.

The organisation (Tarnwick Instruments) and everything in it are made up: spaces of
heavy-tailed sizes, pages with heavy-tailed in- and out-degree (most links inside the
page's space), dangling, archived and restricted pages, teams that favour one or two
spaces, readers in teams and access groups, and a reading history of sessions that
follow links, return to favourite pages and stay within what each reader may see. The
same arguments always give byte-identical files.

Example
-------
>>> import tempfile, pathlib
>>> with tempfile.TemporaryDirectory() as tmp:
...     summary = synthesize(pathlib.Path(tmp) / "wiki", pages=40, seed=1)
...     written = sorted(p.name for p in (pathlib.Path(tmp) / "wiki").iterdir())
>>> written
['groups.csv', 'pages', 'teams.csv', 'views.csv']
>>> summary.pages, summary.layout
(40, 'markdown')
"""

from __future__ import annotations

import math
import numbers
import os
import shutil
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..progress import Progress, report
from . import _words
from ._accesslog import write_access_log
from ._markdown import write_markdown
from ._people import build_people
from ._tables import write_groups, write_links, write_pages, write_teams, write_views
from ._text import corpus as text_corpus
from ._text import wiki_text
from ._views import WINDOW_END, build_views
from ._wiki import build_wiki

__all__ = [
    "ORGANISATION",
    "WINDOW_END",
    "SynthSummary",
    "default_readers",
    "default_views_per_reader",
    "synthesize",
    "text_corpus",
]

ORGANISATION = _words.ORGANISATION
MARKDOWN_LIMIT = 20_000  # "auto" writes Markdown up to this many pages, tables above
MAX_PAGES = 50_000_000
MAX_READERS = 20_000
MAX_TEXT_WORDS = 5000  # a page's text stays well under the 64 KiB a page may keep
_LAYOUTS = ("auto", "markdown", "tables")


@dataclass(frozen=True)
class SynthSummary:
    """What :func:`synthesize` wrote. ``files`` are paths relative to ``out_dir`` (POSIX)."""

    out_dir: Path
    layout: str
    pages: int
    links: int
    dangling: int
    archived: int
    restricted: int
    pages_with_text: int  # pages.csv's text column (tables layout); Markdown pages are all text
    views: int
    readers: int
    teams: int
    groups: int
    access_log_lines: int
    window_start: int  # Unix seconds; views fall in [window_start, window_end)
    window_end: int
    files: tuple[str, ...]


def default_readers(pages: int) -> int:
    """About one reader per 50 pages, at least 40 and at most 20,000.

    >>> default_readers(300), default_readers(1_000_000)
    (40, 20000)
    """
    return int(min(MAX_READERS, max(40, pages // 50)))


def default_views_per_reader(pages: int) -> float:
    """40 views a reader up to 10,000 pages, growing slowly to 60 at a million (then capped).

    >>> default_views_per_reader(300), default_views_per_reader(1_000_000)
    (40.0, 60.0)
    """
    return float(min(80.0, max(40.0, 40.0 + 10.0 * math.log10(pages / 10_000))))


def _check_int(name: str, value, low: int, high: int | None = None) -> int:
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise TypeError(f"{name} must be an integer, got {value!r}")
    if value < low or (high is not None and value > high):
        bound = f"at least {low}" if high is None else f"between {low} and {high}"
        raise ValueError(f"{name} must be {bound}, got {value!r}")
    return int(value)


def _check_out_dir(out_dir) -> Path:
    if not isinstance(out_dir, str | os.PathLike):
        raise TypeError(f"out_dir must be a path, got {out_dir!r}")
    path = Path(out_dir)
    if path.exists():
        if not path.is_dir():
            raise ValueError(f"out_dir exists and is not a folder: {str(path)!r}")
        if any(path.iterdir()):
            raise ValueError(f"out_dir exists and is not empty: {str(path)!r}")
    return path


def _validate(out_dir, pages, seed, layout, readers, days, views_per_reader, access_log, progress, words):
    if isinstance(words, bool) or not isinstance(words, numbers.Real):
        raise TypeError(f"text_words must be a number, got {words!r}")
    if not (math.isfinite(words) and 0 <= words <= MAX_TEXT_WORDS):
        raise ValueError(f"text_words must be between 0 and {MAX_TEXT_WORDS}, got {words!r}")
    pages = _check_int("pages", pages, 10, MAX_PAGES)
    seed = _check_int("seed", seed, 0)
    if layout not in _LAYOUTS:
        raise ValueError(f"layout must be one of {', '.join(_LAYOUTS)}, got {layout!r}")
    readers = default_readers(pages) if readers is None else _check_int("readers", readers, 1, 10_000_000)
    days = _check_int("days", days, 1, 3660)
    if views_per_reader is None:
        views_per_reader = default_views_per_reader(pages)
    elif isinstance(views_per_reader, bool) or not isinstance(views_per_reader, numbers.Real):
        raise TypeError(f"views_per_reader must be a number, got {views_per_reader!r}")
    elif not (math.isfinite(views_per_reader) and 1 <= views_per_reader <= 100_000):
        raise ValueError(f"views_per_reader must be between 1 and 100000, got {views_per_reader!r}")
    if not isinstance(access_log, bool):
        raise TypeError(f"access_log must be True or False, got {access_log!r}")
    if progress is not None and not callable(progress):
        raise TypeError(f"progress must be callable or None, got {progress!r}")
    return _check_out_dir(out_dir), pages, seed, layout, readers, days, float(views_per_reader)


def synthesize(
    out_dir,
    *,
    pages: int,
    seed: int = 0,
    layout: str = "auto",
    readers: int | None = None,
    days: int = 90,
    views_per_reader: float | None = None,
    access_log: bool = False,
    text_words: float = 300,
    progress: Progress | None = None,
) -> SynthSummary:
    """Write an invented wiki of ``pages`` pages and its reading history into ``out_dir``.

    Parameters
    ----------
    out_dir : path
        Folder to create; it may exist only if empty. Files are written into a temporary
        folder beside it, which is renamed into place at the end (a crash leaves nothing).
    pages : int
        Number of pages, at least 10.
    seed : int
        Seed of ``numpy.random.default_rng``; the same arguments give byte-identical files.
    layout : {"auto", "markdown", "tables"}
        ``pages/`` Markdown folder, or ``pages.csv`` + ``links.csv``; "auto" picks Markdown
        up to 20,000 pages.
    readers : int, optional
        Number of readers; default :func:`default_readers`.
    days : int
        Length of the reading history, ending at 2026-06-30T00:00:00Z (exclusive).
    views_per_reader : float, optional
        Typical views per reader (a lognormal draw around it); default
        :func:`default_views_per_reader`.
    access_log : bool
        Also write ``access.log`` (Combined Log Format: the same views plus ~10% noise).
    text_words : float
        Tables layout: mean words of invented text a page (Poisson; 1% of pages have none), in
        ``pages.csv``'s ``text`` column; 0 writes no text column. Words come from an invented
        200,000-word vocabulary by Zipf laws, 30% of them from the page's topic (about 100 pages of
        one space share a topic): :mod:`rankrec.synth._text`. Markdown pages carry their own text.
    progress : callable, optional
        Called as ``progress(step_name, done, total)`` while working.

    Returns
    -------
    SynthSummary
    """
    out_dir, pages, seed, layout, readers, days, views_per_reader = _validate(
        out_dir, pages, seed, layout, readers, days, views_per_reader, access_log, progress, text_words
    )
    if layout == "auto":
        layout = "markdown" if pages <= MARKDOWN_LIMIT else "tables"
    # Independent streams per stage: the layout, the text or the access log never changes the data.
    streams = np.random.SeedSequence(seed).spawn(6)
    wiki_seed, people_seed, views_seed, markdown_seed, log_seed, text_seed = streams
    wiki = build_wiki(pages, np.random.default_rng(wiki_seed))
    report(progress, "pages and links", 1, 1)
    people = build_people(wiki, readers, np.random.default_rng(people_seed))
    views = build_views(
        wiki,
        people,
        days=days,
        views_per_reader=views_per_reader,
        rng=np.random.default_rng(views_seed),
        progress=progress,
    )
    out_dir.parent.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.partial-", dir=out_dir.parent))
    try:
        files = []
        with_text = wiki.size
        if layout == "markdown":
            (staging / "pages").mkdir()
            written = write_markdown(staging / "pages", wiki, np.random.default_rng(markdown_seed), progress)
            files += ["pages/" + name for name in written]
        else:
            text = None
            if text_words > 0:
                text = wiki_text(np.diff(wiki.space_start), float(text_words), text_seed)
            write_pages(staging / "pages.csv", wiki, progress, text)
            with_text = 0 if text is None else int(np.count_nonzero(text.counts))
            write_links(staging / "links.csv", wiki, progress)
            files += ["pages.csv", "links.csv"]
        write_views(staging / "views.csv", views, wiki, people, progress)
        write_teams(staging / "teams.csv", people)
        write_groups(staging / "groups.csv", people, wiki)
        files += ["views.csv", "teams.csv", "groups.csv"]
        log_lines = 0
        if access_log:
            log_lines = write_access_log(
                staging / "access.log",
                views,
                wiki,
                people,
                days=days,
                rng=np.random.default_rng(log_seed),
                progress=progress,
            )
            files.append("access.log")
        staging.chmod(0o755)  # mkdtemp makes it private
        os.replace(staging, out_dir)  # atomic; replaces out_dir only if it is an empty folder
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise
    return SynthSummary(
        out_dir=out_dir,
        layout=layout,
        pages=wiki.size,
        links=wiki.links,
        dangling=int((wiki.out_degree == 0).sum()),
        archived=int(wiki.archived.sum()),
        restricted=int((wiki.group >= 0).sum()),
        pages_with_text=with_text,
        views=views.size,
        readers=people.size,
        teams=len(people.team_names),
        groups=len(wiki.group_names),
        access_log_lines=log_lines,
        window_start=WINDOW_END - days * 86400,
        window_end=WINDOW_END,
        files=tuple(sorted(files)),
    )

"""CSV writers for pages, links, views and memberships, formatted in large numpy chunks.

No field needs quoting: ids, titles, tags, names, timestamps and the invented page text hold no
comma, quote or line break (the word lists guarantee it), so each row is its fields joined by
commas, which RFC 4180 allows unquoted.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from pathlib import Path

import numpy as np

from ._people import People
from ._text import WikiText
from ._views import Views
from ._wiki import Wiki

CHUNK = 1 << 19
TEXT_CHUNK = 1 << 14  # pages with text a chunk: about 35 MB of text


def join_fields(*fields: np.ndarray | bytes) -> np.ndarray:
    """Rows of ``S`` fields separated by commas, each ending in a newline."""
    row = fields[0]
    for field in fields[1:]:
        row = np.strings.add(np.strings.add(row, b","), field)
    return np.strings.add(row, b"\n")


def write_rows(
    path: Path, header: str, total: int, make: Callable[[slice], np.ndarray], step: str, progress=None
) -> int:
    """Write ``header`` then ``make(chunk)`` for consecutive slices of ``range(total)``."""
    with open(path, "wb") as out:
        out.write(header.encode() + b"\n")
        for start in range(0, total, CHUNK):
            rows = make(slice(start, min(total, start + CHUNK)))
            out.write(b"".join(rows.tolist()))
            if progress is not None:
                progress(step, min(total, start + CHUNK), total)
    return total


def iso_times(seconds: np.ndarray) -> np.ndarray:
    """``2026-05-03T09:15:00Z`` for each Unix second, as ``S`` bytes."""
    text = np.datetime_as_string(seconds.astype("datetime64[s]"), unit="s").astype("S")
    return np.strings.add(text, b"Z")


def write_pages(path: Path, wiki: Wiki, progress=None, text: WikiText | None = None) -> int:
    """``pages.csv``; with ``text``, a last column ``text`` holds each page's invented text."""
    spaces = np.array([name.encode() for name in wiki.space_names], dtype="S")
    groups = np.array([b""] + [name.encode() for name in wiki.group_names], dtype="S")
    flags = np.array([b"false", b"true"], dtype="S")

    def make(part: slice) -> np.ndarray:
        return join_fields(
            wiki.ids[part],
            wiki.titles[part],
            spaces[wiki.space[part]],
            wiki.tags[part],
            groups[wiki.group[part] + 1],
            flags[wiki.archived[part].astype(np.int8)],
        )

    header = "id,title,space,tags,groups,archived"
    if text is None:
        return write_rows(path, header, wiki.size, make, "pages", progress)
    with open(path, "wb") as out:
        out.write(header.encode() + b",text\n")
        for number, start in enumerate(range(0, wiki.size, TEXT_CHUNK)):
            part = slice(start, min(wiki.size, start + TEXT_CHUNK))
            out.write(_with_text(make(part), *text.chunk(number, part)))
            if progress is not None:
                progress("pages", part.stop, wiki.size)
    return wiki.size


def _with_text(rows: np.ndarray, text: np.ndarray, lengths: np.ndarray) -> memoryview:
    """Rows (``S``, each ending in a line break) with ``,`` and their page's text (bytes ending in a line
    break, ``lengths`` each) in place of their line break: one buffer, written as it is."""
    grid = rows.view(np.uint8).reshape(rows.size, -1)
    grid[np.arange(rows.size), np.strings.str_len(rows) - 1] = ord(",")
    fields = grid[grid != 0]
    fields_per_row = np.strings.str_len(rows)
    from_text = np.repeat(np.tile(np.array([False, True]), rows.size), np.c_[fields_per_row, lengths].ravel())
    out = np.empty(from_text.size, dtype=np.uint8)
    out[~from_text] = fields
    out[from_text] = text
    return memoryview(out)


def write_links(path: Path, wiki: Wiki, progress=None) -> int:
    def make(part: slice) -> np.ndarray:
        index = np.arange(part.start, part.stop)
        source = np.searchsorted(wiki.indptr, index, side="right") - 1
        return join_fields(wiki.ids[source], wiki.ids[wiki.targets[part]])

    return write_rows(path, "source,target", wiki.links, make, "links", progress)


def write_views(path: Path, views: Views, wiki: Wiki, people: People, progress=None) -> int:
    def make(part: slice) -> np.ndarray:
        dwell = views.dwell[part]
        shown = np.where(dwell >= 0, np.maximum(dwell, 0).astype("S"), b"")
        return join_fields(
            people.user_ids[views.reader[part]],
            wiki.ids[views.page[part]],
            iso_times(views.time[part]),
            shown,
        )

    return write_rows(path, "user,page,timestamp,dwell", views.size, make, "views", progress)


def _membership_rows(people: People, wiki: Wiki) -> Iterator[tuple[np.ndarray, np.ndarray]]:
    for bit, name in enumerate(wiki.group_names):
        members = np.flatnonzero(people.group_mask & np.uint8(1 << bit))
        yield members, np.full(len(members), name.encode())


def write_teams(path: Path, people: People) -> int:
    teams = np.array([name.encode() for name in people.team_names], dtype="S")
    return write_rows(
        path,
        "user,team",
        people.size,
        lambda part: join_fields(people.user_ids[part], teams[people.team[part]]),
        "teams",
    )


def write_groups(path: Path, people: People, wiki: Wiki) -> int:
    pairs = list(_membership_rows(people, wiki))
    reader = np.concatenate([p[0] for p in pairs]) if pairs else np.zeros(0, dtype=np.int64)
    name = np.concatenate([p[1] for p in pairs]) if pairs else np.zeros(0, dtype="S1")
    order = np.argsort(reader, kind="stable")
    reader, name = reader[order], name[order]
    return write_rows(
        path,
        "user,group",
        len(reader),
        lambda part: join_fields(people.user_ids[reader[part]], name[part]),
        "groups",
    )

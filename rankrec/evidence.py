"""What a build reads from a store, in one snapshot: :class:`Evidence` and :func:`read_evidence`.

The link graph (with where each link sits, for judging page chrome), the page table, access groups, page
text, reading history, teams and topics, in the graph's dense page numbering. Offline evaluation makes the
same object from a split's training part (:meth:`Evidence.with_views`, :meth:`Evidence.with_links`).

Page text is the one part not held in memory: a wiki's text can be larger than the machine's memory
would hold as Python strings (a million pages of 300 words are 2 GB of text, 3 GB as strings), and only
the text neighbours read it. So ``Evidence.headings`` and ``Evidence.bodies`` of a store on disk are
:class:`StoredText` sequences, which read the text from the store page after page each time they are
iterated, and refuse to once the store has had an import since the evidence was read (the text may
have changed: read the evidence again).
"""

from __future__ import annotations

import hashlib
import itertools
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import scipy.sparse as sp

from .errors import InputError
from .graph import LinkPlaces, WikiGraph, dense_numbers, load_graph
from .graph import fingerprint as graph_fingerprint
from .profiles import ViewLog
from .store import Store
from .text import text_neighbours
from .topics import store_topics, text_topics


@dataclass(frozen=True, eq=False)
class StoredText(Sequence):
    """One text field of every page (``"text"`` or ``"headings"``), in dense page order, read from the store
    each time it is iterated (``""`` for a page without text); ``len`` is the number of pages.

    ``row_ids`` are the graph's (page i's store row id); ``store_import`` the store's latest import when the
    evidence was read: iterating refuses (InputError) once the store has had another. ``pages_with_text``
    counts the pages with text (from the same snapshot).
    """

    store: str
    store_import: int | None
    row_ids: np.ndarray
    field: str
    pages_with_text: int
    batch: int = 2000

    def __len__(self) -> int:
        return int(self.row_ids.size)

    @contextmanager
    def _reading(self) -> Iterator[Store]:
        """The store, open in one snapshot, after checking it has had no import since the evidence's."""
        with Store(self.store, create=False) as store, store.reading():
            now = store.latest_import()
            if now != self.store_import:
                raise InputError(
                    self.store,
                    None,
                    f"the store has had an import since its evidence was read (import {self.store_import} "
                    f"then, {now} now): read it again",
                )
            yield store

    def __iter__(self) -> Iterator[str]:
        with self._reading() as store:
            position = 0
            for rows, values in store.page_text_batches(self.field, batch=self.batch):
                for number, value in zip(dense_numbers(self.row_ids, rows).tolist(), values, strict=True):
                    if number >= position:  # a row outside the graph is -1
                        yield from itertools.repeat("", number - position)
                        yield value
                        position = number + 1
            yield from itertools.repeat("", len(self) - position)

    def __getitem__(self, index):
        wanted = np.arange(len(self))[index]  # IndexError and slices as a list's
        with self._reading() as store:
            rows, headings, bodies = store.page_texts_by_row(self.row_ids[np.atleast_1d(wanted)].tolist())
        found = dict(zip(rows.tolist(), bodies if self.field == "text" else headings, strict=True))
        values = [found.get(row, "") for row in self.row_ids[np.atleast_1d(wanted)].tolist()]
        return values if isinstance(index, slice) else values[0]


@dataclass(frozen=True, eq=False)
class Evidence:
    """Everything a build reads from a store (see :func:`read_evidence`)."""

    graph: WikiGraph
    titles: list[str]
    space_names: list[str]
    space_codes: np.ndarray
    archived: np.ndarray
    group_incidence: sp.csr_array
    group_names: list[str]
    views: ViewLog
    teams: dict[str, np.ndarray]
    reader_groups: dict[int, frozenset[str]]
    topics: dict[str, np.ndarray]
    topic_kind: str
    store: str
    store_import: int | None = None
    places: LinkPlaces | None = None
    headings: Sequence[str] | None = None  # a list, or StoredText for a store on disk
    bodies: Sequence[str] | None = None
    notes: tuple[str, ...] = field(default=())
    tag_incidence: sp.csr_array | None = None  # pages × tags (int8), None when no page has a tag
    tag_names: list[str] = field(default_factory=list)
    code_share: np.ndarray | None = None  # each page's share of text in code blocks (None: not measured)
    # text neighbours by title weight: the text does not change with the views or links a split keeps,
    # so the copies made by with_views/with_links share them (an evaluation builds many indexes)
    _text: dict = field(default_factory=dict, repr=False, compare=False)

    @property
    def size(self) -> int:
        return self.graph.size

    @classmethod
    def from_links(cls, adjacency, views: ViewLog | None = None) -> Evidence:
        """A wiki known only by its link matrix (pages ``p0, p1, ...``, no spaces, groups or teams)."""
        adjacency = sp.csr_matrix(adjacency, dtype=np.float64)
        adjacency.sum_duplicates()
        adjacency.sort_indices()
        size = adjacency.shape[0]
        pages = np.array([f"p{number}" for number in range(size)], dtype=object)
        graph = WikiGraph(
            pages,
            adjacency,
            np.arange(1, size + 1, dtype=np.int64),
            fingerprint=graph_fingerprint(pages, adjacency),
        )
        empty = np.zeros(0, dtype=np.int64)
        return cls(
            graph=graph,
            titles=pages.tolist(),
            space_names=[],
            space_codes=np.full(size, -1, dtype=np.int32),
            archived=np.zeros(size, dtype=bool),
            group_incidence=sp.csr_array((size, 0), dtype=np.int8),
            group_names=[],
            views=views if views is not None else ViewLog(empty, empty, empty),
            teams={},
            reader_groups={},
            topics={},
            topic_kind="none",
            store=":memory:",
        )

    def with_views(self, views: ViewLog) -> Evidence:
        """The same wiki with another reading history (for example a split's training part)."""
        return replace(self, views=views)

    def with_links(self, links) -> Evidence:
        """The same wiki with only the links ``links`` holds (a held-out-links split hides some from every
        input: the link matrix and the link places chrome is judged from)."""
        adjacency = sp.csr_matrix(links, dtype=np.float64)
        adjacency.sum_duplicates()
        adjacency.sort_indices()
        graph = WikiGraph(
            self.graph.pages,
            adjacency,
            self.graph.row_ids,
            fingerprint=graph_fingerprint(self.graph.pages, adjacency),
        )
        places = None if self.places is None else self.places.keeping(adjacency)
        return replace(self, graph=graph, places=places)

    @property
    def has_text(self) -> bool:
        return self.bodies is not None

    @property
    def pages_with_text(self) -> int:
        """How many pages have text (without reading it, for text read from a store)."""
        if self.bodies is None:
            return 0
        if isinstance(self.bodies, StoredText):
            return self.bodies.pages_with_text
        return sum(map(bool, self.bodies))

    def text_digest(self, title_weight: float) -> str | None:
        """SHA-256 (hex) of everything :meth:`text_neighbours` reads: the pages in order, each page's
        headings and the SHA-256 of its text (the store keeps it: the text is not read), the title
        weight and the text method's version; None without text. Equal digests, equal neighbours."""
        if self.bodies is None:
            return None
        from . import __version__
        from .text import FORMAT_VERSION, METHOD_VERSION

        head = f"rankrec {__version__} text {FORMAT_VERSION}.{METHOD_VERSION} title weight {title_weight!r}"
        digest = hashlib.sha256(f"{head} pages {self.size}\0".encode())
        if isinstance(self.bodies, StoredText):
            shas = replace(self.bodies, field="sha256")
        else:
            shas = (hashlib.sha256(body.encode("utf-8")).hexdigest() if body else "" for body in self.bodies)
        for page, headings, sha in zip(self.graph.pages.tolist(), self.headings, shas, strict=True):
            digest.update(f"{page}\0{headings}\0{sha}\0".encode("utf-8", "surrogatepass"))
        return digest.hexdigest()

    def text_neighbours(self, title_weight: float, progress=None, workers: int = 1):
        """The pages' text neighbours (:func:`rankrec.text.text_neighbours`), once per title weight
        (``workers``: its processes and threads, which do not change the result)."""
        found = self._text.get(title_weight)
        if found is None:
            found = self._text[title_weight] = text_neighbours(
                self.headings, self.bodies, title_weight=title_weight, workers=workers, progress=progress
            )
        return found


def _group_tables(size: int, pages: np.ndarray, names: list[str]) -> tuple[sp.csr_array, list[str]]:
    """Pages × groups incidence (CSR, int8) from dense page numbers and group names side by side."""
    unique = sorted(set(names))
    code = {name: position for position, name in enumerate(unique)}
    groups = np.fromiter((code[name] for name in names), dtype=np.int64, count=len(names))
    keep = pages >= 0
    incidence = sp.csr_array(
        (np.ones(int(keep.sum()), dtype=np.int8), (pages[keep], groups[keep])), shape=(size, len(unique))
    )
    incidence.sum_duplicates()
    return incidence, unique


def _topics(store: Store, graph: WikiGraph, topics: str) -> dict[str, np.ndarray]:
    if topics in ("spaces", "tags"):
        return store_topics(store, graph, topics)
    if topics == "none":
        return {}
    if topics.startswith("text:") and topics[5:].isdigit() and int(topics[5:]) > 0:
        return text_topics(store, graph, int(topics[5:]))
    raise ValueError(f"topics must be 'spaces', 'tags', 'none' or 'text:K' (K > 0); got {topics!r}")


def read_evidence(store: Store, *, topics: str = "spaces") -> Evidence:
    """Read what a build needs from ``store`` in one snapshot (views arriving meanwhile wait for the next)."""
    with store.reading():
        graph = load_graph(store)
        if graph.size < 2:
            raise InputError(store.path, None, "the wiki store holds fewer than two pages; import some first")
        rows = store.page_table()
        titles = [row[0] or page for row, page in zip(rows, graph.pages.tolist(), strict=True)]
        space_names = sorted({row[1] for row in rows if row[1] is not None})
        space_code = {name: position for position, name in enumerate(space_names)}
        space_codes = np.fromiter(
            (space_code.get(row[1], -1) for row in rows), dtype=np.int32, count=len(rows)
        )
        archived = np.fromiter((bool(row[2]) for row in rows), dtype=bool, count=len(rows))
        code_share = store.code_shares()
        pairs = store.page_group_pairs()
        grouped = dense_numbers(graph.row_ids, np.array([row[0] for row in pairs], dtype=np.int64))
        incidence, group_names = _group_tables(graph.size, grouped, [row[1] for row in pairs])
        tag_pairs = store.page_tag_pairs()
        tagged = dense_numbers(graph.row_ids, np.array([row[0] for row in tag_pairs], dtype=np.int64))
        tag_incidence, tag_names = _group_tables(graph.size, tagged, [row[1] for row in tag_pairs])
        users, viewed, times = store.view_arrays()
        teams: dict[str, list[int]] = {}
        for user, name in store.memberships("team"):
            teams.setdefault(name, []).append(int(user))
        groups: dict[int, set[str]] = {}
        for user, name in store.memberships("group"):
            groups.setdefault(int(user), set()).add(name)
        topic_sets = _topics(store, graph, topics)
        store_import = store.latest_import()
        places = _places(store, graph)
        headings, bodies = _texts(store, graph, store_import)
    return Evidence(
        graph=graph,
        titles=titles,
        space_names=space_names,
        space_codes=space_codes,
        archived=archived,
        group_incidence=incidence,
        group_names=group_names,
        views=ViewLog(users, dense_numbers(graph.row_ids, viewed), times),
        teams={name: np.array(sorted(members), dtype=np.int64) for name, members in sorted(teams.items())},
        reader_groups={user: frozenset(names) for user, names in groups.items()},
        topics=topic_sets,
        topic_kind=topics,
        store=str(Path(store.path).resolve()) if store.path != ":memory:" else ":memory:",
        store_import=store_import,
        places=places,
        headings=headings,
        bodies=bodies,
        tag_incidence=tag_incidence if tag_names else None,
        tag_names=tag_names,
        code_share=code_share if code_share.any() else None,
    )


def _places(store: Store, graph: WikiGraph) -> LinkPlaces | None:
    sources, targets, places, counts, names = store.link_place_arrays()
    if sources.size == 0:
        return None
    rows, columns = dense_numbers(graph.row_ids, sources), dense_numbers(graph.row_ids, targets)
    keep = (rows >= 0) & (columns >= 0)
    return LinkPlaces(rows[keep], columns[keep], places[keep], counts[keep], names)


def _texts(store: Store, graph: WikiGraph, store_import: int | None):
    """Headings and bodies of every page: :class:`StoredText` for a store on disk, else lists (None
    for a store without text)."""
    pages_with_text = store.text_counts()[0]
    if pages_with_text == 0:
        return None, None
    if store.path != ":memory:":
        path = str(Path(store.path).resolve())
        return tuple(
            StoredText(path, store_import, graph.row_ids, name, pages_with_text)
            for name in ("headings", "text")
        )
    rows, headings, texts = store.page_texts_by_row()
    numbers = dense_numbers(graph.row_ids, rows)
    all_headings, all_bodies = [""] * graph.size, [""] * graph.size
    for number, heading, text in zip(numbers.tolist(), headings, texts, strict=True):
        if number >= 0:
            all_headings[number], all_bodies[number] = heading, text
    return all_headings, all_bodies

"""Building an index: the evidence a store holds and one :class:`~rankrec.configuration.Configuration` in,
a published index folder out.

The build reads the store once (:func:`read_evidence`, one snapshot) into :class:`Evidence`: the link
graph, the page table and the reading history in the graph's page numbering. Offline evaluation makes
the same object from the training part of a split (:meth:`Evidence.with_views`) and builds with the
same :func:`build_from_evidence`, so what is evaluated is what is served. The steps:

1. the transition: the link matrix, each page's row blended with the moves readers made from it
   (share ``navigation_weight``; views within ``navigation_window_days`` of the latest one, moves are
   consecutive views of one reader at most ``session_gap_seconds`` apart);
2. global PageRank; 3. the basis (topic and hub vectors); 4. team vectors (teams with at least
   ``team_min_readers`` distinct active readers); 5. every chosen page's related candidates
   (:mod:`rankrec.recommend.candidates`); 6. the files (:mod:`rankrec.index`), published atomically.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import scipy.sparse as sp

from ._atomic import publish_folder
from ._validation import check_choice, check_count, check_fraction
from .basis import build_basis, save_basis
from .configuration import Configuration
from .errors import GroupTooSmall, InputError
from .graph import WikiGraph, blend_navigation, dense_numbers, load_graph, navigation_counts
from .graph import fingerprint as graph_fingerprint
from .index import IndexManifest, write_tables
from .pagerank import personalised_pagerank, prepare
from .profiles import SECONDS_PER_DAY, ViewLog, reader_profiles, team_restart
from .progress import Progress, report
from .recommend.candidates import DEFAULT_K_RELATED, write_related
from .store import Store
from .topics import store_topics, text_topics

EXACT_LIMIT = 5_000  # method "auto": block power iteration up to this many pages, push above


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
    notes: tuple[str, ...] = field(default=())

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
        pairs = store.page_group_pairs()
        grouped = dense_numbers(graph.row_ids, np.array([row[0] for row in pairs], dtype=np.int64))
        incidence, group_names = _group_tables(graph.size, grouped, [row[1] for row in pairs])
        users, viewed, times = store.view_arrays()
        teams: dict[str, list[int]] = {}
        for user, name in store.memberships("team"):
            teams.setdefault(name, []).append(int(user))
        groups: dict[int, set[str]] = {}
        for user, name in store.memberships("group"):
            groups.setdefault(int(user), set()).add(name)
        topic_sets = _topics(store, graph, topics)
        store_import = store.latest_import()
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
    )


def navigation_matrix(evidence: Evidence, configuration: Configuration) -> tuple[sp.csr_matrix, dict]:
    """The link matrix blended with observed navigation (see the module docstring), and what it counted."""
    links = evidence.graph.adjacency
    views = evidence.views
    if configuration.navigation_weight == 0 or views.times.size == 0:
        return links, {"weight": configuration.navigation_weight, "moves": 0, "pages_with_moves": 0}
    keep = np.ones(views.times.size, dtype=bool)
    if configuration.navigation_window_days is not None:
        keep = views.times >= views.latest - configuration.navigation_window_days * SECONDS_PER_DAY
    counts = navigation_counts(
        views.users[keep],
        views.pages[keep],
        views.times[keep],
        evidence.size,
        gap=configuration.session_gap_seconds,
    )
    blended = blend_navigation(links, counts, configuration.navigation_weight)
    summary = {
        "weight": configuration.navigation_weight,
        "moves": int(counts.sum()),
        "pages_with_moves": int(np.count_nonzero(np.diff(counts.indptr))),
    }
    return blended, summary


def _team_vectors(evidence, transition, configuration, workers) -> tuple[list[str], np.ndarray]:
    """Personalised PageRank (float32, rows) of every team with enough distinct active readers."""
    names, restarts = [], []
    if evidence.teams and evidence.views.times.size:
        profiles, codes = reader_profiles(
            evidence.views, evidence.size, configuration, now=evidence.views.latest
        )
        for name, members in evidence.teams.items():
            rows = dense_numbers(codes, members)
            try:
                restart = team_restart(
                    profiles, rows[rows >= 0], min_readers=configuration.team_min_readers, team=name
                )
            except GroupTooSmall:
                continue
            names.append(name)
            restarts.append(restart)
    vectors = np.zeros((len(names), evidence.size), dtype=np.float32)
    for first in range(0, len(names), 32):
        block = np.column_stack(restarts[first : first + 32])
        result = personalised_pagerank(
            transition,
            block,
            damping=configuration.damping,
            tol=configuration.tol,
            workers=workers,
            dtype=np.float32 if configuration.tol >= 1e-7 else np.float64,
        )
        vectors[first : first + block.shape[1]] = result.vectors.T
    return names, vectors


def precomputed_pages(views: np.ndarray, view_share: float | None) -> np.ndarray:
    """Every page (None), or the most-viewed pages that together carry ``view_share`` of the views."""
    if view_share is None or views.sum() == 0:
        return np.arange(views.size)
    order = np.lexsort((np.arange(views.size), -views))
    carried = np.cumsum(views[order]) / views.sum()
    chosen = int(np.searchsorted(carried, view_share - 1e-12)) + 1
    return np.sort(order[: min(chosen, int(np.count_nonzero(views)))])


def build_from_evidence(
    evidence: Evidence,
    target: str | Path,
    configuration: Configuration | None = None,
    *,
    hubs: int = 64,
    k_related: int = DEFAULT_K_RELATED,
    view_share: float | None = None,
    related_pages: np.ndarray | None = None,
    method: str = "auto",
    workers: int = 1,
    settings_source: dict | None = None,
    progress: Progress | None = None,
) -> Path:
    """Compute every part of an index from ``evidence`` with ``configuration`` (None: the defaults);
    publish it at ``target``.

    Parameters
    ----------
    hubs : int
        Hub columns of the basis: the most-viewed pages (ties: higher global PageRank). 0 for none.
    k_related : int
        Candidates kept per precomputed page.
    view_share : float in (0, 1] or None
        None precomputes every page; a share precomputes only the most-viewed pages carrying that
        share of all views (the rest are computed on first request).
    related_pages : int array, optional
        Precompute exactly these pages instead (an evaluation asks for the pages its queries start from:
        their lists are those of a full build).
    method : {"auto", "power", "push"}
        Related candidates by block power iteration (exact to ``tol``) or by forward push
        (``related_epsilon``); "auto" uses the power iteration up to 5,000 pages. First requests for a
        page that was not precomputed use the same method.
    workers : int
        Threads of the power iterations, processes of the push.
    settings_source : dict, optional
        Where the configuration came from (recorded in the manifest).
    progress : callable, optional
        ``progress(step, done, total)``.

    Returns the real folder behind ``target``.
    """
    check_count("hubs", hubs, minimum=0)
    check_count("k_related", k_related)
    check_count("workers", workers)
    if view_share is not None:
        check_fraction("view_share", view_share, open_low=True)
    check_choice("method", method, ("auto", "power", "push"))
    if configuration is None:
        configuration, settings_source = Configuration(), {"kind": "defaults"}
    if not isinstance(configuration, Configuration):
        raise TypeError(f"configuration must be a Configuration, not {type(configuration).__name__}")
    size = evidence.size
    damping, tol = configuration.damping, configuration.tol
    seconds: dict[str, float] = {}
    started = time.perf_counter()
    adjacency, navigation = navigation_matrix(evidence, configuration)
    transition = prepare(adjacency)
    seconds["graph"] = time.perf_counter() - started
    report(progress, "graph", 1, 1)

    started = time.perf_counter()
    global_vector = personalised_pagerank(transition, damping=damping, tol=min(tol, 1e-8), workers=workers)
    seconds["global"] = time.perf_counter() - started
    report(progress, "global PageRank", 1, 1)

    started = time.perf_counter()
    views = evidence.views.counts(size)
    ranked = np.lexsort((np.arange(size), -global_vector.vectors, -views))
    hub_pages = ranked[: min(hubs, size)] if hubs else np.zeros(0, dtype=np.int64)
    basis = None
    if evidence.topics or hub_pages.size:
        basis = build_basis(
            evidence.graph,
            transition,
            evidence.topics,
            hub_pages,
            damping=damping,
            tol=tol,
            workers=workers,
            progress=progress,
        )
    seconds["basis"] = time.perf_counter() - started

    started = time.perf_counter()
    team_names, team_vectors = _team_vectors(evidence, transition, configuration, workers)
    seconds["teams"] = time.perf_counter() - started
    report(progress, "team vectors", 1, 1)

    if related_pages is not None:
        chosen = np.unique(np.asarray(related_pages, dtype=np.int64))
        if chosen.size and (chosen[0] < 0 or chosen[-1] >= size):
            raise ValueError(f"related_pages must be page numbers in [0, {size}); got {chosen[[0, -1]]!r}")
    else:
        chosen = precomputed_pages(views, view_share)
    if method == "auto":
        method = "power" if size <= EXACT_LIMIT else "push"

    def write(staging: Path) -> None:
        write_tables(staging, evidence, transition, global_vector.vectors, views, team_names, team_vectors)
        if basis is not None:
            save_basis(basis, staging / "basis")
        begun = time.perf_counter()
        write_related(staging, chosen, method, configuration, k_related, workers, progress)
        seconds["related"] = time.perf_counter() - begun
        manifest = IndexManifest(
            fingerprint=evidence.graph.fingerprint,
            configuration=configuration.to_dict(),
            settings_source=settings_source or {"kind": "defaults"},
            k_related=k_related,
            topics=evidence.topic_kind,
            navigation=navigation,
            counts={
                "pages": size,
                "links": int(evidence.graph.adjacency.nnz),
                "archived": int(evidence.archived.sum()),
                "restricted": int(np.count_nonzero(np.diff(evidence.group_incidence.indptr))),
                "groups": len(evidence.group_names),
                "spaces": len(evidence.space_names),
                "topics": len(evidence.topics),
                "teams": len(team_names),
                "hubs": int(hub_pages.size),
                "precomputed": int(chosen.size),
                "views": int(views.sum()),
            },
            store=evidence.store,
            store_import=evidence.store_import,
            precompute={
                "method": method,
                "view_share": view_share,
                "pages": "chosen"
                if related_pages is not None
                else ("all" if view_share is None else "most viewed"),
            },
            seconds={key: round(value, 3) for key, value in seconds.items()},
        )
        manifest.write(staging)

    return publish_folder(Path(target), write)


def build_index(
    store: Store,
    target: str | Path,
    configuration: Configuration | None = None,
    *,
    topics: str = "spaces",
    **options,
) -> Path:
    """Read ``store`` (:func:`read_evidence`) and build from it (:func:`build_from_evidence`, ``options``)."""
    return build_from_evidence(read_evidence(store, topics=topics), target, configuration, **options)

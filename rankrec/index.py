"""The published index: one folder with everything needed to answer related, personal and landing lists.

``build_index`` writes, into a staging folder beside the target, then publishes by one atomic
symlink swap (:func:`rankrec._atomic.publish_folder`; a failed or interrupted build leaves the
previous index as it was):

- ``manifest.json``: format version, graph fingerprint, damping, tolerance, lift exponent,
  created time, counts, library versions, the store it was built from, what was precomputed;
- the page table: ``pages.*`` and ``titles.*`` (UTF-8 blob + offsets), ``page_order.npy``
  (pages sorted, for lookups), ``row_ids.npy``, ``archived.npy``, ``space.npy`` (codes),
  ``page_groups.*`` and ``group_pages.*`` (access groups both ways, CSR);
- the transition ``forward.*`` (``P``) and ``backward.*`` (``Pᵀ``) as CSR arrays, ``dangling.npy``,
  ``out_degree.npy``, ``out_weight.npy``;
- ``global.npy``: global PageRank; ``basis/``: topic and hub vectors (:func:`rankrec.basis.save_basis`);
- ``related_*.npy``: for every precomputed page, its ``k_related`` best candidates (self and
  archived pages removed, nothing else, so that per-reader filters still leave full lists), their
  PageRank scores and explanations.

Loading memory-maps every array; pages not precomputed get their candidates on first request
(forward push), cached in memory.
"""

from __future__ import annotations

import difflib
import json
import time
from collections.abc import Callable
from concurrent.futures import ProcessPoolExecutor
from dataclasses import asdict, dataclass, field
from datetime import UTC, datetime
from functools import cached_property, lru_cache
from pathlib import Path

import numpy as np
import scipy.sparse as sp

from ._atomic import publish_folder
from ._validation import check_count, check_fraction, check_real
from .basis import Basis, _versions, build_basis, load_basis, save_basis
from .errors import GroupTooSmall, InputError, StaleIndex, UnknownPage
from .explain import contributions
from .graph import WikiGraph, dense_numbers, load_graph
from .pagerank import Transition, personalized_pagerank, prepare, push
from .ranking import top_k
from .store import Store
from .topics import store_topics, text_topics

INDEX_FORMAT = 1
DEFAULT_K_RELATED = 50  # enough candidates that access and "already linked" filters still leave 10-20
DEFAULT_LIFT = 0.5  # provisional: a middle value until the evaluation chooses it
EXACT_LIMIT = 5_000  # method "auto": block power iteration up to this many pages, push above
PUSH_EPSILON = 1e-5  # residual threshold of the per-page push (precompute, first requests): ~3 ms at 1M pages

Progress = Callable[[str, int, int], object]


@dataclass(frozen=True)
class IndexManifest:
    """What an index was built from and how (``manifest.json``)."""

    fingerprint: str
    damping: float
    tol: float
    lift: float
    k_related: int
    topics: str
    counts: dict
    store: str
    store_import: int | None
    precompute: dict
    seconds: dict
    created: str = field(default_factory=lambda: datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ"))
    versions: dict = field(default_factory=lambda: {**_versions(), "scikit-learn": _sklearn_version()})
    format_version: int = INDEX_FORMAT


def _sklearn_version() -> str | None:
    try:
        import sklearn
    except ImportError:  # pragma: no cover - a main dependency
        return None
    return sklearn.__version__


# -- strings and CSR on disk ------------------------------------------------------------------------
def _save_strings(folder: Path, name: str, values) -> None:
    encoded = [str(value).encode() for value in values]
    lengths = np.fromiter((len(item) for item in encoded), dtype=np.int64, count=len(encoded))
    np.save(folder / f"{name}.offsets.npy", np.concatenate([[0], np.cumsum(lengths)]).astype(np.int64))
    np.save(folder / f"{name}.bytes.npy", np.frombuffer(b"".join(encoded), dtype=np.uint8))


@dataclass(frozen=True, eq=False)
class StringTable:
    """Strings stored as one UTF-8 blob with offsets (memory-mapped); ``table[i]`` decodes one.

    >>> table = StringTable(np.frombuffer("abé".encode(), dtype=np.uint8), np.array([0, 2, 4]))
    >>> len(table), table[0], table[1]
    (2, 'ab', 'é')
    """

    blob: np.ndarray
    offsets: np.ndarray
    # memoryviews of the same memory: indexing one gives a Python int or a slice without making
    # numpy scalars or views, several times cheaper per string (lookups read some hundred a request)
    _bytes: memoryview = field(init=False, repr=False)
    _starts: memoryview = field(init=False, repr=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "_bytes", memoryview(np.ascontiguousarray(self.blob, dtype=np.uint8)))
        object.__setattr__(self, "_starts", memoryview(np.ascontiguousarray(self.offsets, dtype=np.int64)))

    def __len__(self) -> int:
        return int(self.offsets.size - 1)

    def __getitem__(self, index: int) -> str:
        return str(self._bytes[self._starts[index] : self._starts[index + 1]], "utf-8")


def _load_strings(folder: Path, name: str) -> StringTable:
    return StringTable(_load(folder, f"{name}.bytes"), _load(folder, f"{name}.offsets"))


def _save_csr(folder: Path, name: str, matrix) -> None:
    for part in ("indptr", "indices", "data"):
        np.save(folder / f"{name}.{part}.npy", np.asarray(getattr(matrix, part)))


def _load_csr(folder: Path, name: str, shape: tuple[int, int]) -> sp.csr_array:
    parts = [_load(folder, f"{name}.{part}") for part in ("data", "indices", "indptr")]
    return sp.csr_array(tuple(parts), shape=shape)


def _load(folder: Path, name: str) -> np.ndarray:
    """Memory-map one array, as a plain ndarray view of the mapping (no copy).

    Element reads from an ``np.memmap`` go through its subclass hooks and cost several times
    those of a plain ndarray; the view keeps the mapping alive through its ``base``.
    """
    return np.asarray(np.load(folder / f"{name}.npy", mmap_mode="r"))


def _group_tables(size: int, rows: list[tuple[int, str]]) -> tuple[sp.csr_array, list[str]]:
    """Pages × groups incidence (CSR, bool) from (page number, group name) pairs."""
    names = sorted({name for _, name in rows})
    code = {name: position for position, name in enumerate(names)}
    pages = np.fromiter((page for page, _ in rows), dtype=np.int64, count=len(rows))
    groups = np.fromiter((code[name] for _, name in rows), dtype=np.int64, count=len(rows))
    incidence = sp.csr_array((np.ones(len(rows), dtype=np.int8), (pages, groups)), shape=(size, len(names)))
    incidence.sum_duplicates()
    return incidence, names


# -- building --------------------------------------------------------------------------------------
def _page_table(store: Store, graph: WikiGraph) -> dict:
    rows = store.connection.execute(
        "SELECT title, space, archived FROM pages WHERE present = 1 ORDER BY id"
    ).fetchall()
    titles = [row[0] or page for row, page in zip(rows, graph.pages.tolist(), strict=True)]
    spaces = sorted({row[1] for row in rows if row[1] is not None})
    space_code = {name: position for position, name in enumerate(spaces)}
    codes = np.fromiter((space_code.get(row[1], -1) for row in rows), dtype=np.int32, count=len(rows))
    archived = np.fromiter((bool(row[2]) for row in rows), dtype=bool, count=len(rows))
    pairs = store.connection.execute(
        "SELECT page_id, name FROM page_groups JOIN pages ON pages.id = page_id WHERE present = 1"
    ).fetchall()
    dense = dense_numbers(graph.row_ids, np.array([row[0] for row in pairs], dtype=np.int64))
    incidence, groups = _group_tables(
        graph.size, [(int(d), row[1]) for d, row in zip(dense, pairs, strict=True)]
    )
    views = store.connection.execute("SELECT page_id, count(*) FROM views GROUP BY page_id").fetchall()
    counts = np.zeros(graph.size, dtype=np.int64)
    if views:
        viewed = dense_numbers(graph.row_ids, np.array([row[0] for row in views], dtype=np.int64))
        known = viewed >= 0
        counts[viewed[known]] = np.array([row[1] for row in views], dtype=np.int64)[known]
    return {
        "titles": titles,
        "spaces": spaces,
        "codes": codes,
        "archived": archived,
        "incidence": incidence,
        "groups": groups,
        "views": counts,
    }


def _topics(store: Store, graph: WikiGraph, topics: str) -> dict[str, np.ndarray]:
    if topics in ("spaces", "tags"):
        return store_topics(store, graph, topics)
    if topics == "none":
        return {}
    if topics.startswith("text:") and topics[5:].isdigit() and int(topics[5:]) > 0:
        return text_topics(store, graph, int(topics[5:]))
    raise ValueError(f"topics must be 'spaces', 'tags', 'none' or 'text:K' (K > 0); got {topics!r}")


def _precomputed_pages(views: np.ndarray, view_share: float | None) -> np.ndarray:
    """Every page (None), or the most-viewed pages that together carry ``view_share`` of the views."""
    if view_share is None or views.sum() == 0:
        return np.arange(views.size)
    order = np.lexsort((np.arange(views.size), -views))
    carried = np.cumsum(views[order]) / views.sum()
    chosen = int(np.searchsorted(carried, view_share - 1e-12)) + 1
    return np.sort(order[: min(chosen, int(np.count_nonzero(views)))])


def build_index(
    store: Store,
    target: str | Path,
    *,
    damping: float = 0.85,
    tol: float = 1e-6,
    topics: str = "spaces",
    hubs: int = 64,
    k_related: int = DEFAULT_K_RELATED,
    lift: float = DEFAULT_LIFT,
    view_share: float | None = None,
    method: str = "auto",
    epsilon: float = PUSH_EPSILON,
    team_min_readers: int = 5,
    workers: int = 1,
    progress: Progress | None = None,
) -> Path:
    """Compute every part of an index from ``store`` and publish it at ``target``; returns the real folder.

    Parameters
    ----------
    damping, tol : float
        Damping factor and power-iteration tolerance (``‖x_{t+1} − x_t‖₁ < tol``).
    topics : {"spaces", "tags", "none"} or "text:K"
        Topic columns of the basis; ``text:K`` finds K topics with :func:`rankrec.topics.text_topics`.
    hubs : int
        Hub columns of the basis: the most-viewed pages (ties: higher global PageRank). 0 for none.
    k_related : int
        Candidates kept per precomputed page.
    lift : float
        Exponent ``β`` of the lift ``score / global^β`` used to rank the candidates (0: plain scores).
    view_share : float in (0, 1] or None
        None precomputes every page; a share precomputes only the most-viewed pages carrying that
        share of all views (the rest are computed on first request).
    method : {"auto", "power", "push"}
        Related lists by block power iteration (exact to ``tol``) or by forward push (``epsilon``).
        "auto" uses the power iteration up to 5,000 pages.
    team_min_readers : int
        Teams with at least this many distinct active readers get their vector precomputed (the
        mean of the members' reading profiles, :func:`rankrec.profiles.team_restart`).
    workers : int
        Processes for the related lists (and threads for the power iteration).
    progress : callable, optional
        ``progress(step, done, total)``.
    """
    check_fraction("damping", damping, open_low=True, open_high=True)
    check_count("hubs", hubs, minimum=0)
    check_count("k_related", k_related)
    check_count("workers", workers)
    if check_real("lift", lift) < 0:
        raise ValueError(f"lift must not be negative; got {lift!r}")
    if view_share is not None:
        check_fraction("view_share", view_share, open_low=True)
    if method not in ("auto", "power", "push"):
        raise ValueError(f"method must be 'auto', 'power' or 'push'; got {method!r}")
    seconds: dict[str, float] = {}
    started = time.perf_counter()
    graph = load_graph(store)
    if graph.size < 2:
        raise InputError(store.path, None, "the wiki store holds fewer than two pages; import some first")
    transition = prepare(graph.adjacency)
    table = _page_table(store, graph)
    seconds["graph"] = time.perf_counter() - started
    _report(progress, "graph", 1, 1)

    started = time.perf_counter()
    global_vector = personalized_pagerank(transition, damping=damping, tol=min(tol, 1e-8), workers=workers)
    seconds["global"] = time.perf_counter() - started
    _report(progress, "global PageRank", 1, 1)

    started = time.perf_counter()
    topic_sets = _topics(store, graph, topics)
    ranked = np.lexsort((np.arange(graph.size), -global_vector.vectors, -table["views"]))
    hub_pages = ranked[: min(hubs, graph.size)] if hubs else np.zeros(0, dtype=np.int64)
    basis = None
    if topic_sets or hub_pages.size:
        basis = build_basis(
            graph,
            transition,
            topic_sets,
            hub_pages,
            damping=damping,
            tol=tol,
            workers=workers,
            progress=None if progress is None else (lambda done, total: progress("basis", done, total)),
        )
    seconds["basis"] = time.perf_counter() - started
    chosen = _precomputed_pages(table["views"], view_share)
    if method == "auto":
        method = "power" if graph.size <= EXACT_LIMIT else "push"
    store_import = store.scalar("SELECT max(id) FROM imports")
    started = time.perf_counter()
    team_names, team_vectors = _team_vectors(
        store, graph, transition, damping, tol, team_min_readers, workers
    )
    seconds["teams"] = time.perf_counter() - started
    _report(progress, "team vectors", 1, 1)

    def write(staging: Path) -> None:
        _save_strings(staging, "pages", graph.pages.tolist())
        _save_strings(staging, "titles", table["titles"])
        np.save(
            staging / "page_order.npy", np.argsort(graph.pages.astype(str), kind="stable").astype(np.int64)
        )
        np.save(staging / "row_ids.npy", graph.row_ids)
        np.save(staging / "archived.npy", table["archived"])
        np.save(staging / "space.npy", table["codes"])
        np.save(staging / "views.npy", table["views"])
        _save_csr(staging, "page_groups", table["incidence"])
        _save_csr(staging, "group_pages", sp.csr_array(table["incidence"].T))
        for name in ("forward", "backward"):
            _save_csr(staging, name, getattr(transition, name))
        for name in ("dangling", "out_degree", "out_weight"):
            np.save(staging / f"{name}.npy", getattr(transition, name))
        np.save(staging / "global.npy", global_vector.vectors)
        (staging / "names.json").write_text(
            json.dumps({"spaces": table["spaces"], "groups": table["groups"]}, ensure_ascii=False) + "\n"
        )
        if basis is not None:
            save_basis(basis, staging / "basis")
        np.save(staging / "team_vectors.npy", team_vectors)
        (staging / "teams.json").write_text(json.dumps(team_names, ensure_ascii=False) + "\n")
        begun = time.perf_counter()
        _write_related(staging, chosen, method, damping, tol, epsilon, lift, k_related, workers, progress)
        seconds["related"] = time.perf_counter() - begun
        manifest = IndexManifest(
            fingerprint=graph.fingerprint,
            damping=damping,
            tol=tol,
            lift=lift,
            k_related=k_related,
            topics=topics,
            counts={
                "pages": graph.size,
                "links": int(graph.adjacency.nnz),
                "archived": int(table["archived"].sum()),
                "restricted": int(np.count_nonzero(np.diff(table["incidence"].indptr))),
                "groups": len(table["groups"]),
                "spaces": len(table["spaces"]),
                "topics": len(topic_sets),
                "teams": len(team_names),
                "hubs": int(hub_pages.size),
                "precomputed": int(chosen.size),
            },
            store=str(Path(store.path).resolve()) if store.path != ":memory:" else ":memory:",
            store_import=store_import,
            precompute={"method": method, "view_share": view_share, "epsilon": epsilon},
            seconds={key: round(value, 3) for key, value in seconds.items()},
        )
        (staging / "manifest.json").write_text(json.dumps(asdict(manifest), indent=2) + "\n")

    return publish_folder(Path(target), write)


def _team_vectors(
    store, graph, transition, damping, tol, min_readers, workers
) -> tuple[list[str], np.ndarray]:
    """Personalised PageRank (float32, rows) of every team with enough distinct active readers."""
    from .profiles import load_profiles, team_restart

    rows = store.connection.execute(
        "SELECT name, users.user FROM memberships JOIN users ON users.id = user_id WHERE kind = 'team' "
        "ORDER BY name"
    ).fetchall()
    members: dict[str, list[str]] = {}
    for name, user in rows:
        members.setdefault(name, []).append(user)
    names, restarts = [], []
    if members:
        profiles = load_profiles(store, graph)
        for name, users in members.items():
            try:
                restarts.append(team_restart(profiles, users, min_readers=min_readers, team=name))
            except GroupTooSmall:
                continue
            names.append(name)
    vectors = np.zeros((len(names), graph.size), dtype=np.float32)
    for first in range(0, len(names), 32):
        block = np.column_stack(restarts[first : first + 32])
        result = personalized_pagerank(
            transition,
            block,
            damping=damping,
            tol=tol,
            workers=workers,
            dtype=np.float32 if tol >= 1e-7 else np.float64,
        )
        vectors[first : first + block.shape[1]] = result.vectors.T
    return names, vectors


def _report(progress: Progress | None, step: str, done: int, total: int) -> None:
    if progress is not None:
        progress(step, done, total)


def _write_related(staging, chosen, method, damping, tol, epsilon, lift, k, workers, progress) -> None:
    size = int(np.load(staging / "archived.npy", mmap_mode="r").size)
    batch = 64 if method == "power" else 512
    batch = max(1, min(batch, -(-chosen.size // (4 * workers))))  # several batches per worker
    batches = [chosen[first : first + batch] for first in range(0, chosen.size, batch)]
    shape = (chosen.size, k)
    arrays = {
        "pages": np.full(shape, -1, dtype=np.int32),
        "scores": np.zeros(shape, dtype=np.float32),
        "via": np.full(shape, -1, dtype=np.int32),
        "space": np.full(shape, -1, dtype=np.int32),
        "kind": np.zeros(shape, dtype=np.int8),
    }
    settings = (str(staging), method, damping, tol, epsilon, lift, k)
    done = 0

    def store_block(first: int, block: dict) -> None:
        nonlocal done
        for name, values in block.items():
            arrays[name][first : first + values.shape[0]] = values
        done += block["pages"].shape[0]
        _report(progress, "related lists", done, chosen.size)

    offsets = np.cumsum([0] + [seeds.size for seeds in batches])[:-1]
    if workers == 1 or len(batches) <= 1:
        for first, seeds in zip(offsets, batches, strict=True):
            store_block(first, related_block(settings, seeds))
    else:
        import multiprocessing

        context = multiprocessing.get_context("spawn")  # numba's thread pool is not fork-safe
        with ProcessPoolExecutor(max_workers=workers, mp_context=context) as pool:
            for first, block in zip(
                offsets, pool.map(related_block, [settings] * len(batches), batches), strict=True
            ):
                store_block(first, block)
    row = np.full(size, -1, dtype=np.int32)
    row[chosen] = np.arange(chosen.size, dtype=np.int32)
    np.save(staging / "related_row.npy", row)
    for name, values in arrays.items():
        np.save(staging / f"related_{name}.npy", values)


@lru_cache(maxsize=2)
def _arrays(folder: str) -> tuple:
    path = Path(folder)
    size = int(_load(path, "archived").size)
    transition = _transition(path, size)
    return transition, _load(path, "global"), _load(path, "archived"), _load(path, "space")


def _transition(folder: Path, size: int) -> Transition:
    return Transition(
        forward=_load_csr(folder, "forward", (size, size)),
        backward=_load_csr(folder, "backward", (size, size)),
        dangling=_load(folder, "dangling"),
        out_degree=_load(folder, "out_degree"),
        out_weight=_load(folder, "out_weight"),
    )


def related_block(settings: tuple, seeds: np.ndarray) -> dict:
    """Candidates of a batch of seed pages (run in a worker process; reads the staging folder)."""
    folder, method, damping, tol, epsilon, lift, k = settings
    transition, global_vector, archived, space = _arrays(folder)
    out = {
        "pages": np.full((seeds.size, k), -1, dtype=np.int32),
        "scores": np.zeros((seeds.size, k), dtype=np.float32),
        "via": np.full((seeds.size, k), -1, dtype=np.int32),
        "space": np.full((seeds.size, k), -1, dtype=np.int32),
        "kind": np.zeros((seeds.size, k), dtype=np.int8),
    }
    if method == "power":
        restart = np.zeros((transition.n, seeds.size))
        restart[seeds, np.arange(seeds.size)] = 1.0
        vectors = personalized_pagerank(transition, restart, damping=damping, tol=tol).vectors
        columns = [(np.arange(transition.n), vectors[:, column]) for column in range(seeds.size)]
    else:
        columns = (_pushed(transition, int(seed), damping, epsilon) for seed in seeds)
    for row, (seed, (indices, values)) in enumerate(zip(seeds, columns, strict=False)):
        found = candidates(
            transition,
            global_vector,
            archived,
            space,
            int(seed),
            indices,
            values,
            damping=damping,
            lift=lift,
            k=k,
        )
        for name, array in found.items():
            out[name][row, : array.size] = array
    return out


def _pushed(transition: Transition, seed: int, damping: float, epsilon: float):
    result = push(transition, seed, damping=damping, epsilon=epsilon)
    return np.asarray(result.vector.coords[0]), np.asarray(result.vector.data)


def candidates(
    transition, global_vector, archived, space, seed, indices, values, *, damping, lift, k
) -> dict:
    """The ``k`` best pages of one seed's vector (sorted ``indices`` and their ``values``), explained."""
    keep = (indices != seed) & (values > 0) & ~np.asarray(archived)[indices]
    pages, scores = indices[keep], values[keep]
    ranked = scores / np.power(np.asarray(global_vector)[pages], lift) if lift else scores
    best = top_k(ranked, k)
    pages, scores = pages[best], scores[best]

    def lookup(wanted):
        position = np.minimum(np.searchsorted(indices, wanted), indices.size - 1)
        return np.where(indices[position] == wanted, values[position], 0.0)

    explained = contributions(transition.backward, lookup, pages, np.asarray(space), damping=damping)
    return {
        "pages": pages,
        "scores": scores,
        "via": explained.via,
        "space": explained.space,
        "kind": explained.kind,
    }


# -- loading ---------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class Index:
    """A loaded index (arrays memory-mapped). See :func:`load_index`."""

    folder: Path
    manifest: IndexManifest
    transition: Transition
    pages: StringTable
    titles: StringTable
    page_order: np.ndarray
    row_ids: np.ndarray
    archived: np.ndarray
    space: np.ndarray
    views: np.ndarray
    page_groups: sp.csr_array
    group_pages: sp.csr_array
    space_names: tuple[str, ...]
    group_names: tuple[str, ...]
    global_vector: np.ndarray
    basis: Basis | None
    related: dict
    team_names: tuple[str, ...]
    team_vectors: np.ndarray
    _cache: dict = field(default_factory=dict, repr=False)

    @property
    def size(self) -> int:
        return int(self.archived.size)

    @cached_property
    def public(self) -> np.ndarray:
        """Pages without access groups (visible to everyone)."""
        return np.diff(self.page_groups.indptr) == 0

    @cached_property
    def global_order(self) -> np.ndarray:
        """Every page by descending global PageRank, ties to the lower page (computed once, on first use)."""
        return np.lexsort((np.arange(self.size), -np.asarray(self.global_vector, dtype=np.float64)))

    @cached_property
    def _group_codes(self) -> dict[str, int]:
        return {name: code for code, name in enumerate(self.group_names)}

    def first_position(self, key: str) -> int:
        """Position in id order (``page_order``) of the first page id not below ``key`` (binary search)."""
        order, pages = self._order, self.pages
        low, high = 0, self.size
        while low < high:
            middle = (low + high) // 2
            if pages[order[middle]] < key:
                low = middle + 1
            else:
                high = middle
        return low

    @cached_property
    def _order(self) -> memoryview:
        """``page_order`` as a memoryview (Python ints per element; see :class:`StringTable`)."""
        return memoryview(np.ascontiguousarray(self.page_order, dtype=np.int64))

    def page_number(self, page: str) -> int:
        """Dense number of ``page`` (binary search of the sorted page ids); UnknownPage with close ids."""
        low = self.first_position(page)
        if low < self.size and self.pages[self._order[low]] == page:
            return self._order[low]
        nearby = [
            self.pages[int(self.page_order[i])] for i in range(max(0, low - 25), min(self.size, low + 25))
        ]
        pool = nearby if self.size > 20_000 else [self.pages[i] for i in range(self.size)]
        raise UnknownPage(page, difflib.get_close_matches(page, pool, n=3, cutoff=0.5))

    def space_of(self, number: int) -> str | None:
        code = int(self.space[number])
        return self.space_names[code] if code >= 0 else None

    def may_see(self, number: int, groups: frozenset[str] | None) -> bool:
        """Whether a reader in ``groups`` may see page ``number`` (the rule of :meth:`visible`, one page)."""
        row = self.page_groups
        codes = row.indices[row.indptr[number] : row.indptr[number + 1]]
        return codes.size == 0 or any(self.group_names[int(code)] in (groups or ()) for code in codes)

    def visible(self, groups: frozenset[str] | None) -> np.ndarray:
        """Pages a reader in ``groups`` may see: public ones and those sharing a group (None: public only)."""
        mask = self.public.copy()
        for name in groups or ():
            code = self._group_codes.get(name)
            if code is not None:
                mask[
                    self.group_pages.indices[
                        self.group_pages.indptr[code] : self.group_pages.indptr[code + 1]
                    ]
                ] = True
        return mask

    def links_from(self, number: int) -> np.ndarray:
        forward = self.transition.forward
        return np.asarray(
            forward.indices[forward.indptr[number] : forward.indptr[number + 1]], dtype=np.int64
        )

    def seed_candidates(self, number: int) -> dict:
        """Precomputed candidates of a page, or computed now by forward push (then cached)."""
        row = int(self.related["row"][number])
        if row >= 0:
            count = int(np.count_nonzero(self.related["pages"][row] >= 0))
            return {
                name: np.asarray(values[row, :count])
                for name, values in self.related.items()
                if name != "row"
            }
        found = self._cache.get(number)
        if found is None:
            indices, values = _pushed(
                self.transition, number, self.manifest.damping, self.manifest.precompute["epsilon"]
            )
            found = self._cache[number] = candidates(
                self.transition,
                self.global_vector,
                self.archived,
                self.space,
                number,
                indices,
                values,
                damping=self.manifest.damping,
                lift=self.manifest.lift,
                k=self.manifest.k_related,
            )
        return found

    def seed_vector(self, number: int, *, epsilon: float = 1e-6) -> np.ndarray:
        """The full personalised PageRank vector of one page by forward push (dense)."""
        indices, values = _pushed(self.transition, number, self.manifest.damping, epsilon)
        vector = np.zeros(self.size)
        vector[indices] = values
        return vector / vector.sum()

    def team_vector(self, team: str) -> np.ndarray | None:
        """The team's personalised PageRank as of the build (float64, sums to 1), or None."""
        try:
            row = self.team_names.index(team)
        except ValueError:
            return None
        vector = np.asarray(self.team_vectors[row], dtype=np.float64)
        return vector / vector.sum()

    @property
    def team_error_bound(self) -> float:
        """L1 bound of a precomputed team vector: ``tol·α/(1 − α)`` (geometric tail) plus float32 storage."""
        damping = self.manifest.damping
        return self.manifest.tol * damping / (1.0 - damping) + 1e-6

    def check_current(self, store: Store) -> None:
        """StaleIndex unless ``store``'s graph is the one the index was built from.

        When the store has had no import since the build, the graph cannot have changed and is
        not read; otherwise it is loaded and its fingerprint compared.
        """
        if store.scalar("SELECT max(id) FROM imports") == self.manifest.store_import:
            return
        found = load_graph(store).fingerprint
        if found != self.manifest.fingerprint:
            raise StaleIndex(expected=found, found=self.manifest.fingerprint)


def load_index(folder: str | Path, *, graph: WikiGraph | None = None) -> Index:
    """Memory-map an index. StaleIndex when its format is not this rankrec's, or (with ``graph``)
    when it was built for another graph; InputError when the folder is not an index."""
    folder = Path(folder)
    try:
        raw = json.loads((folder / "manifest.json").read_text())
    except (OSError, ValueError) as error:
        raise InputError(str(folder), None, f"not a readable index: {error}") from None
    version = raw.get("format_version") if isinstance(raw, dict) else None
    if version != INDEX_FORMAT:
        raise StaleIndex(expected=f"index format {INDEX_FORMAT}", found=f"index format {version}")
    try:
        manifest = IndexManifest(**raw)
        names = json.loads((folder / "names.json").read_text())
        size = int(manifest.counts["pages"])
        groups = len(names["groups"])
        index = Index(
            folder=folder,
            manifest=manifest,
            transition=_transition(folder, size),
            pages=_load_strings(folder, "pages"),
            titles=_load_strings(folder, "titles"),
            page_order=_load(folder, "page_order"),
            row_ids=_load(folder, "row_ids"),
            archived=_load(folder, "archived"),
            space=_load(folder, "space"),
            views=_load(folder, "views"),
            page_groups=_load_csr(folder, "page_groups", (size, groups)),
            group_pages=_load_csr(folder, "group_pages", (groups, size)),
            space_names=tuple(names["spaces"]),
            group_names=tuple(names["groups"]),
            global_vector=_load(folder, "global"),
            team_names=tuple(json.loads((folder / "teams.json").read_text())),
            team_vectors=_load(folder, "team_vectors"),
            basis=load_basis(folder / "basis") if (folder / "basis").exists() else None,
            related={
                name: _load(folder, f"related_{name}")
                for name in ("row", "pages", "scores", "via", "space", "kind")
            },
        )
    except (OSError, ValueError, TypeError, KeyError) as error:
        raise InputError(str(folder), None, f"not a readable index: {error}") from None
    if graph is not None and graph.fingerprint != manifest.fingerprint:
        raise StaleIndex(expected=graph.fingerprint, found=manifest.fingerprint)
    return index

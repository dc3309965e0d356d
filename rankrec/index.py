"""The published index on disk, and the loaded :class:`Index`: one folder with everything needed to answer
related, personal and landing lists (built by :mod:`rankrec.build`).

- ``manifest.json``: format version, graph fingerprint, the whole configuration (:mod:`rankrec.configuration`)
  and where it came from, counts, library versions, the store it was built from (path, latest import
  and store id), what was precomputed;
- the page table: ``pages.*`` and ``titles.*`` (UTF-8 blob + offsets), ``page_order.npy``
  (pages sorted, for lookups), ``row_ids.npy``, ``archived.npy``, ``space.npy`` (codes), ``views.npy``,
  ``page_groups.*`` and ``group_pages.*`` (access groups both ways, CSR), ``page_tags.*`` (pages × tags,
  CSR; only when some page has a tag);
- the transition ``forward.*`` (``P``, links blended with navigation) and ``backward.*`` (``Pᵀ``) as CSR
  arrays, ``dangling.npy``, ``out_degree.npy``, ``out_weight.npy``;
- ``global.npy``: global PageRank; ``basis/``: topic and hub vectors (:func:`rankrec.basis.save_basis`);
  ``team_vectors.npy`` and ``teams.json``;
- ``related_*.npy``: for every precomputed page, its best candidates (:mod:`rankrec.recommend.candidates`).

Loading memory-maps every array.
"""

from __future__ import annotations

import json
from dataclasses import asdict, dataclass, field
from datetime import UTC, datetime
from functools import cached_property
from pathlib import Path

import numpy as np
import scipy.sparse as sp

from ._arrays import StringTable, load_array, load_csr, load_strings, save_csr, save_strings
from ._index_ids import PageIds
from .basis import Basis, _versions, load_basis
from .configuration import Configuration
from .errors import ForeignIndex, InputError, StaleIndex
from .graph import WikiGraph, load_graph
from .pagerank import Transition, push
from .ranker.features import Signals
from .ranker.model import Ranker, load_ranker
from .store import Store
from .text import TextNeighbours, load_text_neighbours

__all__ = [
    "INDEX_FORMAT",
    "Index",
    "IndexManifest",
    "StringTable",
    "load_array",
    "load_index",
    "write_tables",
]

INDEX_FORMAT = 4
READING = ("covisited", "successors")  # the ranker's reading neighbours (rankrec.ranker.covisits)
PAGES_READ = ("click_through", "sessions")  # per page (rankrec.ranker.covisits.page_reading)
RELATED_ARRAYS = ("row", "pages", "scores", "combined", "via", "space", "kind")


@dataclass(frozen=True)
class IndexManifest:
    """What an index was built from and how (``manifest.json``)."""

    fingerprint: str
    configuration: dict
    settings_source: dict
    k_related: int
    topics: str
    navigation: dict
    counts: dict
    store: str
    store_import: int | None
    precompute: dict
    seconds: dict
    ranker: dict = field(default_factory=dict)  # the learnt ranker's training summary ({}: none)
    store_id: str | None = None  # the id of the store built from (rankrec.store; None: older index or store)
    serving: dict = field(default_factory=dict)  # measured serving settings (rankrec.recommend.calibrate)
    text: dict = field(default_factory=dict)  # the text's digest, and the index its neighbours came from
    reuse: dict = field(default_factory=dict)  # what was taken over from the index replaced (reuse_lists)
    created: str = field(default_factory=lambda: datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ"))
    versions: dict = field(default_factory=lambda: {**_versions(), "scikit-learn": _sklearn_version()})
    format_version: int = INDEX_FORMAT

    @property
    def damping(self) -> float:
        return float(self.configuration["damping"])

    @property
    def tol(self) -> float:
        return float(self.configuration["tol"])

    @property
    def lift(self) -> float:
        return float(self.configuration["lift"])

    def write(self, folder: Path) -> None:
        (folder / "manifest.json").write_text(json.dumps(asdict(self), indent=2, ensure_ascii=False) + "\n")


def _sklearn_version() -> str | None:
    try:
        import sklearn
    except ImportError:  # pragma: no cover - a main dependency
        return None
    return sklearn.__version__


def write_tables(
    folder: Path, evidence, transition: Transition, global_vector, views, team_names, team_vectors
):
    """Write the page table, the transition, the global vector and the team vectors into ``folder``."""
    graph = evidence.graph
    save_strings(folder, "pages", graph.pages.tolist())
    save_strings(folder, "titles", evidence.titles)
    np.save(folder / "page_order.npy", np.argsort(graph.pages.astype(str), kind="stable").astype(np.int64))
    np.save(folder / "row_ids.npy", graph.row_ids)
    np.save(folder / "archived.npy", evidence.archived)
    np.save(folder / "space.npy", evidence.space_codes)
    np.save(folder / "views.npy", views)
    save_csr(folder, "page_groups", evidence.group_incidence)
    save_csr(folder, "group_pages", sp.csr_array(evidence.group_incidence.T))
    for name in ("forward", "backward"):
        save_csr(folder, name, getattr(transition, name))
    for name in ("dangling", "out_degree", "out_weight"):
        np.save(folder / f"{name}.npy", getattr(transition, name))
    np.save(folder / "global.npy", global_vector)
    names = {"spaces": evidence.space_names, "groups": evidence.group_names, "tags": evidence.tag_names}
    if evidence.tag_incidence is not None:
        save_csr(folder, "page_tags", evidence.tag_incidence)
    (folder / "names.json").write_text(json.dumps(names, ensure_ascii=False) + "\n")
    np.save(folder / "team_vectors.npy", team_vectors)
    (folder / "teams.json").write_text(json.dumps(team_names, ensure_ascii=False) + "\n")


def index_signals(folder: Path, transition, global_vector, space, views, archived, text) -> Signals:
    """The ranker's :class:`~rankrec.ranker.features.Signals` over the arrays of an index folder."""
    chrome = load_array(folder, "chrome_in_share")
    size = int(np.asarray(archived).size)
    tag_names = json.loads((folder / "names.json").read_text()).get("tags", [])
    tags = load_csr(folder, "page_tags", (size, len(tag_names))) if tag_names else None
    reading = tuple(
        load_csr(folder, name, (size, size)) if (folder / f"{name}.data.npy").exists() else None
        for name in READING
    )
    pages_read = tuple(
        load_array(folder, name) if (folder / f"{name}.npy").exists() else None for name in PAGES_READ
    )
    return Signals.of(
        transition, global_vector, space, views, archived, chrome, text, reading, pages_read, tags=tags
    )


def load_transition(folder: Path, size: int) -> Transition:
    """The transition arrays of an index folder (memory-mapped)."""
    return Transition(
        forward=load_csr(folder, "forward", (size, size)),
        backward=load_csr(folder, "backward", (size, size)),
        dangling=load_array(folder, "dangling"),
        out_degree=load_array(folder, "out_degree"),
        out_weight=load_array(folder, "out_weight"),
    )


# -- loading ---------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class Index(PageIds):
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
    hubs: np.ndarray | None = None  # site hubs and chrome pages (rankrec.derive.site_hubs)
    text: TextNeighbours | None = None  # each page's text neighbours (rankrec.text), when pages had text
    ranker: Ranker | None = None  # the learnt related-list ranker (rankrec.ranker), when one was trained
    cache: dict = field(default_factory=dict, repr=False)  # candidates made on first request

    @property
    def size(self) -> int:
        return int(self.archived.size)

    @cached_property
    def signals(self) -> Signals:
        """What the ranker's features read (:class:`rankrec.ranker.features.Signals`), from this index."""
        return index_signals(
            self.folder, self.transition, self.global_vector, self.space, self.views, self.archived, self.text
        )

    @cached_property
    def public(self) -> np.ndarray:
        """Pages without access groups (visible to everyone)."""
        return np.diff(self.page_groups.indptr) == 0

    @cached_property
    def listable(self) -> np.ndarray:
        """Pages that are not archived (the mask every list starts from; computed once)."""
        return ~np.asarray(self.archived)

    @cached_property
    def global_order(self) -> np.ndarray:
        """Every page by descending global PageRank, ties to the lower page (computed once, on first use)."""
        return np.lexsort((np.arange(self.size), -np.asarray(self.global_vector, dtype=np.float64)))

    def lift_divisor(self, lift: float) -> np.ndarray:
        """``global_vector ** lift`` (ones for lift 0): what a list's scores are divided by to rank them
        (:func:`rankrec.recommend.select.lifted`), computed once per lift (the last few kept)."""
        kept = self._divisors
        found = kept.get(lift)
        if found is None:
            overall = np.asarray(self.global_vector, dtype=np.float64)
            found = np.power(overall, lift) if lift else np.ones_like(overall)
            if len(kept) >= 4:
                kept.pop(next(iter(kept)))
            kept[lift] = found
        return found

    @cached_property
    def _divisors(self) -> dict[float, np.ndarray]:
        return {}

    @cached_property
    def _team_totals(self) -> dict[int, float]:
        return {}

    @cached_property
    def _group_codes(self) -> dict[str, int]:
        return {name: code for code, name in enumerate(self.group_names)}

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

    @cached_property
    def configuration(self) -> Configuration:
        """The configuration the index was built with (every list is served with it)."""
        return Configuration.from_dict(self.manifest.configuration)

    @property
    def vector_epsilon(self) -> float:
        """The push threshold of personal and team vectors: the one the build measured
        (:mod:`rankrec.recommend.calibrate`), else the configuration's ``vector_epsilon``."""
        return float(self.manifest.serving.get("vector_epsilon", self.configuration.vector_epsilon))

    def seed_vector(self, number: int) -> np.ndarray:
        """The full personalised PageRank vector of one page by forward push (dense, sums to one;
        residual threshold: the configuration's ``vector_epsilon``)."""
        configuration = self.configuration
        result = push(
            self.transition, number, damping=configuration.damping, epsilon=configuration.vector_epsilon
        )
        vector = np.zeros(self.size)
        vector[np.asarray(result.vector.coords[0])] = result.vector.data
        return vector / vector.sum()

    def team_vector(self, team: str) -> np.ndarray | None:
        """The team's personalised PageRank as of the build (float64, sums to 1), or None."""
        try:
            row = self.team_names.index(team)
        except ValueError:
            return None
        vector = np.array(self.team_vectors[row], dtype=np.float64)  # a copy, whatever the stored type
        total = self._team_totals.get(row)
        if total is None:
            total = self._team_totals[row] = float(vector.sum())
        vector /= total
        return vector

    @property
    def team_error_bound(self) -> float:
        """L1 bound of a precomputed team vector: ``tol·α/(1 − α)`` (geometric tail) plus float32 storage."""
        damping = self.manifest.damping
        return self.manifest.tol * damping / (1.0 - damping) + 1e-6

    def check_current(self, store: Store) -> None:
        """StaleIndex unless ``store`` is the store the index was built from, with the same graph.

        An index whose manifest records a store id is refused with :class:`~rankrec.errors.ForeignIndex`
        (a StaleIndex) when ``store`` has another id, or none: it was built from another store, however
        alike their contents. Then, or for an older index without a store id, when the store has had no
        import since the build the graph cannot have changed and is not read; otherwise it is loaded
        and its fingerprint compared.
        """
        built_from = self.manifest.store_id
        if built_from is not None and store.store_id() != built_from:
            raise ForeignIndex(
                store.store_id(), built_from, str(self.folder), store.path, self.manifest.store
            )
        if store.latest_import() == self.manifest.store_import:
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
            transition=load_transition(folder, size),
            pages=load_strings(folder, "pages"),
            titles=load_strings(folder, "titles"),
            page_order=load_array(folder, "page_order"),
            row_ids=load_array(folder, "row_ids"),
            archived=load_array(folder, "archived"),
            space=load_array(folder, "space"),
            views=load_array(folder, "views"),
            page_groups=load_csr(folder, "page_groups", (size, groups)),
            group_pages=load_csr(folder, "group_pages", (groups, size)),
            space_names=tuple(names["spaces"]),
            group_names=tuple(names["groups"]),
            global_vector=load_array(folder, "global"),
            team_names=tuple(json.loads((folder / "teams.json").read_text())),
            team_vectors=load_array(folder, "team_vectors"),
            basis=load_basis(folder / "basis") if (folder / "basis").exists() else None,
            text=load_text_neighbours(folder / "text") if (folder / "text").exists() else None,
            ranker=load_ranker(folder / "ranker"),
            hubs=load_array(folder, "hubs"),
            related={name: load_array(folder, f"related_{name}") for name in RELATED_ARRAYS},
        )
    except (OSError, ValueError, TypeError, KeyError) as error:
        raise InputError(str(folder), None, f"not a readable index: {error}") from None
    if graph is not None and graph.fingerprint != manifest.fingerprint:
        raise StaleIndex(expected=graph.fingerprint, found=manifest.fingerprint)
    return index

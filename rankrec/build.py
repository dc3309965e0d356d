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
   (:mod:`rankrec.recommend.candidates`); 6. the files (:mod:`rankrec.index`); 7. the push threshold
   personal lists are served with, measured on the staged index (:mod:`rankrec.recommend.calibrate`);
   the folder is then published atomically.
"""

from __future__ import annotations

import fnmatch
import time
from contextlib import contextmanager
from dataclasses import replace
from pathlib import Path

import numpy as np

from ._arrays import save_csr
from ._atomic import publish_folder
from ._memory import release_memory
from ._validation import check_choice, check_count, check_fraction
from .basis import build_basis, save_basis
from .configuration import Configuration
from .derive import (
    chrome_in_share,
    navigation_matrix,
    pages_read,
    reading_neighbours,
    site_hubs,
    source_listings,
)
from .errors import GroupTooSmall
from .evidence import Evidence, read_evidence
from .graph import dense_numbers
from .index import PAGES_READ, READING, IndexManifest, load_index, load_transition, write_tables
from .pagerank import personalised_pagerank, prepare
from .profiles import reader_profiles, team_restart
from .progress import Progress, report
from .ranker.features import Signals
from .recommend.calibrate import calibrate_vector_epsilon, sample_readers
from .recommend.candidates import DEFAULT_K_RELATED, seed_vectors, write_related
from .reuse import text_step
from .reuse_lists import UNREADABLE, Changes, earlier_index, lists_to_take_over, take_over_ranker
from .store import Store, read_store_id

EXACT_LIMIT = 5_000  # method "auto": block power iteration up to this many pages, push above
STAGES = ("graph", "global", "basis", "teams", "text", "ranker", "related", "calibrate")  # manifest seconds


def _signals(evidence: Evidence, configuration: Configuration, text, chrome_share, workers: int):
    """The ranker's signals of ``evidence`` (its own transition and global PageRank), and the transition."""
    adjacency, _ = navigation_matrix(evidence, configuration)
    transition = prepare(adjacency)
    overall = personalised_pagerank(
        transition, damping=configuration.damping, tol=min(configuration.tol, 1e-8), workers=workers
    ).vectors
    views = evidence.views.counts(evidence.size)
    signals = Signals.of(
        transition,
        overall,
        evidence.space_codes,
        views,
        evidence.archived,
        chrome_share,
        text,
        reading_neighbours(evidence, configuration),
        pages_read(evidence, configuration),
        tags=evidence.tag_incidence,
    )
    return signals, transition


def _ranker(evidence, configuration, text, chrome_share, method, workers, progress):
    """The related-list ranker trained on ``evidence`` (:mod:`rankrec.ranker.training`), or None (with
    its reason) when the configuration asks for none or the evidence is too thin."""
    if configuration.ranker == "none":
        return None, {"used": False, "reason": "the configuration asks for no ranker"}
    from .ranker.training import train_ranker

    return train_ranker(
        evidence,
        lambda reduced: _signals(reduced, configuration, text, chrome_share, workers),
        lambda transition, seeds: seed_vectors(transition, seeds, method, configuration, workers),
        kind=configuration.ranker,
        queries=configuration.ranker_queries,
        gap=configuration.session_gap_seconds,
        editorial=configuration.editorial_place,
        workers=workers,
        progress=progress,
    )


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


@contextmanager
def _timed(seconds: dict[str, float], stage: str):
    """Add the wall time of the ``with`` block to ``seconds[stage]``."""
    started = time.perf_counter()
    yield
    seconds[stage] = seconds.get(stage, 0.0) + time.perf_counter() - started


def skipped_pages(evidence: Evidence, patterns) -> np.ndarray:
    """Pages whose id matches one of the shell ``patterns`` (``fnmatch`` rules, case-sensitive)."""
    skipped = np.zeros(evidence.size, dtype=bool)
    if patterns:
        ids = evidence.graph.pages.tolist()
        matched = set()
        for pattern in patterns:
            matched.update(fnmatch.filter(ids, pattern))
        skipped[[number for number, page in enumerate(ids) if page in matched]] = True
    return skipped


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
    cluster=None,
    settings_source: dict | None = None,
    reuse: bool = True,
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
    cluster : :class:`rankrec.cluster.ClusterAddress`, optional
        Run the push's blocks of pages (and the ranker's scoring of them) as tasks on this Dask cluster
        instead of local processes; its workers read the staging folder beside ``target``, so that must
        be on storage they all mount at the same path. The power iteration (small wikis) runs here.
    settings_source : dict, optional
        Where the configuration came from (recorded in the manifest).
    reuse : bool
        Take over from the index at ``target`` (the one this build replaces) what the changes since
        cannot have moved, instead of computing it again: the text neighbours, when the text digest
        (:meth:`Evidence.text_digest`) is the one its manifest records; the ranker and the related lists
        by the rules of :mod:`rankrec.reuse_lists`. False: compute everything.
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
    seconds = dict.fromkeys(STAGES, 0.0)
    skipped = skipped_pages(evidence, configuration.skip_pages)
    listings = source_listings(evidence) if configuration.skip_listings else np.zeros(size, dtype=bool)
    skipped |= listings
    if skipped.any():  # kept out of every list as archived pages are
        evidence = replace(evidence, archived=evidence.archived | skipped)
    views = evidence.views.counts(size)
    if related_pages is not None:
        chosen = np.unique(np.asarray(related_pages, dtype=np.int64))
        if chosen.size and (chosen[0] < 0 or chosen[-1] >= size):
            raise ValueError(f"related_pages must be page numbers in [0, {size}); got {chosen[[0, -1]]!r}")
    else:
        chosen = precomputed_pages(views, view_share)
    if method == "auto":
        method = "power" if size <= EXACT_LIMIT else "push"
    if cluster is not None and method == "push":
        from .cluster import check_reachable

        check_reachable(cluster)

    earlier, why_not = None, "a full build was asked for"
    if reuse:
        earlier, why_not = earlier_index(
            Path(target), evidence, read_store_id(evidence.store), configuration, k_related, method
        )
    ranker_wanted = configuration.ranker != "none"

    def write(staging: Path) -> None:
        nonlocal earlier, why_not  # an earlier index that cannot be read is one not taken over
        # Each part is written into the staging folder as soon as it is computed and then let go, so
        # the peak is the evidence and one stage's work, not every part at once; text comes first,
        # its vectoriser being the largest stage (the neighbour lists it keeps are small).
        text, text_summary = None, {}
        if evidence.has_text and (configuration.text_weight > 0 or configuration.ranker != "none"):
            with _timed(seconds, "text"):
                text, text_summary = text_step(
                    evidence, configuration, staging, Path(target) if reuse else None, progress, workers
                )
        with _timed(seconds, "graph"):
            adjacency, navigation = navigation_matrix(evidence, configuration)
            transition = prepare(adjacency)
            del adjacency
            changes = None
            if earlier is not None:
                try:
                    changes = Changes.of(earlier, transition)
                except UNREADABLE as error:
                    earlier, why_not = None, f"the earlier index could not be read ({error})"
        report(progress, "graph", 1, 1)

        with _timed(seconds, "global"):
            solved = personalised_pagerank(transition, damping=damping, tol=min(tol, 1e-8), workers=workers)
            global_vector = solved.vectors
        report(progress, "global PageRank", 1, 1)

        ranked = np.lexsort((np.arange(size), -global_vector, -views))
        hub_pages = ranked[: min(hubs, size)] if hubs else np.zeros(0, dtype=np.int64)
        if evidence.topics or hub_pages.size:
            with _timed(seconds, "basis"):
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
            save_basis(basis, staging / "basis")
            del basis
            release_memory()

        with _timed(seconds, "teams"):
            team_names, team_vectors = _team_vectors(evidence, transition, configuration, workers)
        report(progress, "team vectors", 1, 1)
        write_tables(staging, evidence, transition, global_vector, views, team_names, team_vectors)
        del transition, solved, global_vector, team_vectors
        release_memory()

        with _timed(seconds, "ranker"):
            chrome_share = chrome_in_share(evidence)
            site = site_hubs(evidence.graph.adjacency, chrome_share)
            ranker_summary, retrained, reason = None, "", why_not
            if ranker_wanted:
                ranker_summary, retrained = take_over_ranker(earlier, changes, staging)
            if ranker_summary is None:
                ranker, ranker_summary = _ranker(
                    evidence, configuration, text, chrome_share, method, workers, progress
                )
                if ranker is not None:
                    ranker.save(staging / "ranker")
                    ranker_summary = ranker_summary | {"changed_since_training": 0.0}
                if ranker is not None or (earlier and (earlier.manifest.get("ranker") or {}).get("used")):
                    changes = None  # another model (or none now): every list is computed afresh
                    reason = why_not or retrained or "a ranker was trained"
            else:
                report(progress, "ranker (taken over)", 1, 1)
        np.save(staging / "chrome_in_share.npy", chrome_share)
        np.save(staging / "hubs.npy", site)
        reading, read = (None, None), (None, None)
        if ranker_summary.get("used"):
            reading, read = reading_neighbours(evidence, configuration), pages_read(evidence, configuration)
            for name, matrix in zip(READING, reading, strict=True):
                if matrix is not None:
                    save_csr(staging, name, matrix)
            for name, array in zip(PAGES_READ, read, strict=True):
                if array is not None:
                    np.save(staging / f"{name}.npy", array)
        with _timed(seconds, "related"):
            taken = None
            if changes is not None:
                try:
                    taken, reused = lists_to_take_over(
                        earlier,
                        changes,
                        evidence,
                        load_transition(staging, size),
                        chosen,
                        configuration,
                        text=text,
                        text_unchanged=bool(text_summary.get("reused_from")),
                        reading=reading,
                        pages_read=read,
                    )
                except UNREADABLE as error:
                    reused = {"from": None, "reason": f"the earlier index could not be read ({error})"}
            else:
                reused = {"from": None, "reason": reason}
            try:
                write_related(
                    staging, chosen, method, configuration, k_related, workers, progress, cluster, taken
                )
            except UNREADABLE as error:
                if taken is None:
                    raise
                reused = {"from": None, "reason": f"the earlier index could not be read ({error})"}
                write_related(staging, chosen, method, configuration, k_related, workers, progress, cluster)
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
                "site_hubs": int(site.sum()),
                "precomputed": int(chosen.size),
                "views": int(views.sum()),
                "skipped": int(skipped.sum()),
                "source_listings": int(listings.sum()),
                "pages_with_text": evidence.pages_with_text,
                "text_pairs": 0 if text is None else text.pairs,
            },
            store=evidence.store,
            store_import=evidence.store_import,
            store_id=read_store_id(evidence.store),  # made once, never changed: any read will do
            precompute={
                "method": method,
                "view_share": view_share,
                "cluster": None if cluster is None or method == "power" else str(cluster),
                "pages": "chosen"
                if related_pages is not None
                else ("all" if view_share is None else "most viewed"),
            },
            seconds={key: round(value, 3) for key, value in seconds.items()},
            ranker=ranker_summary,
            text=text_summary,
            reuse=reused,
        )
        manifest.write(staging)
        with _timed(seconds, "calibrate"):  # through the serving code, so on the staged index itself
            calibration = calibrate_vector_epsilon(
                load_index(staging), sample_readers(evidence, configuration)
            )
        report(progress, "push threshold", 1, 1)
        seconds_taken = {key: round(value, 3) for key, value in seconds.items()}
        replace(manifest, serving=calibration.to_dict(), seconds=seconds_taken).write(staging)

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

"""Related candidates of a page: the best pages of its personalised PageRank vector, explained.

Built for the chosen pages at build time (:func:`write_related`, into the staging folder) and, for a page
that was not precomputed, on its first request (:func:`page_candidates`, then cached in the loaded
index), by the same method either way: block power iteration (exact to ``tol``) on small wikis, forward
push (``related_epsilon``) on large ones. Candidates drop only the page itself, archived pages and pages
without score, so per-reader filters still leave full lists.
"""

from __future__ import annotations

from functools import lru_cache
from pathlib import Path

import numpy as np

from .._pool import block_runner
from ..configuration import Configuration
from ..index import Index, index_signals, load_array, load_transition
from ..pagerank import Transition, personalised_pagerank, push
from ..ranker.features import FEATURES, POOL, absent_values, candidate_pool, click_walk, pair_features
from ..ranker.model import load_ranker
from ..text import load_text_neighbours
from .explain import READ_ON, SIMILAR_TEXT, VIA_PAGE, contributions
from .select import lifted, top_k

DEFAULT_K_RELATED = 50  # enough candidates that access and "already linked" filters still leave 10-20
_BLOCK_CELLS = 1 << 22  # pages × seed columns of one block power iteration (32 MiB of float64)
_FILL_BLOCK = 256  # pages whose candidates one fill_candidates block scores together (one model call)
_WIDEST = 64  # seeds per block: wider blocks were measured slower (cache), narrower waste the lanes
_FIELDS = {
    "pages": (np.int32, -1),
    "scores": (np.float32, 0),
    "combined": (np.float32, 0),
    "via": (np.int32, -1),
    "space": (np.int32, -1),
    "kind": (np.int8, 0),
}


def _empty(rows: int, k: int) -> dict:
    return {name: np.full((rows, k), fill, dtype=dtype) for name, (dtype, fill) in _FIELDS.items()}


def text_row(text, seed: int, archived) -> tuple[np.ndarray, np.ndarray]:
    """The seed's text neighbours (pages, similarities), archived pages left out; empty without text."""
    if text is None:
        return np.zeros(0, dtype=np.int64), np.zeros(0)
    similar = text.similar
    start, end = int(similar.indptr[seed]), int(similar.indptr[seed + 1])
    pages = np.asarray(similar.indices[start:end], dtype=np.int64)
    sims = np.asarray(similar.data[start:end], dtype=np.float64)
    keep = ~np.asarray(archived)[pages] & (pages != seed)
    return pages[keep], sims[keep]


def mix_text(link_scores, link_best: float, sims, text_best: float, weight: float):
    """``(1 − w)·link/best link + w·text/best text``, and the text part (a related score mixing in text).

    Each part is divided by its best value over the seed's candidates (the page itself and archived
    pages aside), so that the mix does not depend on the scale of either.

    >>> links, sims = np.array([2.0, 1.0, 0.0]), np.array([0.0, 0.5, 1.0])
    >>> [part.round(2).tolist() for part in mix_text(links, 2.0, sims, 1.0, 0.5)]
    [[0.5, 0.5, 0.5], [0.0, 0.25, 0.5]]
    """
    link_part = (1.0 - weight) * np.asarray(link_scores) / link_best if link_best > 0 else 0.0 * link_scores
    text_part = weight * np.asarray(sims) / text_best if text_best > 0 else 0.0 * np.asarray(sims)
    return link_part + text_part, text_part


def candidates(
    transition,
    global_vector,
    archived,
    space,
    seed,
    indices,
    values,
    *,
    damping,
    lift,
    k,
    text=None,
    text_weight=0.0,
) -> dict:
    """The ``k`` best pages of one seed's vector (sorted ``indices`` and their ``values``), explained.

    With ``text`` neighbours and ``text_weight`` > 0 the pages are the best ``k`` of the union of the
    vector's top ``k`` (by lifted score) and the seed's text neighbours, by :func:`mix_text`; an item whose
    text part is the larger is explained as similar text.
    """
    keep = (indices != seed) & (values > 0) & ~np.asarray(archived)[indices]
    pages, scores = indices[keep], values[keep]
    overall = np.asarray(global_vector)
    ranked = lifted(scores, overall[pages], lift)
    best = top_k(ranked, k)

    def lookup(wanted):
        if indices.size == values.size == np.asarray(archived).size:  # a whole vector: read it directly
            return values[wanted]
        position = np.minimum(np.searchsorted(indices, wanted), indices.size - 1)
        return np.where(indices[position] == wanted, values[position], 0.0)

    similar_pages, sims = text_row(text, seed, archived) if text_weight > 0 else (np.zeros(0, np.int64), None)
    if similar_pages.size == 0:
        pages, scores, combined = pages[best], scores[best], ranked[best]
        textual = np.zeros(pages.size, dtype=bool)
    else:
        union = np.union1d(pages[best], similar_pages)
        values_there = lookup(union)
        sims_there = np.zeros(union.size)
        sims_there[np.searchsorted(union, similar_pages)] = sims
        link_best = float(ranked.max()) if ranked.size else 0.0
        mixed, text_part = mix_text(
            lifted(values_there, overall[union], lift), link_best, sims_there, float(sims.max()), text_weight
        )
        order = top_k(np.where(mixed > 0, mixed, -np.inf), k)
        pages, scores, combined = union[order], values_there[order], mixed[order]
        textual = text_part[order] > (mixed[order] - text_part[order])
    explained = contributions(transition.backward, lookup, pages, np.asarray(space), damping=damping)
    explained.kind[textual] = SIMILAR_TEXT
    return {
        "pages": pages,
        "scores": scores,
        "combined": combined,
        "via": explained.via,
        "space": explained.space,
        "kind": explained.kind,
    }


def ranked_candidates(transition, signals, ranker, space, seed, indices, values, *, damping, k) -> dict:
    """The ``k`` best of the seed's candidate pool (:func:`rankrec.ranker.features.candidate_pool`) by the
    learnt ranker, explained by the feature group with the largest attribution (occlusion:
    :mod:`rankrec.ranker.model`): text similarity names the text, the seed's own link to the item names
    the seed ("linked from"), the reading features the sessions that went on from the seed to it, else
    the walk's strongest in-link. One seed of :func:`ranked_block`."""
    vectors = [(indices, values)]
    return ranked_block(transition, signals, ranker, space, [seed], vectors, damping=damping, k=k)[0]


def _lookup(indices: np.ndarray, values: np.ndarray, size: int, transition=None):
    """``lookup(pages)``: the sparse vector (sorted ``indices``, ``values``) at ``pages``, 0 elsewhere. With
    ``transition``, its values are spread into a borrowed push workspace (all zeros, cleared again after),
    so that a long list of pages costs a gather, not a binary search each."""

    def lookup(wanted):
        if indices.size == values.size == size:
            return values[wanted]
        if transition is not None and indices.size:
            workspace = transition.borrow_workspace()
            dense = workspace[1]
            try:
                dense[indices] = values
                return dense[wanted]
            finally:
                dense[indices] = 0.0
                transition.return_workspace(workspace)
        position = np.minimum(np.searchsorted(indices, wanted), max(indices.size - 1, 0))
        found = values[position] if indices.size else np.zeros(wanted.size)
        return np.where(indices[position] == wanted, found, 0.0) if indices.size else found

    return lookup


def ranked_block(transition, signals, ranker, space, seeds, vectors, *, damping, k) -> list[dict]:
    """:func:`ranked_candidates` of several seeds (``vectors``: each seed's sorted indices and values),
    the ranker scoring every pool of the block in one call and each attribution in one more (the model's
    per-call cost, not its per-row cost, dominates a single pool)."""
    pools, blocks = [], []
    for seed, (indices, values) in zip(seeds, vectors, strict=True):
        walk = click_walk(signals, int(seed))
        pools.append(candidate_pool(signals, int(seed), indices, values, POOL, walk))
        blocks.append(pair_features(signals, int(seed), pools[-1], indices, values, walk))
    features = np.vstack(blocks) if blocks else np.zeros((0, len(FEATURES)), dtype=np.float32)
    scores = ranker.score(features)
    bounds = np.cumsum([0] + [pool.size for pool in pools])
    orders = [top_k(scores[bounds[row] : bounds[row + 1]], k) for row in range(len(pools))]
    chosen_rows = np.concatenate([bounds[row] + order for row, order in enumerate(orders)]).astype(np.int64)
    chosen = features[chosen_rows]
    text_part, link_part, reading_part = ranker.contributions(
        chosen, absent_values(signals.text_top), scores[chosen_rows]
    )
    linked = chosen[:, FEATURES.index("out_link")] > 0
    by_link = linked & (link_part > np.maximum(text_part, reading_part)) & (link_part > 0)
    textual = (text_part > np.maximum(link_part, reading_part)) & (text_part > 0)
    # sessions went on from the seed to the page (pairs of fewer than MIN_SESSIONS sessions are not kept)
    read_on = chosen[:, FEATURES.index("goes_on")] > 0
    read_on &= (reading_part > np.maximum(link_part, text_part)) & (reading_part > 0)
    found, first = [], 0
    for row, (seed, (indices, values)) in enumerate(zip(seeds, vectors, strict=True)):
        part = slice(first, first + orders[row].size)
        first = part.stop
        pages = pools[row][orders[row]]
        indices, values = np.asarray(indices), np.asarray(values)
        lookup = _lookup(indices, values, signals.size, transition)
        sending = values > 0
        explained = contributions(
            transition.backward,
            lookup,
            pages,
            np.asarray(space),
            damping=damping,
            support=(transition.forward, indices[sending], values[sending]),
        )
        explained.via[by_link[part]] = seed
        explained.kind[by_link[part]] = VIA_PAGE
        explained.kind[textual[part]] = SIMILAR_TEXT
        explained.kind[read_on[part]] = READ_ON
        found.append(
            {
                "pages": pages,
                "scores": lookup(pages),
                "combined": scores[chosen_rows[part]],
                "via": explained.via,
                "space": explained.space,
                "kind": explained.kind,
            }
        )
    return found


def seed_vectors(
    transition: Transition, seeds: np.ndarray, method: str, configuration: Configuration, workers=1
):
    """(indices, values) of each seed's personalised PageRank vector, one seed after another."""
    return solved_seeds(transition, seeds, method, configuration, workers)[0]


def solved_seeds(transition: Transition, seeds: np.ndarray, method: str, configuration, workers=1):
    """:func:`seed_vectors`, and each vector's L1 error bound: the push's residual mass, or the power
    iteration's ``tol · α / (1 − α)``."""
    damping = configuration.damping
    if method == "power":
        restart = np.zeros((transition.n, seeds.size))
        restart[seeds, np.arange(seeds.size)] = 1.0
        vectors = personalised_pagerank(
            transition, restart, damping=damping, tol=configuration.tol, workers=workers
        ).vectors
        everything = np.arange(transition.n)
        columns = np.ascontiguousarray(vectors.T)  # one contiguous row per seed
        found = [(everything, columns[column]) for column in range(seeds.size)]
        bound = configuration.tol * damping / (1.0 - damping)
        return found, np.full(seeds.size, bound, dtype=np.float32)
    found, errors = [], np.zeros(seeds.size, dtype=np.float32)
    for row, seed in enumerate(seeds.tolist()):
        result = push(transition, seed, damping=damping, epsilon=configuration.related_epsilon)
        found.append((np.asarray(result.vector.coords[0]), np.asarray(result.vector.data)))
        errors[row] = result.residual_mass
    return found, errors


def _block(arrays: tuple, seeds, method, configuration, k, workers=1) -> dict:
    """Candidates of ``seeds``; ``arrays`` = (transition, global vector, archived, space codes, text,
    ranker, its signals): :func:`ranked_candidates` when there is a ranker, else :func:`candidates`."""
    transition, global_vector, archived, space, text, ranker, signals = arrays
    out = _empty(seeds.size, k)
    columns, out["error"] = solved_seeds(transition, seeds, method, configuration, workers)
    if ranker is not None:
        ranked = ranked_block(
            transition, signals, ranker, space, seeds.tolist(), columns, damping=configuration.damping, k=k
        )
        for row, found in enumerate(ranked):
            for name, array in found.items():
                out[name][row, : array.size] = array
        return out
    for row, (seed, (indices, values)) in enumerate(zip(seeds.tolist(), columns, strict=True)):
        found = candidates(
            transition,
            global_vector,
            archived,
            space,
            seed,
            indices,
            values,
            damping=configuration.damping,
            lift=configuration.lift,
            k=k,
            text=text,
            text_weight=configuration.text_weight,
        )
        for name, array in found.items():
            out[name][row, : array.size] = array
    return out


def _read_arrays(folder: str) -> tuple:
    path = Path(folder)
    size = int(load_array(path, "archived").size)
    arrays = (load_array(path, name) for name in ("global", "archived", "space"))
    text = load_text_neighbours(path / "text") if (path / "text").is_dir() else None
    transition = load_transition(path, size)
    global_vector, archived, space = arrays
    ranker = load_ranker(path / "ranker")
    signals = None
    if ranker is not None:
        views = load_array(path, "views")
        signals = index_signals(path, transition, global_vector, space, views, archived, text)
    return transition, global_vector, archived, space, text, ranker, signals


_arrays = lru_cache(maxsize=2)(_read_arrays)  # a worker process reads the staging folder once


def related_block(settings: tuple, seeds: np.ndarray) -> dict:
    """Candidates of a batch of seed pages (run in a worker process; reads the staging folder)."""
    folder, method, values, k = settings
    return _block(_arrays(folder), seeds, method, Configuration.from_dict(values), k)


def write_related(
    staging: Path,
    chosen,
    method: str,
    configuration: Configuration,
    k: int,
    workers: int,
    progress=None,
    cluster=None,
    earlier=None,
) -> None:
    """Precompute the candidates of the ``chosen`` pages into ``staging`` (``related_*.npy``, written
    into as blocks arrive, so the lists are never all in memory), with each list's L1 error bound
    (``related_error.npy``: the push's residual mass, or the power iteration's bound) and how far it may
    have moved since it was computed (``related_drift.npy``: 0, or what a taken-over list carries).

    The power iteration solves wide blocks of seeds in this process (``workers`` threads); the push runs
    batches in ``workers`` processes, or as tasks on ``cluster`` (a :class:`rankrec.cluster.ClusterAddress`).
    ``earlier`` (:class:`rankrec.reuse_lists.TakenOver`) copies the lists it holds instead of computing them.
    """
    arrays_here = _read_arrays(str(staging))
    size = arrays_here[0].n
    arrays = {
        name: np.lib.format.open_memmap(staging / f"related_{name}.npy", "w+", dtype, (chosen.size, k))
        for name, (dtype, _) in _FIELDS.items()
    }
    for name in ("error", "drift"):  # per list: its vector's L1 error, and how far it moved since
        arrays[name] = np.lib.format.open_memmap(
            staging / f"related_{name}.npy", "w+", np.float32, (chosen.size,)
        )
    for name, (_, fill) in _FIELDS.items():
        if fill:  # a new file reads as zeros already
            arrays[name][:] = fill
    todo = np.arange(chosen.size)
    if earlier is not None:
        todo = earlier.copy_into(arrays)
    done = chosen.size - todo.size
    if progress is not None and done:
        progress("related lists", done, chosen.size)

    def store_block(rows: np.ndarray, block: dict) -> None:
        nonlocal done
        for name, values in block.items():
            arrays[name][rows] = values
        done += rows.size
        if progress is not None:
            progress("related lists", done, chosen.size)

    if method == "power":
        width = int(np.clip(_BLOCK_CELLS // max(size, 1), 16, _WIDEST))
        for first in range(0, todo.size, width):
            rows = todo[first : first + width]
            store_block(rows, _block(arrays_here, chosen[rows], method, configuration, k, workers))
    else:
        batch = max(1, min(512, -(-todo.size // (4 * workers))))  # several batches per worker
        batches = [todo[first : first + batch] for first in range(0, todo.size, batch)]
        settings = (str(staging), method, configuration.to_dict(), k)
        tasks = [(settings, chosen[rows]) for rows in batches]
        here = cluster is None and len(tasks) <= 1
        with block_runner(cluster, staging) as run:
            blocks = run(related_block, tasks, 1 if here else workers, ahead=4)
            for rows, block in zip(batches, blocks, strict=True):
                store_block(rows, block)
    for values in arrays.values():
        values.flush()
    arrays.clear()  # unmaps the files
    row = np.full(size, -1, dtype=np.int32)
    row[chosen] = np.arange(chosen.size, dtype=np.int32)
    np.save(staging / "related_row.npy", row)


def _index_arrays(index: Index) -> tuple:
    """The arrays :func:`_block` reads, from a loaded index."""
    ranker = index.ranker
    return (
        index.transition,
        index.global_vector,
        index.archived,
        index.space,
        index.text,
        ranker,
        None if ranker is None else index.signals,
    )


def fill_candidates(index: Index, numbers) -> list[int]:
    """Compute the candidates of those of ``numbers`` that are neither precomputed nor cached, a block
    at a time by the build's method, into ``index.cache``; return the page numbers added (for the
    caller to drop again). Exporting every page asks for them in blocks this way; a first request
    asks for one page."""
    numbers = np.asarray(numbers, dtype=np.int64)
    missing = numbers[np.asarray(index.related["row"])[numbers] < 0].tolist()
    missing = [number for number in dict.fromkeys(missing) if number not in index.cache]
    method = index.manifest.precompute["method"]
    # push: one seed at a time whatever the block, so a block's lists are each page's own; power: the
    # block's iteration count is its slowest column's, so one seed per solve, as a first request solves it
    width = 1 if method == "power" else _FILL_BLOCK
    arrays = _index_arrays(index)
    for first in range(0, len(missing), width):
        seeds = np.array(missing[first : first + width], dtype=np.int64)
        block = _block(arrays, seeds, method, index.configuration, index.manifest.k_related)
        for row, number in enumerate(seeds.tolist()):
            count = int(np.count_nonzero(block["pages"][row] >= 0))
            index.cache[number] = {
                name: values[row, :count].copy() for name, values in block.items() if name in _FIELDS
            }
    return missing


def page_candidates(index: Index, number: int) -> dict:
    """Precomputed candidates of a page, or computed now by the build's method (then cached)."""
    related = index.related
    row = int(related["row"][number])
    if row >= 0:
        count = int(np.count_nonzero(related["pages"][row] >= 0))
        return {name: np.asarray(values[row, :count]) for name, values in related.items() if name != "row"}
    if number not in index.cache:
        fill_candidates(index, [number])
    return index.cache[number]

"""Related candidates of a page: the best pages of its personalised PageRank vector, explained.

Built for the chosen pages at build time (:func:`write_related`, into the staging folder) and, for a page
that was not precomputed, on its first request (:func:`page_candidates`, then cached in the loaded
index), by the same method either way: block power iteration (exact to ``tol``) on small wikis, forward
push (``related_epsilon``) on large ones. Candidates drop only the page itself, archived pages and pages
without score, so per-reader filters still leave full lists.
"""

from __future__ import annotations

from concurrent.futures import ProcessPoolExecutor
from functools import lru_cache
from pathlib import Path

import numpy as np

from ..configuration import Configuration
from ..index import Index, load_array, load_transition
from ..pagerank import Transition, personalised_pagerank, push
from .explain import contributions
from .select import top_k

DEFAULT_K_RELATED = 50  # enough candidates that access and "already linked" filters still leave 10-20
_BLOCK_CELLS = 1 << 22  # pages × seed columns of one block power iteration (32 MiB of float64)
_WIDEST = 64  # seeds per block: wider blocks were measured slower (cache), narrower waste the lanes
_FIELDS = {
    "pages": (np.int32, -1),
    "scores": (np.float32, 0),
    "via": (np.int32, -1),
    "space": (np.int32, -1),
    "kind": (np.int8, 0),
}


def _empty(rows: int, k: int) -> dict:
    return {name: np.full((rows, k), fill, dtype=dtype) for name, (dtype, fill) in _FIELDS.items()}


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
        if indices.size == values.size == np.asarray(archived).size:  # a whole vector: read it directly
            return values[wanted]
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


def _vectors(transition: Transition, seeds: np.ndarray, method: str, configuration: Configuration, workers=1):
    """(indices, values) of each seed's personalised PageRank vector, one seed after another."""
    damping = configuration.damping
    if method == "power":
        restart = np.zeros((transition.n, seeds.size))
        restart[seeds, np.arange(seeds.size)] = 1.0
        vectors = personalised_pagerank(
            transition, restart, damping=damping, tol=configuration.tol, workers=workers
        ).vectors
        everything = np.arange(transition.n)
        columns = np.ascontiguousarray(vectors.T)  # one contiguous row per seed
        return [(everything, columns[column]) for column in range(seeds.size)]
    found = []
    for seed in seeds.tolist():
        result = push(transition, seed, damping=damping, epsilon=configuration.related_epsilon)
        found.append((np.asarray(result.vector.coords[0]), np.asarray(result.vector.data)))
    return found


def _block(transition, global_vector, archived, space, seeds, method, configuration, k, workers=1) -> dict:
    out = _empty(seeds.size, k)
    columns = _vectors(transition, seeds, method, configuration, workers)
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
        )
        for name, array in found.items():
            out[name][row, : array.size] = array
    return out


def _read_arrays(folder: str) -> tuple:
    path = Path(folder)
    size = int(load_array(path, "archived").size)
    arrays = (load_array(path, name) for name in ("global", "archived", "space"))
    return load_transition(path, size), *arrays


_arrays = lru_cache(maxsize=2)(_read_arrays)  # a worker process reads the staging folder once


def related_block(settings: tuple, seeds: np.ndarray) -> dict:
    """Candidates of a batch of seed pages (run in a worker process; reads the staging folder)."""
    folder, method, values, k = settings
    transition, global_vector, archived, space = _arrays(folder)
    return _block(
        transition, global_vector, archived, space, seeds, method, Configuration.from_dict(values), k
    )


def write_related(
    staging: Path, chosen, method: str, configuration: Configuration, k: int, workers: int, progress=None
) -> None:
    """Precompute the candidates of the ``chosen`` pages into ``staging`` (``related_*.npy``).

    The power iteration solves wide blocks of seeds in this process (``workers`` threads); the push runs
    batches in ``workers`` processes.
    """
    transition, global_vector, archived, space = _read_arrays(str(staging))
    size = transition.n
    arrays = _empty(chosen.size, k)
    done = 0

    def store_block(first: int, block: dict) -> None:
        nonlocal done
        for name, values in block.items():
            arrays[name][first : first + values.shape[0]] = values
        done += block["pages"].shape[0]
        if progress is not None:
            progress("related lists", done, chosen.size)

    if method == "power":
        width = int(np.clip(_BLOCK_CELLS // max(size, 1), 16, _WIDEST))
        for first in range(0, chosen.size, width):
            seeds = chosen[first : first + width]
            store_block(
                first,
                _block(transition, global_vector, archived, space, seeds, method, configuration, k, workers),
            )
    else:
        batch = max(1, min(512, -(-chosen.size // (4 * workers))))  # several batches per worker
        batches = [chosen[first : first + batch] for first in range(0, chosen.size, batch)]
        offsets = np.cumsum([0] + [seeds.size for seeds in batches])[:-1]
        settings = (str(staging), method, configuration.to_dict(), k)
        if workers == 1 or len(batches) <= 1:
            for first, seeds in zip(offsets, batches, strict=True):
                store_block(first, related_block(settings, seeds))
        else:
            import multiprocessing

            context = multiprocessing.get_context("spawn")  # numba's thread pool is not fork-safe
            with ProcessPoolExecutor(max_workers=workers, mp_context=context) as pool:
                blocks = pool.map(related_block, [settings] * len(batches), batches)
                for first, block in zip(offsets, blocks, strict=True):
                    store_block(first, block)
    row = np.full(size, -1, dtype=np.int32)
    row[chosen] = np.arange(chosen.size, dtype=np.int32)
    np.save(staging / "related_row.npy", row)
    for name, values in arrays.items():
        np.save(staging / f"related_{name}.npy", values)


def page_candidates(index: Index, number: int) -> dict:
    """Precomputed candidates of a page, or computed now by the build's method (then cached)."""
    related = index.related
    row = int(related["row"][number])
    if row >= 0:
        count = int(np.count_nonzero(related["pages"][row] >= 0))
        return {name: np.asarray(values[row, :count]) for name, values in related.items() if name != "row"}
    found = index.cache.get(number)
    if found is None:
        block = _block(
            index.transition,
            index.global_vector,
            index.archived,
            index.space,
            np.array([number]),
            index.manifest.precompute["method"],
            index.configuration,
            index.manifest.k_related,
        )
        count = int(np.count_nonzero(block["pages"][0] >= 0))
        found = index.cache[number] = {name: values[0, :count] for name, values in block.items()}
    return found

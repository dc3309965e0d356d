"""A module-level function over many argument tuples in worker processes, the results in order.

Spawned, not forked: numba's thread pool is not fork-safe, and a parent holding an open SQLite
connection must not carry it across a fork (SQLite's own advice). At most ``ahead`` tasks per worker
wait ahead of the one being read, which bounds what the results hold in memory.
"""

from __future__ import annotations

import multiprocessing
from collections import deque
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import Future, ProcessPoolExecutor
from contextlib import contextmanager
from pathlib import Path
from typing import Any


def in_order(
    function: Callable[..., Any], arguments: Iterable[tuple], workers: int, *, ahead: int = 2
) -> Iterator[Any]:
    """``function(*a)`` for each ``a`` of ``arguments``, in their order: here when ``workers`` is 1,
    else in that many spawned processes (``function`` must be importable by name).

    >>> list(in_order(divmod, [(7, 2), (9, 4)], 1))
    [(3, 1), (2, 1)]
    """
    if workers == 1:
        for argument in arguments:
            yield function(*argument)
        return
    context = multiprocessing.get_context("spawn")
    with ProcessPoolExecutor(max_workers=workers, mp_context=context) as pool:
        pending: deque[Future] = deque()
        try:
            for argument in arguments:
                pending.append(pool.submit(function, *argument))
                if len(pending) >= ahead * workers:
                    yield pending.popleft().result()
            while pending:
                yield pending.popleft().result()
        finally:  # a failure or an early stop: nothing more starts
            for waiting in pending:
                waiting.cancel()


@contextmanager
def block_runner(cluster, folder: str | Path) -> Iterator[Callable[..., Iterator[Any]]]:
    """:func:`in_order`, or its Dask form on ``cluster`` (a :class:`rankrec.cluster.ClusterAddress`;
    its workers read ``folder``, the client is open while the ``with`` block runs)."""
    if cluster is None:
        yield in_order
        return
    from .cluster import cluster_client, cluster_in_order

    with cluster_client(cluster) as client:

        def on_cluster(function, arguments, workers: int, *, ahead: int = 2) -> Iterator[Any]:
            return cluster_in_order(client, function, arguments, folder, ahead=ahead)

        yield on_cluster


@contextmanager
def task_runner(cluster, shared: tuple) -> Iterator[Callable[..., list]]:
    """``run_all(function, items, on_each)``: ``function(*shared, item)`` for every item, the results in
    the items' order, ``on_each(position, item, result)`` called as each is done. Here one after another,
    or side by side as tasks of the Dask ``cluster`` (``shared`` sent to every worker once)."""
    if cluster is None:

        def one_by_one(function, items, on_each) -> list:
            found = []
            for position, item in enumerate(items):
                found.append(function(*shared, item))
                on_each(position, item, found[-1])
            return found

        yield one_by_one
        return
    from .cluster import cluster_client, cluster_map

    with cluster_client(cluster) as client:
        yield cluster_map(client, shared)

"""Running blocks of pages on a Dask distributed cluster (the optional extra ``rankrec[cluster]``).

A build's related-list step and an export hand :func:`rankrec._pool.in_order` blocks of pages; given a
cluster, each block becomes one Dask task instead of one task of a local process pool. Nothing large
travels with a task: it names the folder it reads (the build's staging folder, or the published index),
and each worker process memory-maps that folder once. So the folder must be on storage that every worker
mounts at the same path; :func:`check_workers` checks that before the first task, and that the workers
run this version of rankrec. An evaluation's sweeps send what they read instead (:func:`cluster_map`).

A worker lost in the middle of a task (killed, out of memory, its machine gone) is Dask's to handle: the
scheduler runs the task again elsewhere, up to its ``allowed-failures`` limit (3 unless configured). A
block's result is stored by its place in the order, so a task run twice can neither repeat nor drop a
block.
"""

from __future__ import annotations

import logging
import os
import re
from collections import deque
from collections.abc import Callable, Iterable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from . import __version__
from .errors import ClusterUnavailable, UsageError

CONNECT_SECONDS = 30  # how long to wait for a remote scheduler (common practice: Dask's own default)
LOCAL_LIMIT = 256  # most workers `local:N` starts
_REMOTE = re.compile(r"(?P<scheme>tcp|tls)://(?P<host>\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9.-]+):(?P<port>\d{1,5})")
_LOCAL = re.compile(r"local:(?P<count>\d{1,4})")


@dataclass(frozen=True)
class ClusterAddress:
    """Where blocks run: a running scheduler (``scheduler``) or ``local_workers`` processes started here."""

    scheduler: str | None = None
    local_workers: int | None = None

    def __str__(self) -> str:
        return self.scheduler if self.scheduler is not None else f"local:{self.local_workers}"


def cluster_address(text: str) -> ClusterAddress:
    """Read ``--cluster``: ``tcp://HOST:PORT`` or ``tls://HOST:PORT`` (a running Dask scheduler) or
    ``local:N`` (start N single-threaded worker processes on this machine for the run).

    >>> cluster_address("tcp://10.0.0.5:8786")
    ClusterAddress(scheduler='tcp://10.0.0.5:8786', local_workers=None)
    >>> cluster_address("local:4")
    ClusterAddress(scheduler=None, local_workers=4)
    """
    text = str(text).strip()
    local = _LOCAL.fullmatch(text)
    if local:
        count = int(local["count"])
        if not 1 <= count <= LOCAL_LIMIT:
            raise UsageError(f"--cluster local:N needs N from 1 to {LOCAL_LIMIT}; got {text!r}")
        return ClusterAddress(local_workers=count)
    remote = _REMOTE.fullmatch(text)
    if remote and 1 <= int(remote["port"]) <= 65535:
        return ClusterAddress(scheduler=text)
    raise UsageError(
        f"--cluster must be tcp://HOST:PORT or tls://HOST:PORT (a running Dask scheduler) or local:N; "
        f"got {text[:80]!r}"
    )


def _distributed():
    try:
        import distributed
    except ImportError as missing:
        raise UsageError(
            "--cluster needs Dask distributed, an optional extra: pip install 'rankrec[cluster]'"
        ) from missing
    return distributed


def _worker_facts(folder: str | None) -> tuple[str, bool]:
    """Run on each worker: its rankrec version, and whether it can read ``folder`` (None: not asked)."""
    from . import __version__ as version

    return version, folder is None or (os.access(folder, os.R_OK | os.X_OK) and Path(folder).is_dir())


def check_workers(client, folder: str | Path | None) -> int:
    """The cluster's worker threads, after checking that every worker runs this rankrec and reads
    ``folder`` (None: no folder); :class:`ClusterUnavailable` otherwise (no workers, other versions,
    folder not shared)."""
    where = _where(client)
    facts = client.run(_worker_facts, None if folder is None else str(folder))
    if not facts:
        raise ClusterUnavailable(where, "the scheduler has no workers")
    versions = sorted({version for version, _ in facts.values()} - {__version__})
    if versions:
        raise ClusterUnavailable(
            where,
            f"its workers run rankrec {', '.join(versions)}, this is {__version__}; install the same version",
        )
    blind = sorted(worker for worker, (_, readable) in facts.items() if not readable)
    if blind:
        raise ClusterUnavailable(
            where,
            f"{len(blind)} of {len(facts)} workers (first {blind[0]}) cannot read {folder}; put the index "
            "on storage every worker mounts at the same path",
        )
    threads = sum(worker["nthreads"] for worker in client.scheduler_info()["workers"].values())
    return max(1, threads)


def check_reachable(address: ClusterAddress) -> None:
    """Fail early, before hours of other work: Dask must be installed and a remote scheduler answer."""
    _distributed()
    if address.scheduler is not None:
        with cluster_client(address):
            pass


def local_cluster(workers: int):
    """A Dask cluster of ``workers`` single-threaded worker processes on this machine's loopback."""
    return _distributed().LocalCluster(
        n_workers=workers,
        threads_per_worker=1,
        processes=True,
        host="127.0.0.1",  # scheduler and workers on loopback only
        dashboard_address="127.0.0.1:0",  # its status pages on a free loopback port
        silence_logs=logging.ERROR,
    )


@contextmanager
def cluster_client(address: ClusterAddress) -> Iterator[Any]:
    """A Dask client for ``address`` (a local cluster is started here and stopped on leaving)."""
    distributed = _distributed()
    if address.local_workers is not None:
        cluster = local_cluster(address.local_workers)
        try:
            with distributed.Client(cluster) as client:
                yield client
        finally:
            cluster.close()
        return
    try:
        client = distributed.Client(address.scheduler, timeout=CONNECT_SECONDS)
    except (OSError, TimeoutError) as failed:
        raise ClusterUnavailable(address.scheduler, f"cannot connect ({failed})") from failed
    with client:
        yield client


def cluster_in_order(
    client, function: Callable[..., Any], arguments: Iterable[tuple], folder: str | Path, *, ahead: int = 2
) -> Iterator[Any]:
    """``function(*a)`` for each ``a`` of ``arguments`` as Dask tasks, the results in their order; at
    most ``ahead`` tasks per worker thread wait ahead of the one being read."""
    distributed = _distributed()
    threads = check_workers(client, folder)
    pending: deque = deque()
    try:
        for argument in arguments:
            pending.append(client.submit(function, *argument, pure=False))
            if len(pending) >= ahead * threads:
                yield _result(pending.popleft(), distributed)
        while pending:
            yield _result(pending.popleft(), distributed)
    finally:  # a failure or an early stop: nothing more runs
        for waiting in pending:
            waiting.cancel()


def cluster_map(client, shared: tuple) -> Callable[..., list]:
    """``run_all(function, items, on_each)`` on ``client``'s cluster: one task per item, ``shared`` sent
    to every worker once (see :func:`rankrec._pool.task_runner`)."""
    distributed = _distributed()
    check_workers(client, None)
    sent = client.scatter(list(shared), broadcast=True)

    def run_all(function, items, on_each) -> list:
        items = list(items)
        tasks = [client.submit(function, *sent, item, pure=False) for item in items]
        places = {task.key: position for position, task in enumerate(tasks)}
        found: list = [None] * len(tasks)
        try:
            for task in distributed.as_completed(tasks):
                position = places[task.key]
                found[position] = _result(task, distributed)
                on_each(position, items[position], found[position])
        finally:
            for task in tasks:
                task.cancel()
        return found

    return run_all


def _where(client) -> str:
    return str(client.scheduler_info().get("address", "the cluster"))


def _result(future, distributed) -> Any:
    try:
        return future.result()
    except distributed.KilledWorker as killed:
        raise ClusterUnavailable(
            str(getattr(killed.last_worker, "address", "the cluster")),
            f"a block of pages lost its worker on each of {killed.allowed_failures + 1} attempts; see the "
            "workers' logs (a memory limit?)",
        ) from killed

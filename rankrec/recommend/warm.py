"""Warming a loaded index up: one list of each kind before the first request.

The first list of a kind in a process loads the compiled code it runs (numba's cache) and reads the
arrays it touches from disk: on the 1,000,000-page synthetic wiki the first landing ordering of a
process took 1.2 s, the later ones 14 ms (median). The service calls :func:`warm_up` on every index it
loads, before it swaps it in, so no reader's request pays for that; an index that cannot answer is
refused there, and the old one keeps serving. It also asks the kernel to read the index's files ahead
(:func:`prefetch`), which the first lists after a restart would otherwise wait for page by page.
"""

from __future__ import annotations

import os
import time
from pathlib import Path

import numpy as np

from ..index import Index
from .audience import Reader, Team
from .lists import landing, recommend, related


def prefetch(folder: Path) -> int:
    """Ask the kernel to read every file of an index folder into its page cache, in the background
    (``posix_fadvise`` WILLNEED: nothing waits, nothing is held in this process's memory); returns the
    bytes asked for. The lists read their arrays memory-mapped: without this, the first lists after a
    restart wait for the disk page by page."""
    asked = 0
    for path in sorted(Path(folder).resolve().rglob("*.npy")):
        try:
            descriptor = os.open(path, os.O_RDONLY)
        except OSError:
            continue
        try:
            os.posix_fadvise(descriptor, 0, 0, os.POSIX_FADV_WILLNEED)
            asked += os.fstat(descriptor).st_size
        except (OSError, AttributeError):  # a system without fadvise: the lists read as they go
            pass
        finally:
            os.close(descriptor)
    return asked


def warm_up(index: Index) -> float:
    """Prefetch the index's files (:func:`prefetch`), then ask ``index`` for a related list, a personal
    list and (when it stores team vectors) a landing ordering, for nobody: the page of highest global
    PageRank, a profile of that page alone, the first stored team with public pages only. Returns the
    seconds it took; errors are the lists' own."""
    started = time.perf_counter()
    prefetch(index.folder)
    page = int(index.global_order[0])
    related(index, page)
    restart = np.zeros(index.size)
    restart[page] = 1.0
    recommend(index, Reader(user="", groups=frozenset(), restart=restart, recent=np.zeros(0, dtype=np.int64)))
    if index.team_names:
        team = Team(
            name=index.team_names[0],
            members=0,
            readers=0,
            restart=restart,
            visible=index.public,
            read_by=np.zeros(index.size, dtype=np.int64),
        )
        landing(index, team)
    return time.perf_counter() - started

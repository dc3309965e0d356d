"""The push threshold personal lists are served with, chosen by measurement when an index is built.

A reader's vector is the basis combination plus a forward push of the rest of their profile
(:func:`rankrec.recommend.lists.recommend`), and the push's work grows as ``1/ε``. The configuration's
``vector_epsilon`` is the accuracy asked for. A coarser threshold often lists the same pages: on the
1,000,000-page synthetic wiki, 60 readers' top-10 lists at ε 1e-4 and 1e-5 held the pages of their lists
at 1e-7, at a sixth and a quarter of the time of 1e-6; on Wikispeedia (4,600 pages) 1e-5 already changed
one page in a hundred. So no one threshold suits every wiki, and the build measures it
(:func:`calibrate_vector_epsilon`): the served threshold is the coarsest of ``vector_epsilon × LADDER``
whose lists, for a seeded sample of the evidence's own readers and through the serving function itself,
hold at least ``AGREEMENT`` (99.5%) of the pages of the lists at ``vector_epsilon``. The order within a
list may differ where two pages' scores are closer than either threshold can tell apart, and so may a
page at the list's boundary: at 1M pages one near-tie at the tenth place of one sampled list flipped at
every coarser threshold, so asking for every page made the choice depend on which readers the sample
held. Measured on 512 readers of that wiki (1e-4: 99.79% of the pages; 3e-5 and 1e-5: 99.92%; 3e-6:
99.98%), 2,000 samples of 128 readers chose 1e-4 in 99.3% of the draws under this tolerance, against
five different thresholds, none in more than 37% of the draws, under the every-page rule. A sample
cannot prove the agreement for every reader; the manifest records the choice, the sample's size and
every agreement measured (``serving``), ``Index.vector_epsilon`` serves it, and an evaluation's builds
calibrate the same way, so the evaluated lists are the served ones. Each result's ``error_bound`` is
that of the served threshold.
"""

from __future__ import annotations

import time
from dataclasses import asdict, dataclass

import numpy as np

from ..configuration import Configuration
from ..evidence import Evidence
from ..index import Index
from ..profiles import SECONDS_PER_DAY, reader_profiles
from .audience import Reader
from .lists import recommend

LADDER = (100.0, 30.0, 10.0, 3.0)  # coarsest first; the configured threshold is the fallback
COARSEST = 1e-3  # a push threshold above this leaves most of a vector unpushed (common practice: 1e-4..1e-7)
AGREEMENT = 0.995  # share of the reference lists' pages a coarser threshold's lists must hold (one in 200
# may differ: a near-tie at a list's boundary flips at any threshold; measured, see the module docstring)
SAMPLE = 128  # readers measured (seeded); a wiki with fewer calibrates on all of them
LIST_LENGTH = 10  # the personal list's default length (rankrec.recommend.recommend); longer lists
# are not measured, and may differ further down


@dataclass(frozen=True)
class Calibration:
    """The served threshold, the configured one, the readers measured, the agreement of the served
    threshold's lists, the agreement required, every threshold tried (ε as text → agreement) and the
    seconds it took."""

    vector_epsilon: float
    configured: float
    readers: int
    agreement: float
    required: float
    tried: dict[str, float]
    seconds: float

    def to_dict(self) -> dict:
        return asdict(self)


def sample_readers(
    evidence: Evidence, configuration: Configuration, count: int = SAMPLE, *, seed: int = 0
) -> list[Reader]:
    """Up to ``count`` readers with reading history (a seeded sample), each as ``reader_from_store`` would
    give them at the evidence's latest view: profile, access groups and pages read recently."""
    views = evidence.views
    if views.times.size == 0:
        return []
    profiles, codes = reader_profiles(views, evidence.size, configuration, now=views.latest)
    rows = np.flatnonzero(np.diff(profiles.indptr))
    if rows.size == 0:
        return []
    rows = np.sort(np.random.default_rng(seed).choice(rows, min(count, rows.size), replace=False))
    fresh = (views.pages >= 0) & (views.times >= views.latest - configuration.recent_days * SECONDS_PER_DAY)
    readers = []
    for row in rows.tolist():
        user = int(codes[row])
        restart = profiles[[row]].toarray().ravel()
        recent = np.unique(views.pages[fresh & (views.users == user)]).astype(np.int64)
        groups = evidence.reader_groups.get(user, frozenset())
        readers.append(Reader(user=str(user), groups=groups, restart=restart, recent=recent))
    return readers


def _lists(index: Index, readers: list[Reader], epsilon: float, k: int) -> list[set[str]]:
    served = (recommend(index, reader, k=k, epsilon=epsilon) for reader in readers)
    return [{item.page for item in result.items} for result in served]


def calibrate_vector_epsilon(
    index: Index, readers: list[Reader], *, k: int = LIST_LENGTH, agreement: float = AGREEMENT
) -> Calibration:
    """The coarsest threshold of the ladder whose served lists keep ``agreement`` of the items of the
    lists at the index configuration's ``vector_epsilon`` (that threshold itself when none does, or when
    there are no readers to measure)."""
    started = time.perf_counter()
    configured = float(index.configuration.vector_epsilon)
    chosen, kept, tried = configured, 1.0, {}
    reference = _lists(index, readers, configured, k)
    items = sum(map(len, reference))
    if items:
        for factor in LADDER:
            epsilon = float(f"{configured * factor:.3g}")
            if epsilon > COARSEST:
                continue
            found = _lists(index, readers, epsilon, k)
            share = sum(len(a & b) for a, b in zip(found, reference, strict=True)) / items
            tried[f"{epsilon:.3g}"] = round(share, 4)
            if share >= agreement:
                chosen, kept = epsilon, share
                break
    return Calibration(
        vector_epsilon=chosen,
        configured=configured,
        readers=len(readers),
        agreement=round(kept, 4),
        required=agreement,
        tried=tried,
        seconds=round(time.perf_counter() - started, 3),
    )

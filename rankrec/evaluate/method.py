"""rankrec itself behind the baselines' interface: the lists served by an index built from a training part.

For one split, :func:`rankrec_lists`

1. builds an index with :func:`rankrec.build.build_from_evidence`, the code ``rankrec build`` runs, from the
   store's wiki (pages, links, access groups, topics) and the split's *training* views only, with the
   configuration given (navigation blend, damping, lift, ...); the related lists of the pages the queries
   start from are precomputed, as a full build precomputes every page's;
2. asks the serving functions for every query's list: :func:`rankrec.recommend.related` for a session
   that starts from one page, :func:`rankrec.recommend.recommend` for a reader (user tasks: their training
   history as a profile at the query's time; a session of several pages: those pages). The reader carries
   their access groups, and the split's :func:`~rankrec.evaluate.splits.excluded_pages` are the pages the
   reader "read recently", the only filter a list gets beyond serving's own.

So what is evaluated is what is served: a test (``tests/evaluate/test_method.py``) builds an index from
the training part through a store and checks that the lists are equal item by item.
"""

from __future__ import annotations

import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import scipy.sparse as sp

from .._validation import check_count
from ..build import build_from_evidence
from ..configuration import Configuration
from ..evidence import Evidence
from ..index import load_index
from ..profiles import ViewLog, reader_profiles
from ..progress import Progress, report
from ..recommend import Reader, recommend, related
from .splits import Split, excluded_pages


def training_evidence(evidence: Evidence, split: Split) -> Evidence:
    """``evidence`` with the split's training views as its whole reading history (and, for a task that
    hides links, only the links the split leaves)."""
    if evidence.size != split.size:
        raise ValueError(f"the split has {split.size} pages but the evidence {evidence.size}")
    train = split.train
    training = evidence.with_views(ViewLog(train.users, train.pages, train.times))
    return training if split.links is None else training.with_links(split.links)


def query_seeds(split: Split) -> np.ndarray:
    """Pages whose related lists the queries ask for (sessions that start from one page)."""
    if split.task != "sessions":
        return np.zeros(0, dtype=np.int64)
    prefix = split.queries.pages
    single = (prefix >= 0).sum(axis=1) == 1
    return np.unique(prefix[single, 0])


def query_readers(split: Split, evidence: Evidence, configuration: Configuration) -> list[Reader]:
    """One reader per query: groups from the store, restart from the training part, excluded pages."""
    queries, size = split.queries, split.size
    excluded = sp.csr_array(excluded_pages(split))
    if split.task != "sessions":
        rows = np.full(len(queries), -1, dtype=np.int64)
        blocks, offset = [], 0
        train = split.train
        for now in np.unique(queries.times):  # a profile has one "now": group the queries by time
            chosen = np.flatnonzero(queries.times == now)
            users = queries.users[chosen]
            known = np.isin(train.users, users)
            history = ViewLog(train.users[known], train.pages[known], train.times[known])
            profiles, codes = reader_profiles(history, size, configuration, now=float(now))
            if codes.size:
                position = np.minimum(np.searchsorted(codes, users), codes.size - 1)
                rows[chosen] = np.where(codes[position] == users, offset + position, -1)
            offset += profiles.shape[0]
            blocks.append(profiles)
        restarts = sp.csr_array(sp.vstack(blocks))
    readers = []
    for number in range(len(queries)):
        user = int(queries.users[number])
        if split.task == "sessions":
            pages = queries.pages[number][queries.pages[number] >= 0]
            restart = np.zeros(size)
            restart[pages] = 1.0 / pages.size
        else:
            restart = np.zeros(size)
            if rows[number] >= 0:
                restart = restarts[[rows[number]]].toarray().ravel()
        recent = excluded.indices[excluded.indptr[number] : excluded.indptr[number + 1]].astype(np.int64)
        # held-out links have no readers (a query's "user" is its own number): a public viewer asks
        anonymous = split.name in ("links", "editorial")
        groups = frozenset() if anonymous else evidence.reader_groups.get(user, frozenset())
        readers.append(Reader(user=str(user), groups=groups, restart=restart, recent=recent))
    return readers


def served_lists(index, split: Split, readers: list[Reader], k: int, progress=None) -> np.ndarray:
    """The list the index serves each query (page numbers, ``-1`` padded): see the module docstring."""
    number_of = {index.pages[position]: position for position in range(index.size)}
    lists = np.full((len(readers), k), -1, dtype=np.int64)
    prefix = split.queries.pages
    for query, reader in enumerate(readers):
        if split.task == "sessions" and (prefix[query] >= 0).sum() == 1:
            result = related(index, int(prefix[query, 0]), reader=reader, k=k, exclude_read=True)
        else:
            result = recommend(index, reader, k=k, exclude_read=True)
        found = [number_of[item.page] for item in result.items]
        lists[query, : len(found)] = found
        if (query + 1) % 256 == 0 or query + 1 == len(readers):
            report(progress, "rankrec lists", query + 1, len(readers))
    return lists


def rankrec_lists(
    split: Split,
    evidence: Evidence,
    k: int,
    configuration: Configuration | None = None,
    *,
    hubs: int = 64,
    workers: int = 1,
    progress: Progress | None = None,
    ranker_summary: dict | None = None,
) -> np.ndarray:
    """rankrec's top-``k`` lists for every query of ``split``: an int64 array (queries, k), ``-1`` padded.

    Only ``split.train`` and ``split.queries`` are read (and, from ``evidence``, the wiki but not its views).
    ``ranker_summary``, when given, receives the built index's ranker training summary.
    """
    k = check_count("k", k)
    configuration = Configuration() if configuration is None else configuration
    if split.task != "sessions":  # personal lists never use the related-list ranker: do not train one
        configuration = configuration.with_values(ranker="none")
    training = training_evidence(evidence, split)
    with tempfile.TemporaryDirectory(prefix="rankrec-evaluate-") as folder:
        built = build_from_evidence(
            training,
            Path(folder) / "index",
            configuration,
            hubs=hubs,
            related_pages=query_seeds(split),
            workers=workers,
            settings_source={"kind": "evaluation", "split": split.name},
        )
        index = load_index(built)
        if ranker_summary is not None:
            ranker_summary.clear()
            ranker_summary.update(index.manifest.ranker)
        return served_lists(index, split, query_readers(split, evidence, configuration), k, progress)


@dataclass(frozen=True, eq=False)
class PersonalisedPageRank:
    """rankrec's lists (:func:`rankrec_lists`) behind the baselines' ``recommend(split, k)`` interface."""

    evidence: Evidence
    configuration: Configuration = Configuration()
    hubs: int = 64
    workers: int = 1
    name: str = "rankrec"
    trained: dict = field(default_factory=dict)  # the last index's ranker summary (manifest "ranker")

    def recommend(self, split: Split, k: int) -> np.ndarray:
        return rankrec_lists(
            split,
            self.evidence,
            k,
            self.configuration,
            hubs=self.hubs,
            workers=self.workers,
            ranker_summary=self.trained,
        )

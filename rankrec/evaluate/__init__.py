"""Offline evaluation: per-user ranking metrics over top-k lists and bootstrap uncertainty of their means.

- :mod:`.metrics`: hit rate, precision, recall, AP (MAP), reciprocal rank (MRR), DCG, nDCG, coverage, novelty,
  intra-list diversity and unvisited share, plus :func:`evaluate_lists` for all of them at once.
- :mod:`.statistics`: :func:`bootstrap_ci` and the paired :func:`paired_difference`.
- :mod:`.splits`: :func:`temporal_split`, :func:`last_n_split`, :func:`session_split` (each a :class:`Split`),
  the shared :func:`excluded_pages` and :func:`assert_no_leakage`.
- :mod:`.baselines`: random, most-read, global PageRank, out-links, co-visitation and team-most-read
  recommenders, each with ``recommend(split, k)``, and :func:`check_recommendations`.
"""

from .baselines import (
    CoVisitation,
    GlobalPageRank,
    MostRead,
    OutLinks,
    RandomPages,
    TeamMostRead,
    check_recommendations,
)
from .metrics import (
    average_precision,
    coverage,
    dcg,
    evaluate_lists,
    hit_rate,
    intra_list_diversity,
    ndcg,
    novelty,
    precision,
    recall,
    reciprocal_rank,
    unvisited_share,
)
from .splits import (
    Queries,
    Split,
    Views,
    assert_no_leakage,
    excluded_pages,
    last_n_split,
    session_split,
    temporal_split,
)
from .statistics import PairedComparison, bootstrap_ci, paired_difference

__all__ = [
    "CoVisitation",
    "GlobalPageRank",
    "MostRead",
    "OutLinks",
    "PairedComparison",
    "Queries",
    "RandomPages",
    "Split",
    "TeamMostRead",
    "Views",
    "assert_no_leakage",
    "average_precision",
    "bootstrap_ci",
    "check_recommendations",
    "coverage",
    "dcg",
    "evaluate_lists",
    "excluded_pages",
    "hit_rate",
    "intra_list_diversity",
    "last_n_split",
    "ndcg",
    "novelty",
    "paired_difference",
    "precision",
    "recall",
    "reciprocal_rank",
    "session_split",
    "temporal_split",
    "unvisited_share",
]

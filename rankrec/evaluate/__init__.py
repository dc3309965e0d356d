"""Offline evaluation: per-user ranking metrics over top-k lists and bootstrap uncertainty of their means.

- :mod:`.metrics`: hit rate, precision, recall, AP (MAP), reciprocal rank (MRR), DCG, nDCG, coverage, novelty,
  intra-list diversity and unvisited share, plus :func:`evaluate_lists` for all of them at once.
- :mod:`.statistics`: :func:`bootstrap_ci` and the paired :func:`paired_difference`.
"""

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
from .statistics import PairedComparison, bootstrap_ci, paired_difference

__all__ = [
    "PairedComparison",
    "average_precision",
    "bootstrap_ci",
    "coverage",
    "dcg",
    "evaluate_lists",
    "hit_rate",
    "intra_list_diversity",
    "ndcg",
    "novelty",
    "paired_difference",
    "precision",
    "recall",
    "reciprocal_rank",
    "unvisited_share",
]

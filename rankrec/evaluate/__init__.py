"""Offline evaluation: per-user ranking metrics over top-k lists and bootstrap uncertainty of their means.

- :mod:`.metrics`: hit rate, precision, recall, AP (MAP), reciprocal rank (MRR), DCG, nDCG, coverage, novelty,
  intra-list diversity and unvisited share, plus :func:`evaluate_lists` for all of them at once.
- :mod:`.statistics`: :func:`bootstrap_ci` and the paired :func:`paired_difference`.
- :mod:`.splits`: :func:`temporal_split`, :func:`last_n_split`, :func:`session_split`, each a :class:`Split`;
  :mod:`.tasks` holds that type and the shared :func:`excluded_pages` and :func:`assert_no_leakage`.
- :mod:`.baselines`: random, most-read, global PageRank, out-links, co-visitation and team-most-read
  recommenders, each with ``recommend(split, k)``, and :func:`check_recommendations`.
- :mod:`.method`: rankrec itself behind that interface (:class:`PersonalisedPageRank`, :func:`rankrec_lists`).
- :mod:`.sweeps`: :func:`validation_split` and :func:`choose_configuration` over a :class:`Grid`.
- :mod:`.run`: :func:`load_data`, :func:`make_split`, :func:`run_evaluation`; :mod:`.report` writes the
  report folder (imported on demand: it loads matplotlib); :mod:`.command` is ``rankrec evaluate``.
"""

from ..errors import CutoffOutsideSpan, NothingToEvaluate
from .baselines import (
    CoVisitation,
    GlobalPageRank,
    MostRead,
    OutLinks,
    RandomPages,
    TeamMostRead,
    check_recommendations,
)
from .method import Configuration, PersonalisedPageRank, rankrec_lists
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
from .run import Evaluation, load_data, make_split, run_evaluation
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
from .sweeps import Choice, Grid, choose_configuration, validation_split

__all__ = [
    "Choice",
    "CoVisitation",
    "Configuration",
    "CutoffOutsideSpan",
    "Evaluation",
    "GlobalPageRank",
    "Grid",
    "MostRead",
    "NothingToEvaluate",
    "OutLinks",
    "PairedComparison",
    "PersonalisedPageRank",
    "Queries",
    "RandomPages",
    "Split",
    "TeamMostRead",
    "Views",
    "assert_no_leakage",
    "average_precision",
    "bootstrap_ci",
    "check_recommendations",
    "choose_configuration",
    "coverage",
    "dcg",
    "evaluate_lists",
    "excluded_pages",
    "hit_rate",
    "intra_list_diversity",
    "last_n_split",
    "load_data",
    "make_split",
    "ndcg",
    "novelty",
    "paired_difference",
    "precision",
    "rankrec_lists",
    "recall",
    "reciprocal_rank",
    "run_evaluation",
    "session_split",
    "temporal_split",
    "unvisited_share",
    "validation_split",
]

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

The names below are imported on first use, so that ``rankrec`` commands other than ``evaluate``
start without the evaluation's imports.
"""

from importlib import import_module

_WHERE = {  # name -> the module it comes from, imported on first use (PEP 562)
    "Choice": ".sweeps",
    "CoVisitation": ".baselines",
    "Configuration": ".method",
    "CutoffOutsideSpan": "..errors",
    "Evaluation": ".run",
    "GlobalPageRank": ".baselines",
    "Grid": ".sweeps",
    "MostRead": ".baselines",
    "NothingToEvaluate": "..errors",
    "OutLinks": ".baselines",
    "PairedComparison": ".statistics",
    "PersonalisedPageRank": ".method",
    "Queries": ".splits",
    "RandomPages": ".baselines",
    "Split": ".splits",
    "TeamMostRead": ".baselines",
    "Views": ".splits",
    "assert_no_leakage": ".splits",
    "average_precision": ".metrics",
    "bootstrap_ci": ".statistics",
    "check_recommendations": ".baselines",
    "choose_configuration": ".sweeps",
    "coverage": ".metrics",
    "dcg": ".metrics",
    "evaluate_lists": ".metrics",
    "excluded_pages": ".splits",
    "hit_rate": ".metrics",
    "intra_list_diversity": ".metrics",
    "last_n_split": ".splits",
    "load_data": ".run",
    "make_split": ".run",
    "ndcg": ".metrics",
    "novelty": ".metrics",
    "paired_difference": ".statistics",
    "precision": ".metrics",
    "rankrec_lists": ".method",
    "recall": ".metrics",
    "reciprocal_rank": ".metrics",
    "run_evaluation": ".run",
    "session_split": ".splits",
    "temporal_split": ".splits",
    "unvisited_share": ".metrics",
    "validation_split": ".sweeps",
}

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


def __getattr__(name: str):
    if name not in _WHERE:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(import_module(_WHERE[name], __name__), name)
    globals()[name] = value
    return value

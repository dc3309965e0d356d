"""One offline evaluation of a wiki store: data, split, sweeps, every method, metrics, intervals, comparison.

:func:`load_data` reads the store once (links, views, spaces, teams) into page numbers; :func:`make_split`
cuts the views; :func:`run_evaluation` then

1. carves the validation split from the training part (:func:`rankrec.evaluate.sweeps.validation_split`)
   and scores every baseline on it (nDCG@k), which names the best baseline;
2. chooses rankrec's configuration on the same validation split (:func:`choose_configuration`);
3. runs every baseline and rankrec (chosen configuration) on the *one* test split, scores every list with
   :func:`rankrec.evaluate.metrics.evaluate_lists` (plus graded nDCG and catalogue coverage), gives each
   per-user metric a percentile bootstrap 95% interval over queries, and compares rankrec with the best
   baseline (and nDCG/hit rate with every baseline) by paired bootstrap.

The test split's held-out pages are read only in step 3, to score lists already made.
"""

from __future__ import annotations

import time
from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np

from .._validation import check_choice, check_count, check_fraction, check_positive
from ..configuration import Configuration
from ..derive import chrome_only
from ..errors import CutoffOutsideSpan, InputError, NothingToEvaluate
from ..progress import Progress
from .baselines import (
    CoVisitation,
    GlobalPageRank,
    MostRead,
    OutLinks,
    RandomPages,
    TeamMostRead,
    TextSimilarity,
    check_recommendations,
    training_counts,
)
from .collaborative import EASE, ItemKNN, RP3beta
from .data import EvaluationData, load_data, open_store
from .links import editorial_pairs, editorial_split, held_out_links_split
from .method import PersonalisedPageRank
from .metrics import coverage, evaluate_lists, ndcg
from .splits import SESSION_GAP_SECONDS, Split, last_n_split, session_split, temporal_split, training_pages
from .statistics import bootstrap_ci, paired_difference
from .sweeps import GRID_NAMES, Choice, Grid, choose_configuration, mean_metric, validation_split

__all__ = ["EvaluationData", "Evaluation", "load_data", "make_split", "open_store", "run_evaluation"]

SPLITS = ("temporal", "last-n", "sessions", "links", "editorial")
WITHOUT_RANKER = "rankrec, no ranker"  # the served lists with ranker "none": PageRank and the text mix
DEFAULT_KS = (1, 3, 5, 10, 20)
LEVEL = 0.95
DEFAULT_GRID = Grid()
DEFAULT_CONFIGURATION = Configuration()


def make_split(
    data: EvaluationData,
    kind: str = "temporal",
    *,
    cutoff: float | None = None,
    test_share: float = 0.2,
    gap: float = SESSION_GAP_SECONDS,
    n: int = 1,
    prefix: int = 1,
    seed: int = 0,
    editorial: str | None = None,
) -> Split:
    """The test split of ``kind`` (graded gains: binary metrics count any held-out view, graded nDCG their
    number). ``cutoff`` (Unix seconds) must lie inside the views' span (CutoffOutsideSpan); for ``last-n``
    it sets the share of the span whose last views are held out. ``editorial`` is the place pattern of the
    editorial-block task (:func:`rankrec.evaluate.links.editorial_split`)."""
    check_choice("kind", kind, SPLITS)
    check_fraction("test_share", test_share, open_low=True, open_high=True)
    check_positive("gap", gap)
    if kind == "editorial":
        if not editorial:
            raise ValueError("the editorial task needs a place pattern (--editorial-place)")
        pairs = editorial_pairs(data.evidence.places, data.size, editorial)
        split = editorial_split(data.adjacency, pairs, pattern=editorial, seed=seed)
        if len(split.queries) == 0 or split.reserve is None:
            raise NothingToEvaluate(
                "test", kind, f"fewer than two pages hold links at a place matching {editorial!r}"
            )
        return split
    if kind == "links":
        split = held_out_links_split(
            data.adjacency, chrome=chrome_only(data.evidence), share=test_share, seed=seed
        )
        if len(split.queries) == 0:
            raise NothingToEvaluate("test", kind, "no page has enough content links to hide some")
        return split
    if data.times.size == 0:
        raise InputError(
            data.store,
            None,
            "the wiki store holds no views of its pages; import view events first "
            "(rankrec import VIEWS.csv --wiki ...) or evaluate with --split links",
        )
    first, last = float(data.times.min()), float(data.times.max())
    if cutoff is not None and not first < cutoff <= last:
        raise CutoffOutsideSpan(cutoff, first, last)
    views = (data.users, data.viewed, data.times, data.size)
    if kind == "temporal":
        split = temporal_split(*views, test_share=test_share, cutoff=cutoff, gains="graded")
    elif kind == "sessions":
        split = session_split(
            *views, gap=gap, test_share=test_share, cutoff=cutoff, prefix=prefix, gains="graded"
        )
    else:
        share = test_share if cutoff is None else (last - cutoff) / (last - first)
        split = last_n_split(*views, n=n, test_share=share, gains="graded")
    if len(split.queries) == 0:
        reason = ", ".join(f"{name.replace('_', ' ')} {value}" for name, value in split.counts.items())
        raise NothingToEvaluate("test", kind, reason)
    return split


def baselines(data: EvaluationData, split: Split, *, seed: int = 0) -> list:
    """Every baseline that the data allows (team-most-read needs teams), each with ``recommend(split, k)``."""
    links = data.adjacency if split.links is None else split.links  # a task may hide links from everyone
    found = [
        RandomPages(seed=seed),
        MostRead(),
        GlobalPageRank(links),
        OutLinks(links),
        CoVisitation(gap=split.settings.get("gap", SESSION_GAP_SECONDS)),
    ]
    evidence = data.evidence
    if evidence is not None and evidence.has_text:
        found.append(TextSimilarity(evidence.text_neighbours(Configuration.title_weight).similar))
    if data.teams is not None:
        top = max(int(split.train.users.max(initial=0)), int(split.queries.users.max(initial=0)))
        teams = np.full(max(top + 1, data.teams.size), -1, dtype=np.int64)
        teams[: data.teams.size] = data.teams
        found.append(TeamMostRead(teams))
    return found


TUNED_FAMILIES = (ItemKNN, RP3beta, EASE)  # baselines with settings, each tuned on the validation split


def tuned_grids(split: Split) -> tuple[list[list], dict]:
    """The grids of the baselines tuned on validation (:mod:`rankrec.evaluate.collaborative`), and the
    families skipped with the reason (EASE above its size bound)."""
    grids, skipped = [], {}
    for family in TUNED_FAMILIES:
        grid = family.grid()
        if family is EASE:
            fits, message = grid[0].applicable(split)
            if not fits:
                skipped[family.family] = message
                continue
        grids.append(grid)
    return grids, skipped


def _tune(grid: list, validation: Split | None, headline: int, advance) -> tuple[object, str, dict]:
    """The grid point with the best validation nDCG (ties: the earlier) renamed to its family, its own
    name, and the validation score of every point; without a validation split, the family's defaults."""
    family = grid[0].family
    if validation is None:
        return replace(type(grid[0])(), name=family), "defaults", {}
    scores = {}
    for candidate in grid:
        scores[candidate.name] = mean_metric(candidate.recommend(validation, headline), validation, headline)
        advance(f"validation: {candidate.name}")
    best = max(grid, key=lambda candidate: (_finite(scores[candidate.name]), -grid.index(candidate)))
    return replace(best, name=family), best.name, scores


@dataclass(frozen=True, eq=False)
class MethodScores:
    """One method on the test split: metric means, their 95% intervals, and the per-query values."""

    name: str
    means: dict
    ci95: dict
    per_query: dict
    seconds: float


@dataclass(frozen=True, eq=False)
class Evaluation:
    """Everything a report shows (see :mod:`rankrec.evaluate.report`)."""

    settings: dict
    split: Split
    methods: dict
    validation_scores: dict
    best_baseline: str
    comparison: dict
    choice: Choice | None
    configuration: Configuration
    seconds: dict


def _scores(lists: np.ndarray, split: Split, ks, popularity, data, visited) -> tuple[dict, dict]:
    per_query = evaluate_lists(
        lists,
        split.relevant,
        ks=ks,
        popularity=popularity,
        space_of_page=data.space,
        visited=visited,
        hubs=data.hubs,
    )
    for k in ks:
        per_query[f"ndcg_graded@{k}"] = ndcg(lists, split.relevant, k, gains="graded")
    catalogue = {f"coverage@{k}": coverage(lists, split.size, k=k) for k in ks}
    return per_query, catalogue


def _mean(values: np.ndarray) -> float | None:
    return float(np.nanmean(values)) if np.isfinite(values).any() else None


def run_evaluation(
    data: EvaluationData,
    split: Split,
    *,
    grid: Grid | None = DEFAULT_GRID,
    start: Configuration = DEFAULT_CONFIGURATION,
    ks: Sequence[int] = DEFAULT_KS,
    samples: int = 1000,
    seed: int = 0,
    workers: int = 1,
    progress: Progress | None = None,
    cluster=None,
) -> Evaluation:
    """Evaluate every baseline and rankrec on ``split`` (see the module docstring).

    ``grid`` None skips the sweeps (rankrec runs with ``start``) and, when the training part yields no
    validation split, the best baseline is then named on the test split (the report says so). On a Dask
    ``cluster`` the sweeps' builds run side by side (:func:`choose_configuration`); nothing else changes.
    """
    ks = tuple(sorted({check_count("ks", k) for k in ks}))
    if not ks:
        raise ValueError(f"ks must hold at least one list length; got {ks!r}")
    samples = check_count("samples", samples)
    headline = 10 if 10 in ks else ks[-1]
    methods = baselines(data, split, seed=seed)
    grids, skipped = tuned_grids(split)
    total = (grid.solves if grid is not None else 0) + 2 * len(methods) + 2
    total += sum(len(points) + 1 for points in grids)
    done = [0]

    def advance(description: str, *_counts) -> None:
        done[0] += 1
        if progress is not None:
            progress(description, min(done[0], total), total)

    started = time.perf_counter()
    try:
        validation = validation_split(split)
    except NothingToEvaluate:
        if grid is not None:
            raise
        validation = None
    validation_scores = {}
    if validation is not None:
        for method in methods:
            validation_scores[method.name] = mean_metric(
                method.recommend(validation, headline), validation, headline
            )
            advance(f"validation: {method.name}")
    tuned = {}
    for points in grids:
        chosen, best_point, scores = _tune(points, validation, headline, advance)
        tuned[chosen.name] = {"chosen": best_point, "validation": scores}
        if scores:
            validation_scores[chosen.name] = scores[best_point]
        methods.append(chosen)
    choice = None
    if "gap" in split.settings:  # navigation moves follow the split's own session rule
        start = start.with_values(session_gap_seconds=float(split.settings["gap"]))
    configuration = start
    if grid is not None:
        choice = choose_configuration(
            split,
            data.evidence,
            grid=grid,
            start=start,
            k=headline,
            workers=workers,
            validation=validation,
            progress=advance,
            cluster=cluster,
        )
        configuration = choice.configuration
        validation_scores["rankrec"] = choice.score
    seconds = {"validation": time.perf_counter() - started}
    rankrec = PersonalisedPageRank(data.evidence, configuration, workers=workers)
    variants = []
    if configuration.ranker != "none" and split.task == "sessions":  # the same lists without the ranker
        plain = configuration.with_values(ranker="none")
        variants.append(PersonalisedPageRank(data.evidence, plain, workers=workers, name=WITHOUT_RANKER))
    popularity = training_counts(split.train)
    visited = training_pages(split)
    scored = {}
    for method in [*methods, *variants, rankrec]:
        begun = time.perf_counter()
        lists = check_recommendations(split, method.recommend(split, ks[-1]), ks[-1])
        elapsed = time.perf_counter() - begun
        per_query, catalogue = _scores(lists, split, ks, popularity, data, visited)
        means = {name: _mean(values) for name, values in per_query.items()} | catalogue
        scored[method.name] = MethodScores(method.name, means, {}, per_query, elapsed)
        advance(f"test: {method.name}")
    for number, scores in enumerate(scored.values()):
        for index, (name, values) in enumerate(sorted(scores.per_query.items())):
            if np.isfinite(values).any():
                rng = np.random.default_rng([seed, number, index])
                scores.ci95[name] = list(
                    bootstrap_ci(values, samples=samples, level=LEVEL, seed=rng, groups=split.queries.users)
                )
    advance("bootstrap intervals")
    chosen_on = "validation" if validation_scores else "test"
    ranking = (
        validation_scores
        if validation_scores
        else {name: scores.means[f"ndcg@{headline}"] for name, scores in scored.items()}
    )
    candidates = [method.name for method in methods]
    best = max(candidates, key=lambda name: (_finite(ranking.get(name)), -candidates.index(name)))
    comparison = _comparison(
        scored, best, candidates, headline, samples, seed, chosen_on, split.queries.users
    )
    seconds["total"] = time.perf_counter() - started
    settings = {
        "split": {"name": split.name, **dict(split.settings)},
        "counts": {
            "test": dict(split.counts),
            "validation": None if validation is None else dict(validation.counts),
        },
        "ks": list(ks),
        "headline_k": headline,
        "bootstrap": {"samples": samples, "level": LEVEL, "seed": seed, "unit": "user"},
        "grid": None if grid is None else {name: list(getattr(grid, name)) for name in GRID_NAMES},
        "start": start.to_dict(),
        "rankrec": configuration.to_dict(),
        "ranker": dict(rankrec.trained),
        "tuned_baselines": tuned,
        "skipped_baselines": skipped,
        "chosen_by": None if grid is None else f"mean ndcg@{headline} on the validation split",
        "data": {"store": data.store, "fingerprint": data.fingerprint, **data.counts},
    }
    advance("comparison")
    return Evaluation(
        settings, split, scored, validation_scores, best, comparison, choice, configuration, seconds
    )


def _finite(value) -> float:
    return float(value) if value is not None and np.isfinite(value) else -np.inf


def _paired(a: np.ndarray, b: np.ndarray, samples: int, rng, users: np.ndarray) -> dict | None:
    if not (np.isfinite(a) & np.isfinite(b)).any():
        return None
    result = paired_difference(a, b, samples=samples, level=LEVEL, seed=rng, groups=users)
    return {
        "difference": result.mean_difference,
        "ci95": [result.low, result.high],
        "share_rankrec_better": result.share_a_better,
        "queries": result.users,
    }


def _comparison(scored, best, candidates, k, samples, seed, chosen_on, users) -> dict:
    """rankrec minus the best baseline on every per-query metric at ``k`` (and MRR), paired by query;
    nDCG@k and hit rate@k against every baseline. Users are resampled whole."""
    ours = scored["rankrec"].per_query
    shown = [name for name in ours if name.endswith(f"@{k}") or name == "mrr"]
    metrics = {}
    for index, name in enumerate(shown):
        rng = np.random.default_rng([seed, 1000, index])
        found = _paired(ours[name], scored[best].per_query[name], samples, rng, users)
        if found is not None:
            metrics[name] = {
                "rankrec": scored["rankrec"].means[name],
                best: scored[best].means[name],
                **found,
            }
    every = {}
    for number, baseline in enumerate(candidates):
        every[baseline] = {}
        for index, name in enumerate((f"ndcg@{k}", f"hit_rate@{k}")):
            rng = np.random.default_rng([seed, 2000 + number, index])
            every[baseline][name] = _paired(ours[name], scored[baseline].per_query[name], samples, rng, users)
    return {
        "rankrec_vs": best,
        "best_baseline_chosen_on": f"{chosen_on} ndcg@{k}",
        "level": LEVEL,
        "metrics": metrics,
        "against_every_baseline": every,
    }

"""Choosing rankrec's settings on a validation split carved from the training part, never on the test split.

:func:`validation_split` applies the test split's own rule (same kind, same settings) to ``split.train``
alone: the last ``test_share`` of the *training* span becomes the validation period. So every view the
choice sees is a training view of the test split, and the test period cannot reach it.

:func:`choose_configuration` then runs two 2-D sweeps on that validation split, each scored by the
mean nDCG@k over its queries:

1. damping factor × lift exponent (half-life and navigation weight at their starting values; with the
   learnt ranker, which weighs global PageRank itself, lift is not swept);
2. half-life × navigation weight, at the best damping and lift of the first sweep (the session
   task restarts from the session's pages, so half-life has no effect there and only the navigation
   weight is swept); when its best cell moved away from the starting half-life or navigation weight,
   damping × lift is swept once more at that cell (one more round of coordinate ascent: the best
   damping and lift on a navigation-heavy walk need not be those of the starting one);
3. for related lists (session-like tasks) with page text, and whenever the configuration learns a ranker:
   the lists *without* the ranker (``ranker="none"``: the PageRank and text mix), text weight × lift
   (text weight at its start without page text; lift swept here when the ranker kept it out of the first
   sweep), so validation chooses between the learnt ranker and the plain mix;
4. on the sessions task (readers' own sessions as evidence), the chosen configuration again without the
   rule that keeps site hubs out of a related list's first places (``hub_free_top`` 0): on a wiki read
   through its hubs, they belong there. Without reading history the rule stays as configured.

Every configuration tried is scored on the lists an index built with it serves (:mod:`.method`).

The chosen configuration is the best of every configuration evaluated (ties: the first evaluated).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from types import MappingProxyType

import numpy as np

from .._pool import task_runner
from .._validation import check_count
from ..configuration import Configuration
from ..errors import NothingToEvaluate
from ..progress import Progress, report
from .grid import GRID_NAMES, SPLIT_NAMES, Grid
from .links import editorial_validation, held_out_links_split
from .method import rankrec_lists
from .metrics import evaluate_lists
from .splits import Split, last_n_split, session_split, temporal_split

__all__ = ["GRID_NAMES", "SPLIT_NAMES", "Choice", "Grid", "Sweep", "choose_configuration", "validation_split"]


@dataclass(frozen=True, eq=False)
class Sweep:
    """One 2-D sweep: ``scores[i, j]`` is the validation metric at ``rows[i]``, ``columns[j]``."""

    row_name: str
    column_name: str
    rows: tuple[float, ...]
    columns: tuple[float, ...]
    scores: np.ndarray
    fixed: MappingProxyType = field(default_factory=lambda: MappingProxyType({}))

    def best(self) -> tuple[float, float, float]:
        """(row value, column value, score) of the best cell; ties to the first in row-major order."""
        position = int(np.nanargmax(self.scores)) if np.isfinite(self.scores).any() else 0
        row, column = divmod(position, len(self.columns))
        return self.rows[row], self.columns[column], float(self.scores[row, column])


@dataclass(frozen=True, eq=False)
class Choice:
    """The configuration a validation split chose, with the sweeps that chose it."""

    configuration: Configuration
    metric: str
    score: float
    sweeps: tuple[Sweep, ...]
    validation: Split
    notes: tuple[str, ...] = ()


def validation_split(split: Split) -> Split:
    """A split of the same kind and settings made from ``split.train`` alone (see the module docstring).

    Raises NothingToEvaluate when the training part yields no validation query.
    """
    train, settings = split.train, dict(split.settings)
    arguments = (train.users, train.pages, train.times, train.size)
    if split.name == "temporal":
        made = temporal_split(
            *arguments,
            test_share=settings["test_share"],
            min_train_views=settings["min_train_views"],
            new_only=settings["new_only"],
            gains=settings["gains"],
        )
    elif split.name == "last-n":
        made = last_n_split(
            *arguments,
            n=settings["n"],
            test_share=settings["test_share"],
            global_cap=settings["global_cap"],
            min_train_views=settings["min_train_views"],
            new_only=settings["new_only"],
            gains=settings["gains"],
        )
    elif split.name == "sessions":
        made = session_split(
            *arguments,
            gap=settings["gap"],
            test_share=settings["test_share"],
            prefix=settings["prefix"],
            gains=settings["gains"],
        )
    elif split.name == "links":  # hide the same share again, from the links the test split left
        made = held_out_links_split(
            split.links,
            chrome=split.chrome,
            share=settings["share"],
            min_links=settings["min_links"],
            seed=settings["seed"] + 1,
            max_queries=settings["max_queries"],
        )
    elif split.name == "editorial":  # the curated blocks of the pages the test queries left
        made = editorial_validation(split)
    else:
        raise ValueError(f"split.name must be one of {', '.join(SPLIT_NAMES)}; got {split.name!r}")
    if len(made.queries) == 0:
        raise NothingToEvaluate(
            "validation",
            split.name,
            "the training part is too short or too sparse; choose a later cutoff or skip the sweeps",
        )
    return made


def mean_metric(lists: np.ndarray, split: Split, k: int) -> float:
    """Mean binary nDCG@k of ``lists`` over the split's queries (the sweeps' criterion)."""
    values = evaluate_lists(lists, split.relevant, ks=(k,))[f"ndcg@{k}"]
    return float(np.nanmean(values)) if np.isfinite(values).any() else float("nan")


def choose_configuration(
    split: Split,
    evidence,
    *,
    grid: Grid | None = None,
    start: Configuration | None = None,
    k: int = 10,
    hubs: int = 64,
    workers: int = 1,
    validation: Split | None = None,
    progress: Progress | None = None,
    cluster=None,
) -> Choice:
    """Sweep ``grid`` on the validation split of ``split`` and return the best configuration.

    ``evidence`` is the store's (:class:`rankrec.build.Evidence`; its views are replaced by each training
    part). ``validation`` may pass the split from :func:`validation_split` (made once for baselines and
    sweeps alike); ``progress(description, builds done, builds at most)`` is called after every build. Only
    ``split.train`` is read. The cells of each sweep are independent builds: on a Dask ``cluster`` (a
    :class:`rankrec.cluster.ClusterAddress`) they run as tasks side by side, the validation split and
    the evidence sent to each worker once; the choice is the same.
    """
    k = check_count("k", k)
    grid = Grid() if grid is None else grid
    start = Configuration() if start is None else start
    validation = validation_split(split) if validation is None else validation
    with task_runner(cluster, (validation, evidence, k, hubs, 1 if cluster else workers)) as run_all:
        return _choose(split, evidence, grid, start, k, validation, progress, run_all)


def validation_score(
    validation: Split, evidence, k: int, hubs: int, workers: int, configuration: Configuration
) -> float:
    """The mean nDCG@k on ``validation`` of the lists an index built with ``configuration`` serves."""
    lists = rankrec_lists(validation, evidence, k, configuration, hubs=hubs, workers=workers)
    return mean_metric(lists, validation, k)


def _fill(scores: np.ndarray, cells: dict, score_all) -> None:
    """Score the configurations ``cells`` maps (row, column) to, together, into ``scores``."""
    for place, found in zip(cells, score_all(list(cells.values())), strict=True):
        scores[place] = found


def _choose(
    split, evidence, grid: Grid, start: Configuration, k: int, validation, progress, run_all
) -> Choice:
    metric = f"ndcg@{k}"
    tried: list[tuple[float, Configuration]] = []

    built = [0]

    def scored(position: int, configuration: Configuration, found: float) -> None:
        built[0] += 1
        shown = ", ".join(f"{name} {getattr(configuration, name):g}" for name in GRID_NAMES)
        report(progress, f"sweep {shown}", built[0], grid.solves)

    def score_all(configurations: list[Configuration]) -> list[float]:
        """Each configuration's validation score, in their order (together: on a cluster, in parallel)."""
        found = run_all(validation_score, configurations, scored)
        tried.extend(zip(found, configurations, strict=True))
        return found

    def score(configuration: Configuration) -> float:
        return score_all([configuration])[0]

    lifts = grid.lift
    notes = []
    if start.ranker != "none" and split.task == "sessions":
        lifts = (start.lift,)
        notes.append("lift is not swept: the learnt ranker weighs global PageRank itself")
    cells = [start.with_values(damping=damping, lift=lift) for damping in grid.damping for lift in lifts]
    first = np.reshape(score_all(cells), (len(grid.damping), len(lifts)))
    fixed = {"half_life_days": start.half_life_days, "navigation_weight": start.navigation_weight}
    damping_sweep = Sweep("damping", "lift", grid.damping, lifts, first, MappingProxyType(fixed))
    damping, lift, _ = damping_sweep.best()
    half_lives = grid.half_life_days
    if split.task == "sessions":
        half_lives = (start.half_life_days,)
        notes.append("half-life is not swept: the session task restarts from the session's own pages")
    navigation_weights = grid.navigation_weight
    if len(validation.train) == 0:
        navigation_weights = (start.navigation_weight,)
        notes.append("navigation weight is not swept: the task has no reading history")
    second = np.full((len(half_lives), len(navigation_weights)), np.nan)
    cells = {}
    for row, half_life in enumerate(half_lives):
        for column, weight in enumerate(navigation_weights):
            if half_life == start.half_life_days and weight == start.navigation_weight:
                second[row, column] = first[grid.damping.index(damping), lifts.index(lift)]
                continue  # built in the first sweep already
            cells[row, column] = start.with_values(
                damping=damping, lift=lift, half_life_days=half_life, navigation_weight=weight
            )
    _fill(second, cells, score_all)
    history_sweep = Sweep(
        "half_life_days",
        "navigation_weight",
        half_lives,
        navigation_weights,
        second,
        MappingProxyType({"damping": damping, "lift": lift}),
    )
    sweeps = (damping_sweep, history_sweep)
    half_life, weight, _ = history_sweep.best()
    if (half_life, weight) != (start.half_life_days, start.navigation_weight):
        again = np.full((len(grid.damping), len(lifts)), np.nan)
        cells = {}
        for row, damping_value in enumerate(grid.damping):
            for column, lift_value in enumerate(lifts):
                if (damping_value, lift_value) == (damping, lift):
                    again[row, column] = second[half_lives.index(half_life), navigation_weights.index(weight)]
                    continue  # built in the second sweep already
                cells[row, column] = start.with_values(
                    damping=damping_value, lift=lift_value, half_life_days=half_life, navigation_weight=weight
                )
        _fill(again, cells, score_all)
        fixed = {"half_life_days": half_life, "navigation_weight": weight}
        sweeps += (Sweep("damping", "lift", grid.damping, lifts, again, MappingProxyType(fixed)),)
    finite = [(value, position) for position, (value, _) in enumerate(tried) if np.isfinite(value)]
    if not finite:
        raise NothingToEvaluate("validation", split.name, f"no configuration has a defined {metric}")
    best = max(finite, key=lambda pair: (pair[0], -pair[1]))[1]
    value, chosen = tried[best]
    with_text = getattr(evidence, "has_text", False) and split.task == "sessions"  # related lists mix text
    if with_text or (start.ranker != "none" and split.task == "sessions"):
        # without the learnt ranker: the PageRank and text mix, its text weight swept when pages have text
        text_weights = grid.text_weight if with_text else (start.text_weight,)
        best = chosen
        # the mix's lift was not swept while the ranker was on: it is here
        mix_lifts = grid.lift if lifts != grid.lift else (best.lift,)
        third = np.full((len(text_weights), len(mix_lifts)), np.nan)
        cells = {}
        for row, weight in enumerate(text_weights):
            for column, lift in enumerate(mix_lifts):
                if best.ranker == "none" and (weight, lift) == (best.text_weight, best.lift):
                    third[row, column] = value
                    continue
                cells[row, column] = best.with_values(text_weight=weight, lift=lift, ranker="none")
        _fill(third, cells, score_all)
        fixed = {name: getattr(best, name) for name in ("damping", "navigation_weight", "title_weight")}
        sweeps += (
            Sweep(
                "text_weight",
                "lift",
                text_weights,
                mix_lifts,
                third,
                MappingProxyType(fixed | {"ranker": "none"}),
            ),
        )
        finite = [(value, position) for position, (value, _) in enumerate(tried) if np.isfinite(value)]
        value, chosen = tried[max(finite, key=lambda pair: (pair[0], -pair[1]))[1]]
    elif getattr(evidence, "has_text", False):
        notes.append("text weight is not swept: personal lists do not mix in text (related lists do)")
    if split.name == "sessions" and len(validation.train) and chosen.hub_free_top:
        # readers' own sessions say whether site hubs belong at the top of a related list (on a wiki
        # browsed through its hubs they do); without reading history the rule stays as configured
        plain = chosen.with_values(hub_free_top=0)
        fourth = np.array([[value], [score(plain)]])
        sweeps += (
            Sweep(
                "hub_free_top",
                "lift",
                (float(chosen.hub_free_top), 0.0),
                (chosen.lift,),
                fourth,
                MappingProxyType({"damping": chosen.damping, "ranker": chosen.ranker}),
            ),
        )
        if fourth[1, 0] > value:
            value, chosen = float(fourth[1, 0]), plain
    return Choice(chosen, metric, float(value), sweeps, validation, tuple(notes))

"""Sweeps choose on a validation split carved from the training part; the test split cannot sway them."""

from __future__ import annotations

import numpy as np
import pytest

from rankrec.build import Evidence
from rankrec.configuration import Configuration
from rankrec.errors import NothingToEvaluate
from rankrec.evaluate.method import rankrec_lists
from rankrec.evaluate.splits import assert_no_leakage, last_n_split, session_split, temporal_split
from rankrec.evaluate.sweeps import Grid, choose_configuration, mean_metric, validation_split
from tests.evaluate.test_baselines import _random_graph, _random_views

SMALL = Grid(damping=(0.6, 0.85), lift=(0.0, 1.0), half_life_days=(1.0, 30.0), navigation_weight=(0.0, 0.5))


def _splits(kind: str, views, later_pages=None):
    users, pages, times, size = views
    if later_pages is not None:
        pages = later_pages
    if kind == "temporal":
        return temporal_split(users, pages, times, size, cutoff=14_000.0)
    if kind == "last-n":
        return last_n_split(users, pages, times, size, n=2, test_share=0.3)
    return session_split(users, pages, times, size, cutoff=14_000.0, gap=300.0)


@pytest.mark.parametrize("kind", ["temporal", "last-n", "sessions"])
def test_validation_split_is_made_of_training_views_only(kind):
    views = _random_views(2, views=900, span=20_000.0)
    split = _splits(kind, views)
    validation = validation_split(split)
    assert validation.name == split.name and dict(validation.settings).keys() == dict(split.settings).keys()
    assert_no_leakage(validation)
    # every view the validation split holds (training or held out) is a training view of the test split
    train = {
        (int(u), int(p), float(t))
        for u, p, t in zip(split.train.users, split.train.pages, split.train.times, strict=True)
    }
    for part in (validation.train, validation.held_out):
        seen = zip(part.users, part.pages, part.times, strict=True)
        assert {(int(u), int(p), float(t)) for u, p, t in seen} <= train
    assert validation.train_until <= split.train_until


@pytest.mark.parametrize("kind", ["temporal", "sessions"])
def test_the_test_period_does_not_influence_the_choice(kind):
    views = _random_views(4, views=900, span=20_000.0)
    users, pages, times, size = views
    later = times >= 14_000.0
    shuffled = pages.copy()
    shuffled[later] = np.random.default_rng(9).integers(0, size, int(later.sum()))
    first, second = _splits(kind, views), _splits(kind, views, later_pages=shuffled)
    assert not np.array_equal(first.held_out.pages, second.held_out.pages)  # the test splits differ
    adjacency = Evidence.from_links(_random_graph(size, 4))
    a = choose_configuration(first, adjacency, grid=SMALL)
    b = choose_configuration(second, adjacency, grid=SMALL)
    assert a.configuration == b.configuration and a.score == b.score
    for one, other in zip(a.sweeps, b.sweeps, strict=True):
        assert np.array_equal(one.scores, other.scores, equal_nan=True)


def test_the_choice_is_the_best_cell_and_its_score_is_recomputable():
    views = _random_views(6, views=900, span=20_000.0)
    split = _splits("temporal", views)
    adjacency = Evidence.from_links(_random_graph(views[3], 6))
    choice = choose_configuration(split, adjacency, grid=SMALL, k=5)
    cells = np.concatenate([sweep.scores.ravel() for sweep in choice.sweeps])
    assert choice.score == pytest.approx(np.nanmax(cells))
    assert choice.sweeps[0].scores.shape == (2, 2) and choice.sweeps[1].scores.shape == (2, 2)
    # the score is what the chosen configuration earns on the validation split, computed afresh
    lists = rankrec_lists(choice.validation, adjacency, 5, choice.configuration)
    assert mean_metric(lists, choice.validation, 5) == pytest.approx(choice.score)


def test_session_task_does_not_sweep_half_life():
    views = _random_views(8, views=900, span=20_000.0)
    split = _splits("sessions", views)
    choice = choose_configuration(
        split,
        Evidence.from_links(_random_graph(views[3], 8)),
        grid=SMALL,
        start=Configuration(half_life_days=30.0),
    )
    assert choice.sweeps[1].rows == (30.0,) and choice.notes


def test_the_session_task_tries_related_lists_with_hubs_at_the_top_and_keeps_the_better():
    views = _random_views(8, views=900, span=20_000.0)
    split = _splits("sessions", views)
    evidence = Evidence.from_links(_random_graph(views[3], 8))
    start = Configuration(ranker="none", hub_free_top=3)
    choice = choose_configuration(split, evidence, grid=SMALL, start=start, k=5)
    hubs = [sweep for sweep in choice.sweeps if sweep.row_name == "hub_free_top"]
    assert len(hubs) == 1 and hubs[0].rows == (3.0, 0.0)
    kept, without = hubs[0].scores[:, 0]
    assert choice.configuration.hub_free_top == (0 if without > kept else 3)
    # the rule-free cell is what that configuration earns on validation, computed afresh
    plain = choice.configuration.with_values(hub_free_top=0)
    lists = rankrec_lists(choice.validation, evidence, 5, plain)
    assert mean_metric(lists, choice.validation, 5) == pytest.approx(without)
    # a temporal task (personal lists) has no such sweep
    temporal = choose_configuration(_splits("temporal", views), evidence, grid=SMALL, start=start, k=5)
    assert all(sweep.row_name != "hub_free_top" for sweep in temporal.sweeps)


def test_a_training_part_without_validation_queries_is_refused():
    split = temporal_split([0, 0], [0, 1], [0.0, 10.0], 3, cutoff=5.0)  # one training view in all
    with pytest.raises(NothingToEvaluate, match="validation"):
        validation_split(split)


def test_grid_refuses_empty_or_out_of_range_values():
    with pytest.raises(ValueError, match="damping"):
        Grid(damping=())
    with pytest.raises(ValueError, match="navigation_weight"):
        Grid(navigation_weight=(0.2, 2.0))


def test_damping_and_lift_are_swept_again_when_the_history_sweep_moves_away_from_the_start():
    # coordinate ascent (common practice): after the navigation weight moved, damping × lift is tried
    # again at the new weight, and the choice is the best cell of every sweep
    views = _random_views(6, views=900, span=20_000.0)
    split = _splits("temporal", views)
    evidence = Evidence.from_links(_random_graph(views[3], 6))
    choice = choose_configuration(split, evidence, grid=SMALL, k=5)
    moved = choice.sweeps[1].best()[:2] != (30.0, 0.3)  # the Configuration defaults
    again = [
        sweep for sweep in choice.sweeps[2:] if (sweep.row_name, sweep.column_name) == ("damping", "lift")
    ]
    assert moved and len(again) == 1  # this seed's history sweep moves the navigation weight
    half_life, weight, _ = choice.sweeps[1].best()
    assert dict(again[0].fixed) == {"half_life_days": half_life, "navigation_weight": weight}
    # a cell is what that configuration earns on validation, computed afresh
    damping, lift = again[0].rows[1], again[0].columns[0]
    configuration = Configuration(
        damping=damping, lift=lift, half_life_days=half_life, navigation_weight=weight
    )
    lists = rankrec_lists(choice.validation, evidence, 5, configuration)
    assert mean_metric(lists, choice.validation, 5) == pytest.approx(again[0].scores[1, 0])
    cells = np.concatenate([sweep.scores.ravel() for sweep in choice.sweeps])
    assert choice.score == pytest.approx(np.nanmax(cells))
    # with a starting point already at the history sweep's best, no second round is run
    settled = Configuration(half_life_days=half_life, navigation_weight=weight)
    repeat = choose_configuration(split, evidence, grid=SMALL, k=5, start=settled)
    assert repeat.sweeps[1].best()[:2] == (half_life, weight) and len(repeat.sweeps) == 2

"""The report folder and `rankrec evaluate` on the invented demo wiki; errors; one split for every method."""

from __future__ import annotations

import json

import numpy as np
import pytest
from matplotlib.image import imread

from rankrec.cli import main
from rankrec.demo import import_demo
from rankrec.errors import CutoffOutsideSpan, InputError
from rankrec.evaluate import report as report_module
from rankrec.evaluate import run as run_module
from rankrec.evaluate import sweeps as sweeps_module
from rankrec.evaluate.method import PersonalisedPageRank
from rankrec.evaluate.report import write_report
from rankrec.evaluate.run import load_data, make_split, run_evaluation
from rankrec.evaluate.splits import assert_no_leakage
from rankrec.evaluate.sweeps import Grid
from rankrec.store import Store

SMALL = Grid(damping=(0.7, 0.85), lift=(0.0, 0.5), half_life_days=(30.0,), navigation_weight=(0.0, 0.3))
BASELINES = {
    "random",
    "most-read",
    "pagerank",
    "out-links",
    "co-visitation",
    "team-most-read",
    "text similarity",
    "item-kNN",
    "RP3beta",
    "EASE",
}


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    folder = tmp_path_factory.mktemp("demo")
    wiki = import_demo(folder)
    with Store(wiki, create=False) as store:
        data = load_data(store)
    split = make_split(data, "temporal")
    evaluation = run_evaluation(data, split, grid=SMALL, samples=200, seed=1)
    report = folder / "report"
    write_report(evaluation, report)
    return folder, wiki, data, split, evaluation, report


def test_results_json_has_the_shape_the_issue_fixes(demo):
    _, _, data, split, evaluation, report = demo
    results = json.loads((report / "results.json").read_text())
    assert {"settings", "methods", "best_baseline", "comparison"} <= set(results)
    assert set(results["methods"]) == BASELINES | {"rankrec"}
    assert results["best_baseline"] in BASELINES
    assert results["settings"]["data"]["fingerprint"] == data.fingerprint
    assert results["settings"]["rankrec"] == results["methods"]["rankrec"]["configuration"]
    for name, entry in results["methods"].items():
        for metric in (
            "ndcg@10",
            "recall@10",
            "hit_rate@10",
            "precision@10",
            "map@10",
            "mrr",
            "ndcg_graded@10",
            "coverage@10",
            "novelty@10",
            "intra_list_diversity@10",
            "unvisited_share@10",
        ):
            assert metric in entry, (name, metric)
        for metric, (low, high) in entry["ci95"].items():
            assert low <= entry[metric] + 1e-12 and entry[metric] <= high + 1e-12, (name, metric)
        # the mean is recomputable from the per-query values the evaluation kept
        values = evaluation.methods[name].per_query["ndcg@10"]
        assert entry["ndcg@10"] == pytest.approx(float(np.nanmean(values)))
    found = results["comparison"]["metrics"]["ndcg@10"]
    best = results["best_baseline"]
    assert found["difference"] == pytest.approx(
        results["methods"]["rankrec"]["ndcg@10"] - results["methods"][best]["ndcg@10"]
    )
    assert found["ci95"][0] <= found["difference"] <= found["ci95"][1]
    # the best baseline is the validation winner, as the JSON says
    assert results["validation"][best] == max(results["validation"][n] for n in BASELINES)
    assert len(results["sweeps"]) == 2 and np.array(results["sweeps"][0]["ndcg@10"]).shape == (2, 2)
    assert results["settings"]["counts"]["test"]["queries"] == len(split.queries)


def test_report_md_and_plots_are_readable_without_the_json(demo):
    _, _, _, _, evaluation, report = demo
    text = (report / "report.md").read_text()
    for name in [*BASELINES, "rankrec"]:
        assert f"| {name} |" in text
    assert "95%" in text and "## Sweeps" in text and evaluation.best_baseline in text
    plots = sorted(path.name for path in report.glob("*.png"))
    assert plots == [
        "metrics_by_k.png",
        "ndcg_intervals.png",
        "sweep_damping_lift.png",
        "sweep_half_life_days_navigation_weight.png",
    ]
    for name in plots:
        assert f"]({name})" in text
        image = imread(report / name)  # a real PNG that matplotlib reads back
        assert image.ndim == 3 and min(image.shape[:2]) > 100


def test_every_method_and_rankrec_see_the_same_splits(demo, monkeypatch):
    _, _, data, split, _, _ = demo
    seen: dict[str, list] = {}
    classes = [
        run_module.RandomPages,
        run_module.MostRead,
        run_module.GlobalPageRank,
        run_module.OutLinks,
        run_module.CoVisitation,
        run_module.TeamMostRead,
        run_module.TextSimilarity,
        *run_module.TUNED_FAMILIES,
        PersonalisedPageRank,
    ]
    for cls in classes:
        original = cls.recommend

        def recording(self, given, k, original=original):
            seen.setdefault(self.name, []).append(given)
            return original(self, given, k)

        monkeypatch.setattr(cls, "recommend", recording)
    sweep_splits = []
    original_lists = sweeps_module.rankrec_lists

    def recording_lists(given, *args, **kwargs):
        sweep_splits.append(given)
        return original_lists(given, *args, **kwargs)

    monkeypatch.setattr(sweeps_module, "rankrec_lists", recording_lists)
    run_evaluation(
        data,
        split,
        grid=Grid(damping=(0.85,), lift=(0.5,), half_life_days=(30.0,), navigation_weight=(0.3,)),
        samples=50,
    )
    families = {cls.family for cls in run_module.TUNED_FAMILIES}
    points = {name for name in seen if name not in BASELINES | {"rankrec"}}  # tuned baselines' grid points
    assert set(seen) - points == BASELINES | {"rankrec"}
    assert points and all(any(name.startswith(family + " ") for family in families) for name in points)
    validation = sweep_splits[0]
    assert all(given is validation for given in sweep_splits)
    for name, splits in seen.items():
        # a tuned family is tried on validation at every grid point, and the chosen one alone on the test
        expected = [split] if name in families | {"rankrec"} else [validation]
        if name not in families | points | {"rankrec"}:
            expected = [validation, split]
        assert len(splits) == len(expected) and all(a is b for a, b in zip(splits, expected, strict=True))
    assert_no_leakage(split)
    assert_no_leakage(validation)


def test_cli_writes_the_report_and_prints_a_summary(demo, capsys):
    folder, wiki, *_ = demo
    target = folder / "cli-report"
    code = main(
        [
            "evaluate",
            "--wiki",
            str(wiki),
            "--report",
            str(target),
            "--split",
            "sessions",
            "--samples",
            "100",
            "--grid-damping",
            "0.85",
            "--grid-lift",
            "0,0.5",
            "--grid-navigation-weight",
            "0.3",
        ]
    )
    out = capsys.readouterr().out
    assert code == 0 and "report written to" in out and "rankrec" in out
    results = json.loads((target / "results.json").read_text())
    assert results["settings"]["split"]["name"] == "sessions"
    assert results["settings"]["grid"]["lift"] == [0.0, 0.5]
    assert (target / "report.md").is_file()


def test_cli_refuses_bad_input_with_one_line(demo, tmp_path, capsys):
    folder, wiki, *_ = demo
    empty = tmp_path / "empty.db"
    edges = tmp_path / "links.csv"
    edges.write_text("source,target\nops/a,ops/b\nops/b,ops/a\n")
    assert main(["import", str(edges), "--wiki", str(empty)]) == 0
    capsys.readouterr()
    cases = [
        (["--wiki", str(empty)], "no views"),
        (["--wiki", str(tmp_path / "absent.db")], "no wiki store"),
        (["--wiki", str(wiki), "--cutoff", "1990-01-01"], "outside the views"),
        (["--wiki", str(wiki), "--damping", "1.5"], "damping"),
    ]
    for arguments, message in cases:
        code = main(["evaluate", *arguments, "--report", str(tmp_path / "never")])
        err = capsys.readouterr().err
        assert code == 2 and message in err and err.count("\n") == 1, (arguments, err)
    assert not (tmp_path / "never").exists()


def test_errors_are_rankrec_errors_with_their_fields(demo, tmp_path):
    _, _, data, *_ = demo
    with pytest.raises(CutoffOutsideSpan) as caught:
        make_split(data, "temporal", cutoff=float(data.times.max()) + 10)
    assert caught.value.last == float(data.times.max())
    with Store(tmp_path / "none.db") as store, pytest.raises(InputError, match="fewer than two pages"):
        load_data(store)


def test_a_failed_write_keeps_the_previous_report(demo, monkeypatch):
    _, _, _, _, evaluation, report = demo
    before = (report / "results.json").read_text()

    def broken(*args):
        raise OSError("disk full")

    monkeypatch.setattr(report_module, "markdown", broken)
    with pytest.raises(OSError, match="disk full"):
        write_report(evaluation, report)
    assert (report / "results.json").read_text() == before
    assert not [path for path in report.parent.glob(".report.*") if path.resolve() != report.resolve()]

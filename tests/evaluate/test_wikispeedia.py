"""The whole evaluation on real navigation: the Wikispeedia links and unfinished paths (open SNAP dataset).

Source: ../shared/data/wikispeedia (R. West and J. Leskovec, Human Wayfinding in Information Networks,
WWW 2012), put into a store by tools/wikispeedia.py exactly as a user would, then `rankrec evaluate`'s
library path on the session (next-pages) task.
"""

from __future__ import annotations

import importlib.util
import json

import numpy as np
import pytest

from rankrec.configuration import Configuration
from rankrec.evaluate.report import write_report
from rankrec.evaluate.run import load_data, make_split, run_evaluation
from rankrec.evaluate.sweeps import Grid
from rankrec.store import Store
from tests.conftest import PROJECT, require_shared


def _tool():
    spec = importlib.util.spec_from_file_location("wikispeedia_tool", PROJECT / "tools" / "wikispeedia.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


@pytest.mark.heavy  # about three minutes on 2 cores: `make bench` runs it, `make test` leaves it out
def test_wikispeedia_next_pages_report(tmp_path, record_property):
    data_folder = require_shared("wikispeedia")
    for name in ("articles.tsv", "categories.tsv", "links.tsv", "paths_unfinished.tsv"):
        require_shared("wikispeedia", name)
    tool = _tool()
    wiki = tool.prepare(data_folder, tmp_path / "wikispeedia")
    with Store(wiki, create=False) as store:
        data = load_data(store)
        counts = store.counts()
    # SOURCE.md: 4,604 articles; 119,882 links, less the self-links the tool leaves out
    assert counts["pages"] == 4604 and 119_000 < counts["links"] <= 119_882
    split = make_split(data, "sessions", gap=tool.SESSION_GAP)
    assert len(split.queries) > 1000
    grid = Grid(damping=(0.85,), lift=(0.0, 0.5), half_life_days=(30.0,), navigation_weight=(0.0, 0.3))
    # the PageRank and text mix only: a learnt ranker trained in every sweep build would cost minutes here
    # (the README's figure, with the ranker, comes from `rankrec evaluate`, a `make bench`-sized run)
    start = Configuration(ranker="none")
    evaluation = run_evaluation(data, split, grid=grid, start=start, samples=200, seed=0, workers=2)
    write_report(evaluation, tmp_path / "report")
    results = json.loads((tmp_path / "report" / "results.json").read_text())
    assert {"settings", "methods", "best_baseline", "comparison"} <= set(results)
    assert {"rankrec", "random", "most-read", "pagerank", "out-links", "co-visitation"} <= set(
        results["methods"]
    )
    assert "team-most-read" not in results["methods"]  # the dataset has no teams
    ours, random = results["methods"]["rankrec"], results["methods"]["random"]
    # personalised PageRank beats random: its whole interval lies above random's
    assert ours["ci95"]["ndcg@10"][0] > random["ci95"]["ndcg@10"][1]
    assert ours["ci95"]["hit_rate@10"][0] > random["ci95"]["hit_rate@10"][1]
    against_random = results["comparison"]["against_every_baseline"]["random"]["ndcg@10"]
    assert against_random["ci95"][0] > 0
    # recorded, not asserted: every other comparison
    for name, entry in results["methods"].items():
        record_property(name, {metric: entry[metric] for metric in ("ndcg@10", "hit_rate@10", "mrr")})
    record_property("best_baseline", results["best_baseline"])
    record_property("comparison", results["comparison"]["metrics"]["ndcg@10"])
    record_property("configuration", results["settings"]["rankrec"])
    assert np.isfinite(results["comparison"]["metrics"]["ndcg@10"]["difference"])

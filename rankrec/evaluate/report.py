"""The report folder of an evaluation: ``results.json``, ``report.md`` and PNG plots, published atomically.

``results.json`` holds every number::

    {"settings": {... split, counts, ks, bootstrap, grid, "rankrec": chosen configuration, "data": {...,
                  "fingerprint": ...}},
     "methods": {"<method>": {"ndcg@10": x, "recall@10": x, ..., "ci95": {"ndcg@10": [lo, hi], ...}}, ...,
                 "rankrec": {..., "configuration": {...}}},
     "best_baseline": "<method>",
     "comparison": {"rankrec_vs": ..., "metrics": {"ndcg@10": {"difference": d, "ci95": [lo, hi], ...}}},
     "sweeps": [...], "validation": {"<method>": ndcg@k}, "seconds": {...}}

A metric that is undefined (no query with a relevant page) is ``null``. ``report.md`` repeats the tables
in words and numbers and embeds the plots, so a reader never needs the JSON.
"""

from __future__ import annotations

import json
import math
from datetime import UTC, datetime
from pathlib import Path

import numpy as np

from .. import __version__
from .._atomic import publish_folder
from ..configuration import Settings, write_settings
from ..ranker.model import labels_text
from . import plots as charts
from .plots import LABELS, setting_text
from .run import WITHOUT_RANKER as WITHOUT_RANKER_NAME
from .run import Evaluation

ACCURACY = ("ndcg", "ndcg_graded", "recall", "hit_rate", "precision", "map")
BEYOND = ("coverage", "novelty", "intra_list_diversity", "unvisited_share")


def _clean(value):
    """JSON-safe: NaN/inf to None, numpy scalars and arrays to Python."""
    if isinstance(value, dict):
        return {str(key): _clean(item) for key, item in value.items()}
    if isinstance(value, (list, tuple)):
        return [_clean(item) for item in value]
    if isinstance(value, np.ndarray):
        return _clean(value.tolist())
    if isinstance(value, (np.floating, float)):
        return float(value) if math.isfinite(value) else None
    if isinstance(value, np.integer):
        return int(value)
    return value


def results(evaluation: Evaluation) -> dict:
    """The content of ``results.json`` (see the module docstring)."""
    methods = {}
    for name, scores in evaluation.methods.items():
        methods[name] = {**scores.means, "ci95": dict(scores.ci95)}
    methods["rankrec"]["configuration"] = evaluation.configuration.to_dict()
    sweeps = []
    if evaluation.choice is not None:
        for sweep in evaluation.choice.sweeps:
            sweeps.append(
                {
                    "rows": sweep.row_name,
                    "columns": sweep.column_name,
                    "row_values": sweep.rows,
                    "column_values": sweep.columns,
                    evaluation.choice.metric: sweep.scores,
                    "fixed": dict(sweep.fixed),
                }
            )
    return _clean(
        {
            "settings": {**evaluation.settings, "rankrec_version": __version__},
            "methods": methods,
            "best_baseline": evaluation.best_baseline,
            "comparison": evaluation.comparison,
            "sweeps": sweeps,
            "validation": evaluation.validation_scores,
            "seconds": {
                **evaluation.seconds,
                **{f"test {name}": scores.seconds for name, scores in evaluation.methods.items()},
            },
        }
    )


def write_report(evaluation: Evaluation, folder: str | Path) -> Path:
    """Write the report into a staging folder and publish it at ``folder`` (one atomic rename).

    Returns the real folder now behind ``folder``.
    """
    content = results(evaluation)

    def write(staging: Path) -> None:
        (staging / "results.json").write_text(json.dumps(content, indent=2) + "\n", encoding="utf-8")
        plots = [charts.plot_by_k(evaluation, staging), charts.plot_intervals(evaluation, staging)]
        if evaluation.choice is not None:
            drawn = set()
            for sweep in evaluation.choice.sweeps:
                pair = (sweep.row_name, sweep.column_name)
                plots.append(charts.plot_sweep(evaluation, sweep, staging, again=pair in drawn))
                drawn.add(pair)
        if evaluation.settings.get("ranker", {}).get("importances"):
            plots.append(charts.plot_importances(evaluation, staging))
        (staging / "report.md").write_text(markdown(evaluation, content, plots), encoding="utf-8")
        write_settings(staging / "settings.json", chosen_settings(evaluation))

    return publish_folder(Path(folder), write)


def chosen_settings(evaluation: Evaluation) -> Settings:
    """The configuration the evaluation chose (or was given), with the data it was chosen on:
    ``rankrec build --settings REPORT/settings.json`` builds the index with it."""
    settings = evaluation.settings
    chosen_on = {
        "store": settings["data"]["store"],
        "fingerprint": settings["data"]["fingerprint"],
        "split": settings["split"],
        "chosen_by": settings["chosen_by"] or "given (no sweep)",
        "validation_score": None if evaluation.choice is None else evaluation.choice.score,
    }
    return Settings(evaluation.configuration, chosen_on)


def _ranker_block(ranker: dict) -> str:
    """What the rankrec lists' learnt ranker was trained on, in a sentence or two."""
    if not ranker:
        return ""
    if not ranker.get("used"):
        reason = ranker.get("reason", "none asked for")
        return f"No learnt ranker: {reason}; the lists are the PageRank and text mix."
    scores = ", ".join(f"{name} {value:.3f}" for name, value in ranker.get("validation_ndcg@10", {}).items())
    source = labels_text(ranker)
    checked = ranker.get("checked_queries", ranker["queries_used"])
    folds = ranker.get("folds", 4)
    return (
        f"The related lists are ordered by a learnt ranker ({ranker['kind']}), trained inside the build on "
        f"the training part's own {source} ({ranker['queries_used']:,} queries, "
        f"{ranker['examples']:,} candidates; the candidate pools held {ranker['pool_recall']:.1%} of the "
        f"relevant pages). Its build-time check (nDCG@10, {folds}-fold cross-validation over {checked:,} of "
        f"those queries): "
        f"{scores}. "
        f"`{WITHOUT_RANKER_NAME}` below is the same index without it."
    )


# -- markdown ---------------------------------------------------------------------------------------
def _number(value, digits: int = 3) -> str:
    return "–" if value is None else f"{value:.{digits}f}"


def _with_interval(entry: dict, metric: str) -> str:
    value = entry.get(metric)
    interval = entry["ci95"].get(metric)
    if value is None:
        return "–"
    if interval is None:
        return _number(value)
    return f"{value:.3f} [{interval[0]:.3f}, {interval[1]:.3f}]"


def _table(header: list[str], rows: list[list[str]]) -> str:
    lines = ["| " + " | ".join(header) + " |", "|" + "|".join("---" for _ in header) + "|"]
    lines += ["| " + " | ".join(row) + " |" for row in rows]
    return "\n".join(lines) + "\n"


def _verdict(comparison: dict) -> str:
    """Where rankrec wins, loses or ties against the best baseline (intervals decide)."""
    best = comparison["rankrec_vs"]
    groups: dict[str, list[str]] = {"wins": [], "loses": [], "ties": []}
    for metric, found in comparison["metrics"].items():
        low, high = found["ci95"]
        if metric.startswith(("novelty", "intra_list", "unvisited", "hub_in_top")):
            continue  # descriptive, not better or worse
        text = f"{metric} ({found['difference']:+.3f} [{low:+.3f}, {high:+.3f}])"
        groups["wins" if low > 0 else "loses" if high < 0 else "ties"].append(text)
    parts = []
    if groups["wins"]:
        parts.append(f"rankrec beats {best} on " + ", ".join(groups["wins"]))
    if groups["loses"]:
        parts.append(f"rankrec loses to {best} on " + ", ".join(groups["loses"]))
    if groups["ties"]:
        parts.append("the 95% interval of the difference includes 0 on " + ", ".join(groups["ties"]))
    return "; ".join(parts) + "." if parts else "No comparison could be made."


def _counts(counts: dict) -> str:
    return ", ".join(f"{key.replace('_', ' ')} {value:,}" for key, value in counts.items())


def _split_settings(split: dict) -> str:
    shown = []
    for key, value in split.items():
        if key == "name":
            continue
        if key == "cutoff" and value is not None:
            value = datetime.fromtimestamp(value, UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
        shown.append(f"{key.replace('_', ' ')} {value}")
    return ", ".join(shown)


def _interval_cell(item: dict | None) -> str:
    if item is None:
        return "–"
    return f"{item['difference']:+.3f} [{item['ci95'][0]:+.3f}, {item['ci95'][1]:+.3f}]"


def markdown(evaluation: Evaluation, content: dict, plots: list[str]) -> str:
    """``report.md``: every table of the JSON, in words, with the plots."""
    settings, methods = content["settings"], content["methods"]
    data, split, k = settings["data"], settings["split"], settings["headline_k"]
    counts = settings["counts"]
    blocks = [
        "# Offline evaluation of rankrec",
        f"Store `{data['store']}` (data fingerprint `{data['fingerprint']}`): {data['pages']:,} pages, "
        f"{data['links']:,} links, {data['views']:,} views by {data['users']:,} users "
        f"({data['views_outside_the_graph']:,} views of pages outside the graph left out).",
        "## Task",
        f"Split **{split['name']}** ({_split_settings(split)}).\n\n- test split: {_counts(counts['test'])}"
        + (
            ""
            if counts["validation"] is None
            else f"\n- validation split (carved from the training part by the same rule): "
            f"{_counts(counts['validation'])}"
        ),
        "Every method answers the same queries of the same split, learns from its training views only, "
        "and may not list the excluded pages (the pages a reader read in training, or a session's own first "
        "pages). Metrics are over the full catalogue (no sampled negatives).",
        "## rankrec's configuration",
    ]
    if settings["grid"] is None:
        blocks.append("No sweep was run: the configuration is the one given.")
    else:
        blocks.append(
            f"Chosen by {settings['chosen_by']} (validation {evaluation.choice.metric} "
            f"{evaluation.choice.score:.3f}); the test split played no part."
        )
    blocks.append(
        "`settings.json` beside this report holds the whole configuration; "
        "`rankrec build --settings settings.json` serves the lists that were evaluated here."
    )
    configuration = settings["rankrec"]
    names = ("damping", "half_life_days", "navigation_weight", "lift", "text_weight", "title_weight")
    blocks.append(
        _table(
            [
                "damping",
                "half-life (days)",
                "navigation weight",
                "lift exponent",
                "text weight",
                "title weight",
                "ranker",
            ],
            [[*(f"{configuration[name]:g}" for name in names), str(configuration["ranker"])]],
        )
    )
    if evaluation.choice is not None and evaluation.choice.notes:
        blocks.append(" ".join(f"Note: {note}." for note in evaluation.choice.notes))
    if _ranker_block(settings.get("ranker", {})):
        blocks.append(_ranker_block(settings["ranker"]))
    blocks += [
        f"## Results on the test split (k = {k})",
        "Mean over queries, with the per-user bootstrap 95% interval "
        f"({settings['bootstrap']['samples']:,} resamples of users).",
        _table(
            ["method", *(f"{LABELS[m]}@{k}" for m in ACCURACY), "MRR"],
            [
                [
                    name,
                    *(_with_interval(methods[name], f"{m}@{k}") for m in ACCURACY),
                    _with_interval(methods[name], "mrr"),
                ]
                for name in methods
            ],
        ),
        "Beyond accuracy (coverage is one number for the catalogue: no interval):",
        _table(
            ["method", *(f"{LABELS[m]}@{k}" for m in BEYOND), "lists with a hub in their top 3"],
            [
                [
                    name,
                    *(_with_interval(methods[name], f"{m}@{k}") for m in BEYOND),
                    _with_interval(methods[name], "hub_in_top_3"),
                ]
                for name in methods
            ],
        ),
    ]
    comparison = content["comparison"]
    best = comparison["rankrec_vs"]
    validation = ", ".join(f"{name} {_number(value)}" for name, value in content["validation"].items())
    header = ["metric", "rankrec", best, "difference", "95% interval", "share of resamples rankrec ahead"]
    blocks += [
        f"## rankrec against the best baseline, {best}",
        f"The best baseline is the one with the highest {comparison['best_baseline_chosen_on']}"
        + (f" (validation: {validation})" if validation else "")
        + ". Differences are rankrec minus the baseline, paired by query, users resampled whole."
        + _tuned_note(content["settings"]),
        _table(
            header,
            [
                [
                    metric,
                    _number(found["rankrec"]),
                    _number(found[best]),
                    f"{found['difference']:+.3f}",
                    f"[{found['ci95'][0]:+.3f}, {found['ci95'][1]:+.3f}]",
                    f"{found['share_rankrec_better']:.2f}",
                ]
                for metric, found in comparison["metrics"].items()
            ],
        ),
        "**" + _verdict(comparison) + "**",
        "Against every baseline:",
        _table(
            ["baseline", f"rankrec − baseline, nDCG@{k}", f"rankrec − baseline, hit rate@{k}"],
            [
                [baseline, _interval_cell(found.get(f"ndcg@{k}")), _interval_cell(found.get(f"hit_rate@{k}"))]
                for baseline, found in comparison["against_every_baseline"].items()
            ],
        ),
    ]
    if content["sweeps"]:
        blocks.append("## Sweeps (validation split)")
        metric = evaluation.choice.metric
        for sweep in content["sweeps"]:
            fixed = ", ".join(
                f"{key.replace('_', ' ')} {setting_text(value)}" for key, value in sweep["fixed"].items()
            )
            blocks.append(
                f"Validation {metric}, {sweep['rows'].replace('_', ' ')} (rows) × "
                f"{sweep['columns'].replace('_', ' ')} (columns), with {fixed}:"
            )
            header = [f"{sweep['rows']} \\ {sweep['columns']}", *(f"{v:g}" for v in sweep["column_values"])]
            lines = zip(sweep["row_values"], sweep[metric], strict=True)
            blocks.append(
                _table(header, [[f"{value:g}", *(_number(cell) for cell in line)] for value, line in lines])
            )
    blocks += ["## Plots", *(f"![{name}]({name})" for name in plots), "## Definitions", DEFINITIONS]
    return "\n\n".join(block.rstrip("\n") for block in blocks) + "\n"


DEFINITIONS = """\
- hit rate@k: 1 if any of the first k pages is relevant; precision@k: relevant pages among the first k,
  divided by k; recall@k: relevant pages found, divided by all relevant; MAP@k: precision at the ranks of
  relevant pages, summed and divided by min(k, relevant); MRR: 1 / rank of the first relevant page.
- nDCG@k (Järvelin & Kekäläinen 2002): DCG with discount 1 / log2(rank + 1), divided by the DCG of the
  ideal ranking of all held-out pages; binary gain 1, graded gain the number of held-out views of the page.
- lists with a hub in their top 3: share of lists whose first three pages include a hub: a page linked
  from at least 20% of all pages, or from 5% with at least half its in-links page chrome (home, license,
  index, table-of-contents pages);
- coverage@k: share of the catalogue in at least one list; novelty@k: mean self-information −log2 of a
  page's (add-one) share of training views; distinct spaces per page: spaces in a list divided by its
  length; share never visited: pages the reader never viewed in training.
- Intervals: percentile bootstrap over users (a user's sessions are drawn together); paired differences
  draw the same users for both methods."""


def _tuned_note(settings: dict) -> str:
    """Which settings each tuned baseline got on validation, and which were skipped and why."""
    tuned = settings.get("tuned_baselines") or {}
    parts = [f"{name}: {found['chosen']}" for name, found in tuned.items()]
    note = f" Tuned on the validation split: {'; '.join(parts)}." if parts else ""
    for message in (settings.get("skipped_baselines") or {}).values():
        note += f" {message}."
    return note

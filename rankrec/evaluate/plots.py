"""The evaluation report's plots (PNG, matplotlib's object API: no global state, no screen)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from .run import Evaluation

PLOTTED = ("ndcg", "ndcg_graded", "recall", "hit_rate", "precision", "map")
LABELS = {
    "ndcg": "nDCG (binary)",
    "ndcg_graded": "nDCG (graded)",
    "recall": "recall",
    "hit_rate": "hit rate",
    "precision": "precision",
    "map": "MAP",
    "mrr": "MRR",
    "coverage": "catalogue coverage",
    "novelty": "novelty (bits)",
    "intra_list_diversity": "distinct spaces per page",
    "unvisited_share": "share never visited",
}


def plot_by_k(evaluation: Evaluation, staging: Path) -> str:
    ks = evaluation.settings["ks"]
    figure = Figure(figsize=(12, 7), layout="constrained")
    axes = figure.subplots(2, 3).ravel()
    for ax, metric in zip(axes, PLOTTED, strict=True):
        for name, scores in evaluation.methods.items():
            values = [scores.means.get(f"{metric}@{k}") for k in ks]
            values = [np.nan if value is None else value for value in values]
            style = {"linewidth": 2.5, "color": "black"} if name == "rankrec" else {"linewidth": 1.2}
            ax.plot(ks, values, marker="o", label=name, **style)
        ax.set_xlabel("k (list length)")
        ax.set_title(f"{LABELS[metric]}@k")
        ax.set_xticks(ks)
        ax.grid(alpha=0.3)
    axes[0].legend(fontsize=8)
    figure.suptitle(f"Test split ({evaluation.split.name}): each metric against k, every method")
    figure.savefig(staging / "metrics_by_k.png", dpi=100)
    return "metrics_by_k.png"


def plot_intervals(evaluation: Evaluation, staging: Path) -> str:
    k = evaluation.settings["headline_k"]
    metric = f"ndcg@{k}"
    names = list(evaluation.methods)
    means = [evaluation.methods[name].means[metric] or 0.0 for name in names]
    intervals = [evaluation.methods[name].ci95.get(metric, [np.nan, np.nan]) for name in names]
    low = [mean - interval[0] for mean, interval in zip(means, intervals, strict=True)]
    high = [interval[1] - mean for mean, interval in zip(means, intervals, strict=True)]
    figure = Figure(figsize=(7, 0.5 * len(names) + 1.5), layout="constrained")
    ax = figure.subplots()
    colours = ["black" if name == "rankrec" else "tab:blue" for name in names]
    ax.barh(names, means, xerr=[np.maximum(low, 0), np.maximum(high, 0)], color=colours, alpha=0.7, capsize=4)
    ax.invert_yaxis()
    ax.set_xlabel(f"{metric} on the test split, with per-user bootstrap 95% interval")
    ax.grid(axis="x", alpha=0.3)
    figure.savefig(staging / "ndcg_intervals.png", dpi=100)
    return "ndcg_intervals.png"


def plot_sweep(evaluation: Evaluation, sweep, staging: Path, again: bool = False) -> str:
    """A sweep's heat map; ``again``: the second sweep of the same two settings (its own file)."""
    figure = Figure(figsize=(1.3 * len(sweep.columns) + 2.5, 0.9 * len(sweep.rows) + 2), layout="constrained")
    ax = figure.subplots()
    image = ax.imshow(sweep.scores, cmap="viridis", aspect="auto")
    ax.set_xticks(range(len(sweep.columns)), [f"{value:g}" for value in sweep.columns])
    ax.set_yticks(range(len(sweep.rows)), [f"{value:g}" for value in sweep.rows])
    ax.set_xlabel(sweep.column_name.replace("_", " "))
    ax.set_ylabel(sweep.row_name.replace("_", " "))
    best_row, best_column, _ = sweep.best()
    low, high = np.nanmin(sweep.scores), np.nanmax(sweep.scores)
    bright = (sweep.scores - low) / (high - low) > 0.6 if high > low else np.zeros(sweep.scores.shape, bool)
    for row, row_value in enumerate(sweep.rows):
        for column, column_value in enumerate(sweep.columns):
            chosen = row_value == best_row and column_value == best_column
            ax.text(
                column,
                row,
                f"{sweep.scores[row, column]:.3f}",
                ha="center",
                va="center",
                color="red" if chosen else "black" if bright[row, column] else "white",
                fontweight="bold" if chosen else "normal",
            )
    figure.colorbar(image, ax=ax, label=f"validation {evaluation.choice.metric}")
    fixed = ", ".join(
        f"{name.replace('_', ' ')} {setting_text(value)}" for name, value in sweep.fixed.items()
    )
    ax.set_title(f"{sweep.row_name} × {sweep.column_name} ({fixed})".replace("_", " "), fontsize=10)
    name = f"sweep_{sweep.row_name}_{sweep.column_name}{'_again' if again else ''}.png"
    figure.savefig(staging / name, dpi=100)
    return name


def plot_importances(evaluation: Evaluation, staging: Path) -> str:
    ranker = evaluation.settings["ranker"]
    names, values = zip(*sorted(ranker["importances"].items(), key=lambda item: item[1]), strict=True)
    figure = Figure(figsize=(7, 0.35 * len(names) + 1.5), layout="constrained")
    ax = figure.subplots()
    ax.barh([name.replace("_", " ") for name in names], values, color="tab:green", alpha=0.8)
    measure = "total split gain" if ranker.get("kind") == "lightgbm" else "|coefficient| (standardised)"
    ax.set_xlabel(f"importance ({measure}), largest 1")
    ax.set_title(f"Learnt ranker ({ranker.get('kind')}, labels: {ranker.get('labels')})", fontsize=10)
    ax.grid(axis="x", alpha=0.3)
    figure.savefig(staging / "ranker_importances.png", dpi=100)
    return "ranker_importances.png"


def setting_text(value) -> str:
    """A setting's value as the report shows it: numbers short (``:g``), names as they are."""
    return f"{value:g}" if isinstance(value, int | float) else str(value)

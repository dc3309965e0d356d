"""A learnt ranker: LightGBM's lambdarank (gradient-boosted trees trained on a listwise nDCG objective;
Burges 2010, "From RankNet to LambdaRank to LambdaMART") or a linear model (logistic regression on
standardised features), saved in an index folder and scored there.

An item's reason comes from the model's own attribution by occlusion: the score an item loses when one
group of its features is set to what a page without that evidence has (no text neighbour; no link
between the two pages) is that group's contribution (for the linear model exactly its terms; for the
trees the same question asked of the trees, three predictions per list instead of TreeSHAP's cost per
row). An explanation names the group with the largest contribution. Feature importances in the
training summary are LightGBM's total split gain, or the linear model's absolute coefficients (of
standardised features).
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import InputError
from .features import FEATURES

RANKER_FORMAT = 4
KINDS = ("lightgbm", "linear")


@dataclass(frozen=True, eq=False)
class Ranker:
    """A trained model: ``kind``, the feature names it reads, its parameters and its training summary."""

    kind: str
    features: tuple[str, ...]
    summary: dict
    booster: object = None  # lightgbm.Booster (kind "lightgbm")
    mean: np.ndarray = field(default_factory=lambda: np.zeros(0))
    scale: np.ndarray = field(default_factory=lambda: np.zeros(0))
    coef: np.ndarray = field(default_factory=lambda: np.zeros(0))

    def score(self, features: np.ndarray) -> np.ndarray:
        """One score per row (higher first)."""
        features = np.asarray(features, dtype=np.float64)
        if features.shape[0] == 0:
            return np.zeros(0)
        if self.kind == "lightgbm":
            return np.asarray(self.booster.predict(features, num_threads=1), dtype=np.float64)
        return ((features - self.mean) / self.scale) @ self.coef

    def contributions(self, features: np.ndarray, groups, scores: np.ndarray | None = None) -> list:
        """Per group of ``groups`` (each a dict column -> absent value), per row, the score lost when those
        columns take their absent values (see the module docstring): ``score(x) − score(x with the group
        absent)``. ``scores``: ``score(features)`` when the caller has it. Every occluded copy is scored in
        one call (a tree model's per-call cost dominates a list's few rows)."""
        features = np.asarray(features, dtype=np.float64)
        groups = list(groups)
        scores = self.score(features) if scores is None else np.asarray(scores, dtype=np.float64)
        occluded = np.tile(features, (len(groups), 1))
        rows = features.shape[0]
        for number, absent in enumerate(groups):
            for column, value in absent.items():
                occluded[number * rows : (number + 1) * rows, column] = value
        lost = self.score(occluded).reshape(len(groups), rows)
        return [scores - row for row in lost]

    def importances(self) -> dict[str, float]:
        """Each feature's importance (see the module docstring), largest 1."""
        if self.kind == "lightgbm":
            values = np.asarray(self.booster.feature_importance(importance_type="gain"), dtype=np.float64)
        else:
            values = np.abs(self.coef)
        top = values.max() if values.size and values.max() > 0 else 1.0
        return {name: round(float(value / top), 4) for name, value in zip(self.features, values, strict=True)}

    def save(self, folder: Path) -> None:
        folder.mkdir(parents=True, exist_ok=True)
        meta = {"format": RANKER_FORMAT, "kind": self.kind, "features": list(self.features)}
        meta["summary"] = self.summary
        if self.kind == "lightgbm":
            (folder / "model.txt").write_text(self.booster.model_to_string(), encoding="utf-8")
        else:
            meta |= {"mean": self.mean.tolist(), "scale": self.scale.tolist(), "coef": self.coef.tolist()}
        (folder / "ranker.json").write_text(json.dumps(meta, indent=2) + "\n", encoding="utf-8")


def labels_text(summary: dict) -> str:
    """What a ranker's training summary says it learnt from, in words.

    >>> labels_text({"labels": "sessions", "windows": 3}), labels_text({"labels": "held-out links"})
    ('sessions of 3 periods', 'held-out links')
    """
    periods = summary.get("windows", 1)
    return f"{summary['labels']} of {periods} periods" if periods > 1 else summary["labels"]


def load_ranker(folder: Path) -> Ranker | None:
    """The ranker saved in ``folder`` (None when there is none); InputError when it does not fit this
    rankrec (another format, other features)."""
    path = folder / "ranker.json"
    if not path.exists():
        return None
    meta = json.loads(path.read_text(encoding="utf-8"))
    if meta.get("format") != RANKER_FORMAT or tuple(meta.get("features", ())) != FEATURES:
        raise InputError(str(path), None, "the index's ranker was made by another rankrec; rebuild the index")
    kind = meta["kind"]
    if kind == "lightgbm":
        import lightgbm

        booster = lightgbm.Booster(model_str=(folder / "model.txt").read_text(encoding="utf-8"))
        return Ranker(kind, FEATURES, meta["summary"], booster=booster)
    arrays = {name: np.asarray(meta[name], dtype=np.float64) for name in ("mean", "scale", "coef")}
    return Ranker(kind, FEATURES, meta["summary"], **arrays)

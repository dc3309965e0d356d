"""Training a related-list ranker from the wiki's own evidence, without leaks.

With reading history (at least ``MIN_QUERIES`` sessions that go on from their first page), labels are the
pages a session went on to: the sessions of the last fifth of the history's span are the queries (their
first page the seed, the distinct pages after it relevant; :func:`rankrec.evaluate.splits.session_split`),
and every feature (the navigation blend, views) is computed from the views before that cutoff alone.
Up to ``SESSION_WINDOWS`` such periods are taken, each the last fifth of the history before the one
after it, each with features from the views before its own cutoff (:func:`_session_windows`): more
labelled sessions, never a label inside its own features' history.

When the configuration names the places of the wiki's curated blocks (``editorial_place``) and at least
``MIN_QUERIES`` pages hold some, those come first: every such page is a query, its curated links are its
targets and are removed from the graph the features read (:func:`rankrec.evaluate.links.editorial_pairs`).

Otherwise labels are held-out links (:func:`rankrec.evaluate.links.held_out_links_split`): a share of each
page's content links (never page chrome) is hidden, the transition is rebuilt without them, and each query
page's candidates (:func:`rankrec.ranker.features.candidate_pool`) and features are computed on that reduced
graph; a candidate is relevant when it is one of the page's hidden targets. No hidden link reaches any
feature of its own query (a property test checks it). The text neighbours are computed from page text,
which the split does not change.

Both models are compared by ``FOLDS``-fold cross-validation (on at most ``CV_QUERIES`` queries, a seeded
sample, so that the choice costs the same on a long history): each query is scored (nDCG@10 of its pool
ordered by the model) by the models fitted on the folds that do not hold it; with ``ranker="auto"``
LightGBM is kept only when it beats the linear model by more than two standard errors of the paired
per-query difference (common practice: keep the simpler
model unless the better one is clearly better), and the kept model is refitted on every query.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import replace

import numpy as np
import scipy.sparse as sp

from ..evaluate.links import editorial_pairs, editorial_split, held_out_links_split
from ..evaluate.splits import session_split
from ..evaluate.tasks import excluded_pages
from ..profiles import ViewLog
from ..progress import report
from .features import FEATURES, POOL, Signals, candidate_pool, click_walk, pair_features
from .model import Ranker

MIN_QUERIES = 40  # queries with a relevant candidate needed to train at all (fewer: no ranker)
HOLD_OUT_SHARE = 0.2  # of each page's content links, hidden as labels
_LIGHTGBM = {
    "objective": "lambdarank",
    "metric": "ndcg",
    "eval_at": [10],
    "learning_rate": 0.05,
    "num_leaves": 7,
    "min_data_in_leaf": 20,
    "feature_fraction": 0.9,
    "lambdarank_truncation_level": 20,
    "deterministic": True,
    "force_row_wise": True,
    "verbosity": -1,
}
_ROUNDS = 300  # with 7 leaves: better than 15 leaves and 200 rounds on Wikispeedia sessions (measured)
# the model choice: cross-validation folds, and the queries it is checked on at most (a seeded sample).
# At a million pages the choice cost 156 s of a 270 s ranker step with 4 folds on 2,000 queries (LightGBM
# fits dominate: measured); 3 folds on 1,500 cost half as many fitted queries. The chosen model is still
# fitted on every query, so only the choice, not the model, depends on these.
FOLDS = 3
CV_QUERIES = 1500
# successive periods of the reading history whose sessions give labels (each with its own features):
# on Wikispeedia sessions three windows instead of one raised the ranker's test nDCG@10 by about 0.005
# (measured in a side harness on the same candidate pools; the served figure is in the README)
SESSION_WINDOWS = 3


def examples(
    signals: Signals,
    seeds,
    vectors,
    relevant: sp.csr_array,
    pool: int = POOL,
    excluded: sp.csr_array | None = None,
):
    """Features, labels and group sizes of every seed's candidates (seeds without a relevant candidate
    left out), and the share of relevant pages the pools hold (their recall). A row of ``excluded``
    (:func:`rankrec.evaluate.tasks.excluded_pages`) names pages its query's list may not hold: they are
    no candidates, neither good nor bad (with held-out links, the links the page keeps: learning them as
    wrong answers would teach the model to push a page's own links down its served list)."""
    blocks, labels, groups, kept, found, wanted = [], [], [], [], 0, 0
    for row, (seed, (indices, values)) in enumerate(zip(seeds, vectors, strict=True)):
        targets = relevant.indices[relevant.indptr[row] : relevant.indptr[row + 1]]
        walk = click_walk(signals, int(seed))
        candidates = candidate_pool(signals, int(seed), indices, values, pool, walk)
        if excluded is not None:
            barred = excluded.indices[excluded.indptr[row] : excluded.indptr[row + 1]]
            candidates = candidates[~np.isin(candidates, barred)]
        label = np.isin(candidates, targets)
        wanted += targets.size
        found += int(label.sum())
        if not label.any():
            continue
        blocks.append(pair_features(signals, int(seed), candidates, indices, values, walk))
        labels.append(label.astype(np.float64))
        groups.append(candidates.size)
        kept.append(targets.size)
    features = np.vstack(blocks) if blocks else np.zeros((0, len(FEATURES)), dtype=np.float32)
    target = np.concatenate(labels) if labels else np.zeros(0)
    recall = found / wanted if wanted else 0.0
    return features, target, np.asarray(groups, dtype=np.int64), np.asarray(kept, dtype=np.int64), recall


def _ndcg_per_group(scores, labels, groups, relevant_counts, k: int = 10) -> np.ndarray:
    """Binary nDCG@k of each group's candidates ordered by ``scores`` (ideal: every relevant page of the
    query, in its pool or not)."""
    out = np.zeros(groups.size)
    discounts = 1.0 / np.log2(np.arange(2, k + 2))
    start = 0
    for number, (size, count) in enumerate(zip(groups.tolist(), relevant_counts.tolist(), strict=True)):
        part = slice(start, start + size)
        order = np.argsort(-scores[part], kind="stable")[:k]
        gains = labels[part][order]
        ideal = discounts[: min(count, k)].sum()
        out[number] = float(gains @ discounts[: gains.size]) / ideal if ideal else 0.0
        start += size
    return out


def fit_lightgbm(features, labels, groups, *, seed: int = 0, workers: int = 1):
    """A lambdarank booster (deterministic for a seed)."""
    import lightgbm

    parameters = _LIGHTGBM | {"seed": seed, "num_threads": workers}
    data = lightgbm.Dataset(features, labels, group=groups, feature_name=list(FEATURES), free_raw_data=False)
    return lightgbm.train(parameters, data, num_boost_round=_ROUNDS)


def fit_linear(features, labels, *, seed: int = 0):
    """(mean, scale, coef) of a logistic regression on standardised features."""
    from sklearn.linear_model import LogisticRegression

    features = np.asarray(features, dtype=np.float64)
    mean, scale = features.mean(axis=0), features.std(axis=0)
    scale[scale == 0] = 1.0
    model = LogisticRegression(max_iter=1000, class_weight="balanced", random_state=seed)
    model.fit((features - mean) / scale, labels)
    return mean, scale, model.coef_.ravel()


def _make(kind, features, labels, groups, seed, workers, summary) -> Ranker:
    if kind == "lightgbm":
        booster = fit_lightgbm(features, labels, groups, seed=seed, workers=workers)
        return Ranker(kind, FEATURES, summary, booster=booster)
    mean, scale, coef = fit_linear(features, labels, seed=seed)
    return Ranker(kind, FEATURES, summary, mean=mean, scale=scale, coef=coef)


def _cross_validated(kinds, features, labels, groups, counts, seed: int, workers: int) -> dict:
    """Each model kind's nDCG@10 on every query, each query scored by the model fitted on the ``FOLDS``
    − 1 folds that do not hold it (queries dealt to folds at random under ``seed``)."""
    fold = np.empty(groups.size, dtype=np.int64)
    fold[np.random.default_rng(seed).permutation(groups.size)] = np.arange(groups.size) % FOLDS
    owner = np.repeat(fold, groups)
    scores = {name: np.zeros(groups.size) for name in kinds}
    for part in range(FOLDS):
        rows_fit, rows_check, held = owner != part, owner == part, fold == part
        for name in kinds:
            model = _make(name, features[rows_fit], labels[rows_fit], groups[~held], seed, workers, {})
            scores[name][held] = _ndcg_per_group(
                model.score(features[rows_check]), labels[rows_check], groups[held], counts[held]
            )
    return scores


def _query_sample(total: int, count: int, seed: int) -> np.ndarray:
    """A boolean mask choosing ``count`` of ``total`` queries at random under ``seed`` (all when fewer)."""
    chosen = np.ones(total, dtype=bool)
    if total > count:
        chosen[:] = False
        chosen[np.random.default_rng(seed).choice(total, size=count, replace=False)] = True
    return chosen


def _sample(split, queries: int, seed: int):
    """``split`` with at most ``queries`` of its queries (a seeded random sample)."""
    if len(split.queries) <= queries:
        return split
    keep = np.sort(np.random.default_rng(seed).choice(len(split.queries), size=queries, replace=False))
    chosen = replace(
        split.queries,
        users=split.queries.users[keep],
        times=split.queries.times[keep],
        pages=split.queries.pages[keep],
    )
    return replace(split, queries=chosen, relevant=sp.csr_array(split.relevant[keep]))


def _editorial_labels(evidence, pattern: str, queries: int, seed: int):
    """(split, evidence without the curated links, summary) from the wiki's curated blocks; (None, None,
    {}) without a pattern or with fewer than ``MIN_QUERIES`` pages holding such links."""
    if not pattern:
        return None, None, {}
    pairs = editorial_pairs(evidence.places, evidence.size, pattern)
    split = editorial_split(evidence.graph.adjacency, pairs, pattern=pattern, seed=seed, test_share=1.0)
    if len(split.queries) < MIN_QUERIES:
        return None, None, {}
    split = _sample(split, queries, seed)
    summary = {"labels": "editorial blocks", "pattern": pattern, "seed": seed}
    return split, evidence.with_links(split.links), summary


def _session_labels(evidence, queries: int, seed: int, gap: float):
    """(split, evidence the features may read, summary) from reading history; (None, None, {}) without
    enough of it."""
    views = evidence.views
    inside = views.pages >= 0
    if np.count_nonzero(inside) < 2 * MIN_QUERIES:
        return None, None, {}
    users, pages, times = views.users[inside], views.pages[inside], views.times[inside]
    split = session_split(users, pages, times, evidence.size, gap=gap, test_share=0.2, prefix=1)
    if len(split.queries) < MIN_QUERIES:
        return None, None, {}
    split = _sample(split, queries, seed)
    before = evidence.with_views(ViewLog(split.train.users, split.train.pages, split.train.times))
    summary = {"labels": "sessions", "cutoff": float(split.train_until), "gap_seconds": gap, "seed": seed}
    return split, before, summary


def _session_windows(evidence, queries: int, seed: int, gap: float) -> list:
    """Up to ``SESSION_WINDOWS`` labelled periods of the reading history, latest first, each as
    :func:`_session_labels` makes it: the last fifth of the history, then the last fifth of the history
    before that period, and so on. Each window's features read only the views before its own period, so
    no window's labels reach its features; [] without enough history."""
    windows, before = [], evidence
    for _ in range(SESSION_WINDOWS):
        split, reduced, summary = _session_labels(before, queries, seed, gap)
        if split is None:
            break
        windows.append((split, reduced, summary))
        before = reduced
    return windows


def _link_labels(evidence, queries: int, seed: int):
    """(split, evidence without the hidden links, summary): held-out links as labels."""
    from ..derive import chrome_only  # the build's own chrome judgement

    split = held_out_links_split(
        evidence.graph.adjacency,
        chrome=chrome_only(evidence),
        share=HOLD_OUT_SHARE,
        seed=seed,
        max_queries=None if evidence.size <= queries else queries,
    )
    summary = {"labels": "held-out links", "share": HOLD_OUT_SHARE, "seed": seed}
    return split, evidence.with_links(split.links), summary


def train_ranker(
    evidence,
    signals_of: Callable,
    vectors_of: Callable,
    *,
    kind: str = "auto",
    queries: int = 2000,
    seed: int = 0,
    gap: float = 1800.0,
    editorial: str = "",
    workers: int = 1,
    progress=None,
) -> tuple[Ranker | None, dict]:
    """A ranker trained on held-out links of ``evidence`` (see the module docstring), and what training
    did (labels, queries, pool recall, both models' validation nDCG@10, the choice; or why there is none).

    ``signals_of(evidence)`` gives the :class:`Signals` of a wiki (the build's own graph code);
    ``vectors_of(signals_source, seeds)`` each seed's personalised PageRank vector on it.
    """
    started = time.perf_counter()
    windows = [_editorial_labels(evidence, editorial, queries, seed)]
    if windows[0][0] is None:
        windows = _session_windows(evidence, queries, seed, gap) or [_link_labels(evidence, queries, seed)]
    summary = dict(windows[0][2])
    if summary.get("labels") == "sessions":
        summary |= {"windows": len(windows), "cutoffs": [window[2]["cutoff"] for window in windows]}
    asked = sum(len(split.queries) for split, _, _ in windows)
    if asked < MIN_QUERIES:
        return None, summary | {"used": False, "reason": f"only {asked} queries to learn from"}
    parts, found, wanted = [], 0.0, 0
    for number, (split, reduced, _) in enumerate(windows):
        seeds = split.queries.pages[:, 0]
        signals, transition = signals_of(reduced)
        vectors = vectors_of(transition, seeds)
        *part, recall = examples(signals, seeds, vectors, split.relevant, excluded=excluded_pages(split))
        del signals, transition  # let one window's graph go before the next is made (memory at 1M pages)
        parts.append(part)
        found, wanted = found + recall * split.relevant.nnz, wanted + split.relevant.nnz
        report(progress, "ranker: training examples", number + 1, len(windows) + 2)
    joined = (np.concatenate([part[column] for part in parts]) for column in range(4))
    features, labels, groups, counts = joined
    recall = found / wanted if wanted else 0.0
    summary |= {"queries": asked, "queries_used": int(groups.size), "pool_recall": round(recall, 4)}
    summary["examples"] = int(labels.size)
    if groups.size < MIN_QUERIES:
        return None, summary | {"used": False, "reason": f"only {groups.size} queries have a label"}
    kinds = ("linear", "lightgbm") if kind == "auto" else (kind,)
    sample = _query_sample(groups.size, CV_QUERIES, seed)
    rows = np.repeat(sample, groups)
    summary |= {"folds": FOLDS, "checked_queries": int(sample.sum())}
    scores = _cross_validated(
        kinds, features[rows], labels[rows], groups[sample], counts[sample], seed, workers
    )
    report(progress, "ranker: models compared", len(windows) + 1, len(windows) + 2)
    chosen = kind
    if kind == "auto":
        difference = scores["lightgbm"] - scores["linear"]
        error = float(difference.std(ddof=1) / np.sqrt(difference.size)) if difference.size > 1 else 0.0
        chosen = "lightgbm" if difference.mean() > 2 * error else "linear"
        summary["difference_lightgbm_minus_linear"] = [round(float(difference.mean()), 4), round(error, 4)]
    summary |= {
        "validation_ndcg@10": {name: round(float(value.mean()), 4) for name, value in scores.items()},
        "kind": chosen,
        "used": True,
    }
    ranker = _make(chosen, features, labels, groups, seed, workers, {})
    summary["importances"] = ranker.importances()
    summary["seconds"] = round(time.perf_counter() - started, 3)
    report(progress, "ranker: trained", len(windows) + 2, len(windows) + 2)
    return replace(ranker, summary=summary), summary

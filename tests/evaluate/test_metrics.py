"""Ranking metrics against published worked examples, textbook definitions and scikit-learn."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.metrics import average_precision_score, ndcg_score

from rankrec.evaluate import (
    average_precision,
    coverage,
    dcg,
    evaluate_lists,
    hit_rate,
    intra_list_diversity,
    ndcg,
    novelty,
    precision,
    recall,
    reciprocal_rank,
    unvisited_share,
)

PER_USER = ("hit_rate", "precision", "recall", "map", "ndcg")


def _pad(lists, width):
    out = np.full((len(lists), width), -1, dtype=np.int64)
    for row, pages in enumerate(lists):
        out[row, : len(pages)] = pages
    return out


# ---------------------------------------------------------------------------------- published examples


def test_dcg_and_ndcg_match_the_wikipedia_worked_example():
    # English Wikipedia, "Discounted cumulative gain", example (from memory): documents D1..D6 ranked in
    # that order with relevances 3, 2, 3, 0, 1, 2 give DCG@6 = 6.861; with two more relevant documents
    # (D7: 3, D8: 2) that the ranking did not retrieve, the ideal order 3, 3, 3, 2, 2, 2 gives
    # IDCG@6 = 8.740 and nDCG@6 = 0.785. Linear gain rel_i / log2(i + 1) reproduces these numbers.
    relevant = sp.csr_array(np.array([[3, 2, 3, 0, 1, 2, 3, 2]], dtype=float))
    recommended = np.array([[0, 1, 2, 3, 4, 5]])
    assert dcg(recommended, relevant, 6, gains="graded")[0] == pytest.approx(6.861, abs=5e-4)
    assert ndcg(recommended, relevant, 6, gains="graded")[0] == pytest.approx(0.785, abs=5e-4)


def test_mrr_matches_the_wikipedia_example():
    # English Wikipedia, "Mean reciprocal rank" (from memory): three queries whose first correct answer is
    # at rank 3, 2 and 1 give MRR = (1/3 + 1/2 + 1) / 3 = 11/18 ≈ 0.61.
    recommended = np.array([[0, 1, 2], [3, 4, 5], [6, 7, 8]])
    relevant = sp.csr_array((np.ones(3), ([0, 1, 2], [2, 4, 6])), shape=(3, 9))
    values = reciprocal_rank(recommended, relevant)
    assert values.tolist() == pytest.approx([1 / 3, 1 / 2, 1.0])
    assert values.mean() == pytest.approx(11 / 18)
    assert round(float(values.mean()), 2) == 0.61


def test_precision_and_recall_follow_the_textbook_definitions():
    # Manning, Raghavan & Schütze, Introduction to Information Retrieval, ch. 8 (from memory):
    # precision = #(relevant retrieved) / #(retrieved), recall = #(relevant retrieved) / #(relevant).
    # Hand example: 4 relevant pages (2, 5, 7, 30); the top 10 retrieves 2, 5 and 7.
    relevant = sp.csr_array((np.ones(4), ([0, 0, 0, 0], [2, 5, 7, 30])), shape=(1, 40))
    recommended = np.array([[2, 11, 5, 12, 13, 7, 14, 15, 16, 17]])
    assert precision(recommended, relevant, 10)[0] == pytest.approx(3 / 10)
    assert recall(recommended, relevant, 10)[0] == pytest.approx(3 / 4)
    # at k = 3 the cut-off list is (2, 11, 5): 2 relevant of 3 retrieved, 2 of 4 relevant found
    assert precision(recommended, relevant, 3)[0] == pytest.approx(2 / 3)
    assert recall(recommended, relevant, 3)[0] == pytest.approx(2 / 4)
    assert hit_rate(recommended, relevant, 1)[0] == 1.0


# ------------------------------------------------------------------------------- scikit-learn reference


def _random_case(rng, users, pages, width, *, relevant_inside_list, graded):
    """Lists of ``width`` distinct pages; relevant pages inside the lists or anywhere in the catalogue."""
    recommended = np.array([rng.permutation(pages)[:width] for _ in range(users)])
    gains = np.zeros((users, pages))
    for user in range(users):
        pool = recommended[user] if relevant_inside_list else np.arange(pages)
        chosen = rng.choice(pool, size=rng.integers(1, width + 1), replace=False)
        gains[user, chosen] = rng.integers(1, 4, size=chosen.size) if graded else 1.0
    # full-catalogue scores: the list's pages first in list order, every other page below, no ties
    scores = -1.0 - rng.permutation(users * pages).reshape(users, pages) / (users * pages)
    for user in range(users):
        scores[user, recommended[user]] = np.arange(width, 0, -1)
    return recommended, gains, scores


@pytest.mark.parametrize("graded", [False, True], ids=["binary", "graded"])
@pytest.mark.parametrize("k", [1, 3, 8, 12])
def test_ndcg_matches_sklearn_when_every_relevant_page_is_scored(graded, k):
    # scikit-learn's ndcg_score uses linear gains and a log2(rank + 1) discount and builds its ideal DCG from
    # the items it is given; giving it the whole catalogue's scores makes its ideal ours (all relevant pages).
    rng = np.random.default_rng(11 + k)
    recommended, gains, scores = _random_case(
        rng, users=25, pages=30, width=12, relevant_inside_list=False, graded=graded
    )
    ours = ndcg(recommended, sp.csr_array(gains), k, gains="graded" if graded else "binary")
    reference = [ndcg_score(gains[[u]], scores[[u]], k=k) for u in range(len(gains))]
    np.testing.assert_allclose(ours, reference, rtol=1e-12, atol=1e-12)


def test_sklearn_given_only_the_list_overstates_ndcg_when_relevant_pages_are_missing():
    # scikit-learn given only the recommended items (not the catalogue) leaves the unretrieved relevant
    # pages out of its ideal ranking, so it scores at least as high as the full-catalogue nDCG, and
    # strictly higher whenever a missed relevant page would enter the ideal top k.
    rng = np.random.default_rng(5)
    width = 8
    recommended, gains, _ = _random_case(
        rng, users=60, pages=30, width=width, relevant_inside_list=False, graded=False
    )
    ours = ndcg(recommended, sp.csr_array(gains), width)
    list_gains = np.take_along_axis(gains, recommended, axis=1)
    list_scores = np.tile(np.arange(width, 0, -1, dtype=float), (len(gains), 1))
    found = list_gains.sum(axis=1)
    missed = gains.sum(axis=1) - found
    list_only = np.array(
        [ndcg_score(list_gains[[u]], list_scores[[u]], k=width) if found[u] else 0.0 for u in range(60)]
    )
    assert np.all(ours <= list_only + 1e-12)
    strict = (found > 0) & (missed > 0) & (found < width)
    assert strict.sum() >= 10
    assert np.all(ours[strict] < list_only[strict] - 1e-6)


@pytest.mark.parametrize("k", [10, 14])
def test_average_precision_matches_sklearn_when_k_covers_every_relevant_page(k):
    # scikit-learn's average_precision_score (Σ (R_n − R_{n−1}) P_n over the full catalogue ranking) equals
    # AP@k with normaliser |R| = min(k, |R|) when every relevant page is within the top k.
    rng = np.random.default_rng(k)
    recommended, gains, scores = _random_case(
        rng, users=30, pages=40, width=10, relevant_inside_list=True, graded=False
    )
    ours = average_precision(recommended, sp.csr_array(gains), k)
    reference = [average_precision_score(gains[u], scores[u]) for u in range(len(gains))]
    np.testing.assert_allclose(ours, reference, rtol=1e-12)


def test_slot_lookup_matches_scipy_indexing_on_a_large_sparse_catalogue():
    # scipy.sparse fancy indexing relevant[rows, cols] as the reference for which recommended pages are
    # relevant (catalogue far larger than any list; lists unsorted).
    rng = np.random.default_rng(3)
    users, pages, width = 400, 200_000, 20
    relevant = sp.random_array((users, pages), density=2e-4, format="csr", rng=rng)
    recommended = np.empty((users, width), dtype=np.int64)
    for user in range(users):
        row = relevant.indices[relevant.indptr[user] : relevant.indptr[user + 1]]
        mix = np.concatenate([rng.permutation(row)[: width // 2], rng.choice(pages, width, replace=False)])
        recommended[user] = rng.permutation(np.unique(mix))[:width]
    rows = np.repeat(np.arange(users), width)
    expected_hits = (np.asarray(relevant[rows, recommended.ravel()]).reshape(users, width) > 0).sum(axis=1)
    counts = np.diff(relevant.indptr)
    got = precision(recommended, relevant, width) * width
    keep = counts > 0
    np.testing.assert_allclose(got[keep], expected_hits[keep])
    assert np.isnan(got[~keep]).all()


# --------------------------------------------------------------------------------------------- edge cases


def test_user_with_no_relevant_page_is_nan_in_every_relevance_metric():
    # Convention of this module (documented): undefined, NaN; np.nanmean leaves such users out.
    relevant = sp.csr_array(np.array([[0, 1, 0], [0, 0, 0]], dtype=float))
    scores = evaluate_lists(np.array([[1, 0], [0, 2]]), relevant, ks=(1, 2))
    for key, values in scores.items():
        assert values[0] == pytest.approx(1.0 if key != "precision@2" else 0.5), key
        assert np.isnan(values[1]), key
    assert dcg(np.array([[0, 2]]), relevant[[1]], 2)[0] == 0.0


def test_short_lists_and_k_larger_than_the_list_count_empty_slots_as_misses():
    # Precision@k divides by k (Manning et al., ch. 8: precision at k of a ranked list); empty slots
    # (-1 padding) and ranks past the list's end are misses.
    relevant = sp.csr_array((np.ones(3), ([0, 0, 0], [4, 6, 9])), shape=(1, 10))
    short = _pad([[4, 1]], 5)  # one hit, then 4 empty slots
    assert precision(short, relevant, 5)[0] == pytest.approx(1 / 5)
    assert precision(short[:, :2], relevant, 5)[0] == pytest.approx(1 / 5)  # k = 5 > K = 2
    assert recall(short, relevant, 20)[0] == pytest.approx(1 / 3)
    # AP@k normaliser min(k, |R|): with k = 1 the single slot is a hit, so AP@1 = 1
    assert average_precision(short, relevant, 1)[0] == pytest.approx(1.0)
    assert average_precision(short, relevant, 5)[0] == pytest.approx(1 / 3)
    # nDCG ideal uses all three relevant pages: DCG = 1, IDCG@5 = 1 + 1/log2 3 + 1/2
    expected = 1 / (1 + 1 / math.log2(3) + 0.5)
    assert ndcg(short, relevant, 5)[0] == pytest.approx(expected)
    assert ndcg(short[:, :2], relevant, 5)[0] == pytest.approx(expected)
    # an empty slot before a page keeps its rank: the hit at rank 2 gives reciprocal rank 1/2
    assert reciprocal_rank(np.array([[-1, 6]]), relevant)[0] == pytest.approx(0.5)
    assert reciprocal_rank(np.array([[1, 6]]), relevant, k=1)[0] == 0.0


@pytest.mark.parametrize(
    ("recommended", "message", "error"),
    [
        (np.array([[0.0, 1.0]]), "integer", TypeError),
        (np.array([0, 1]), "shape", ValueError),
        (np.array([[0, 0]]), "repeats", ValueError),
        (np.array([[0, -2]]), "-2", ValueError),
        (np.array([[0, 7]]), "page 7", ValueError),
        (np.array([[0, 1], [1, 2]]), "shape", ValueError),
    ],
    ids=["float", "1-D", "repeat", "below-padding", "outside-catalogue", "user-count"],
)
def test_bad_lists_are_refused_eagerly(recommended, message, error):
    # Project input contract: eager checks, messages name the problem and show the value.
    with pytest.raises(error, match=message):
        ndcg(recommended, sp.csr_array(np.ones((1, 5))), 2)


def test_bad_relevance_and_arguments_are_refused():
    lists = np.array([[0, 1]])
    with pytest.raises(TypeError, match="relevant"):
        ndcg(lists, np.ones((1, 5)), 2)
    with pytest.raises(ValueError, match="non-negative"):
        ndcg(lists, sp.csr_array(np.array([[1.0, -1.0]])), 2)
    with pytest.raises(ValueError, match="gains"):
        ndcg(lists, sp.csr_array(np.ones((1, 5))), 2, gains="exponential")
    with pytest.raises(ValueError, match="k"):
        recall(lists, sp.csr_array(np.ones((1, 5))), 0)
    with pytest.raises(ValueError, match="ks"):
        evaluate_lists(lists, sp.csr_array(np.ones((1, 5))), ks=(5, 5))


# ------------------------------------------------------------------------------------ catalogue metrics


def test_catalogue_metrics_on_a_hand_example():
    # Hand computation from the definitions (coverage: share of catalogue recommended to anyone;
    # novelty: mean self-information −log2 p, Zhou et al. 2010 PNAS "Solving the apparent
    # diversity-accuracy dilemma", here with add-one smoothing of the popularity counts).
    recommended = np.array([[0, 1, 2], [2, 3, -1]])
    assert coverage(recommended, 8) == pytest.approx(4 / 8)
    assert coverage(recommended, 8, k=1) == pytest.approx(2 / 8)
    counts = np.array([5, 3, 0, 1, 0, 0, 0, 1])
    p = (counts + 1) / (counts.sum() + counts.size)
    expected = [-np.log2(p[[0, 1, 2]]).mean(), -np.log2(p[[2, 3]]).mean()]
    np.testing.assert_allclose(novelty(recommended, counts), expected)
    spaces = np.array([0, 0, 1, 1, 2, 2, 2, 2])
    np.testing.assert_allclose(intra_list_diversity(recommended, spaces, 3), [2 / 3, 1 / 2])
    np.testing.assert_allclose(intra_list_diversity(recommended, spaces, 1), [1.0, 1.0])
    visited = sp.csr_array((np.ones(3), ([0, 0, 1], [1, 5, 2])), shape=(2, 8))
    np.testing.assert_allclose(unvisited_share(recommended, visited, 3), [2 / 3, 1 / 2])
    assert np.isnan(novelty(np.array([[-1, -1]]), counts)[0])


def test_evaluate_lists_agrees_with_the_single_metric_functions():
    # Internal consistency plus the documented key names.
    rng = np.random.default_rng(8)
    recommended, gains, _ = _random_case(
        rng, users=20, pages=25, width=10, relevant_inside_list=False, graded=True
    )
    relevant = sp.csr_array(gains)
    scores = evaluate_lists(
        recommended,
        relevant,
        ks=(3, 10),
        gains="graded",
        popularity=np.arange(25),
        space_of_page=np.arange(25) % 4,
        visited=relevant,
    )
    for k in (3, 10):
        np.testing.assert_array_equal(scores[f"ndcg@{k}"], ndcg(recommended, relevant, k, gains="graded"))
        np.testing.assert_array_equal(scores[f"map@{k}"], average_precision(recommended, relevant, k))
        np.testing.assert_array_equal(scores[f"recall@{k}"], recall(recommended, relevant, k))
        # visited = relevant: the unvisited share of a full list is 1 − precision@k
        np.testing.assert_allclose(scores[f"unvisited_share@{k}"], 1 - precision(recommended, relevant, k))
    np.testing.assert_array_equal(scores["mrr"], reciprocal_rank(recommended, relevant))
    assert {"novelty@3", "intra_list_diversity@10", "hit_rate@3", "precision@10"} <= set(scores)


# ----------------------------------------------------------------------------------- property tests


@st.composite
def _cases(draw):
    users = draw(st.integers(1, 6))
    pages = draw(st.integers(1, 20))
    width = draw(st.integers(1, 8))
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    lengths = rng.integers(0, min(width, pages) + 1, size=users)
    recommended = _pad([rng.permutation(pages)[:n] for n in lengths], width)
    gains = rng.integers(0, 4, size=(users, pages)) * (rng.random((users, pages)) < 0.3)
    return recommended, sp.csr_array(gains.astype(float)), draw(st.integers(1, 10))


@settings(max_examples=80, deadline=None, derandomize=True)
@given(_cases(), st.sampled_from(["binary", "graded"]))
def test_every_per_user_metric_lies_in_the_unit_interval(case, gains):
    # Definition of each metric: ratios of counts (or of DCG to the ideal DCG) bounded by 0 and 1.
    recommended, relevant, k = case
    nothing = np.diff(relevant.indptr) == 0
    spaces = np.arange(relevant.shape[1]) % 3
    scores = evaluate_lists(
        recommended, relevant, ks=(k,), gains=gains, space_of_page=spaces, visited=relevant
    )
    for key, values in scores.items():
        defined = values[~np.isnan(values)]
        assert np.all((defined >= 0) & (defined <= 1)), key
        if key.split("@")[0] in PER_USER + ("mrr",):
            assert np.array_equal(np.isnan(values), nothing), key


@settings(max_examples=80, deadline=None, derandomize=True)
@given(_cases(), st.sampled_from(["binary", "graded"]))
def test_ndcg_is_one_for_the_ideal_ranking(case, gains):
    # Järvelin & Kekäläinen (2002): nDCG = 1 exactly when the list is an ideal ordering (gain-descending).
    _, relevant, k = case
    dense = relevant.toarray()
    lists = [np.argsort(-row, kind="stable")[: np.count_nonzero(row)] for row in dense]
    recommended = _pad(lists, max(1, max(len(pages) for pages in lists)))
    values = ndcg(recommended, relevant, k, gains=gains)
    has = np.count_nonzero(dense, axis=1) > 0
    np.testing.assert_allclose(values[has], 1.0, rtol=0, atol=1e-12)


@settings(max_examples=60, deadline=None, derandomize=True)
@given(_cases(), st.randoms(use_true_random=False))
def test_metrics_are_invariant_to_permuting_users(case, random):
    # Per-user metrics depend on a user's own list and gains only (their definitions), so reordering users
    # reorders the results and leaves the means unchanged.
    recommended, relevant, k = case
    order = np.array(random.sample(range(recommended.shape[0]), recommended.shape[0]))
    before = evaluate_lists(recommended, relevant, ks=(k,), gains="graded")
    after = evaluate_lists(recommended[order], relevant[order], ks=(k,), gains="graded")
    for key in before:
        np.testing.assert_array_equal(after[key], before[key][order])
        if not np.isnan(before[key]).all():
            assert np.nanmean(after[key]) == pytest.approx(np.nanmean(before[key]))
    assert coverage(recommended[order], relevant.shape[1]) == coverage(recommended, relevant.shape[1])

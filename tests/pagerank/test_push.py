"""Forward push (Andersen, Chung & Lang 2006) against the exact strongly-preferential vector."""

from __future__ import annotations

import numpy as np
import pytest

from rankrec.pagerank import ConvergenceWarning, prepare, push, solve_exact

from ._graphs import random_graph

N = 800


@pytest.fixture(scope="module")
def transition():
    return prepare(random_graph(N, 5000, seed=3, dangling_share=0.15))


def _seed_cases(transition):
    dangling = int(transition.dangling_pages[0])
    linked = int(np.flatnonzero(~transition.dangling)[0])
    return {
        "one-page": linked,
        "dangling-page": dangling,
        "weighted-set": {linked: 3.0, dangling: 1.0, 17: 0.5},
        "index-array": np.array([5, 9, 9, 200]),
    }


CASES = ["one-page", "dangling-page", "weighted-set", "index-array"]


def _exact(transition, seeds):
    restart = np.zeros(transition.n)
    if isinstance(seeds, dict):
        for page, weight in seeds.items():
            restart[page] += weight
    else:
        np.add.at(restart, np.atleast_1d(seeds), 1.0)
    return solve_exact(transition, restart, dangling="restart").vectors


@pytest.mark.parametrize("epsilon", [1e-3, 1e-5, 1e-7])
@pytest.mark.parametrize("case", CASES)
def test_error_within_reported_bound(transition, case, epsilon):
    # ACL 2006 invariant x = p + X r: p ≤ x entrywise and ‖x − p‖₁ = ‖r‖₁ (the reported residual mass)
    seeds = _seed_cases(transition)[case]
    result = push(transition, seeds, epsilon=epsilon)
    exact = _exact(transition, seeds)
    estimate = result.vector.toarray()
    assert result.converged and result.pushes > 0
    assert np.all(estimate <= exact + 1e-15)
    error = np.abs(exact - estimate).sum()
    assert error <= result.residual_mass + 1e-12
    assert error == pytest.approx(result.residual_mass, abs=1e-12)
    # ACL 2006 stopping rule: every residual is below epsilon per out-link, so the bound is ≤ ε·Σ max(deg, 1)
    assert result.residual_mass <= epsilon * np.maximum(transition.out_degree, 1).sum()


@pytest.mark.parametrize("case", CASES)
def test_top20_agrees_where_scores_are_separated(transition, case):
    seeds = _seed_cases(transition)[case]
    result = push(transition, seeds, epsilon=1e-6)
    exact = _exact(transition, seeds)
    bound = result.residual_mass
    top_pages, _ = result.top(20)
    ranked = np.argsort(-exact, kind="stable")
    # a page that beats the exact 21st score by more than the bound must be in push's top 20 ...
    sure = ranked[:20][exact[ranked[:20]] > exact[ranked[20]] + bound]
    assert len(sure) >= 1 and set(sure.tolist()) <= set(top_pages.tolist())
    # ... and any two pages whose exact scores differ by more than the bound keep their order
    estimate = result.vector.toarray()
    candidates = np.union1d(top_pages, ranked[:20])
    for u in candidates:
        for v in candidates:
            if exact[u] > exact[v] + bound:
                assert estimate[u] > estimate[v]


def test_push_limit_warns_and_keeps_the_bound(transition):
    with pytest.warns(ConvergenceWarning, match="max_pushes=5"):
        result = push(transition, 0, epsilon=1e-9, max_pushes=5)
    assert not result.converged and result.pushes == 5
    error = np.abs(_exact(transition, 0) - result.vector.toarray()).sum()
    assert error <= result.residual_mass + 1e-12


@pytest.mark.parametrize("case", CASES)
def test_refined_estimate_stays_below_exact_and_tightens_the_bound(transition, case):
    # x = p + X r with X = (1 − α) Σ (α Pᵀ)ᵗ (Andersen, Chung & Lang 2006): every term is non-negative, so
    # adding the first terms for some pages keeps p ≤ x and lowers ‖x − p‖₁ by exactly what was added.
    seeds = _seed_cases(transition)[case]
    exact = _exact(transition, seeds)
    plain = push(transition, seeds, epsilon=1e-4, refine=0)
    refined = push(transition, seeds, epsilon=1e-4, refine=50)
    low, high = plain.vector.toarray(), refined.vector.toarray()
    assert np.all(low <= high + 1e-15) and np.all(high <= exact + 1e-15)
    assert refined.residual_mass < plain.residual_mass
    for result, estimate in ((plain, low), (refined, high)):
        assert np.abs(exact - estimate).sum() == pytest.approx(result.residual_mass, abs=1e-12)
    # the restart share of every page's own residual is always added: the bound is at most α ‖r‖₁
    assert plain.residual_mass <= 0.85 * 1e-4 * np.maximum(transition.out_degree, 1).sum()
    with pytest.raises(ValueError, match="refine must be at least 0"):
        push(transition, seeds, refine=-1)

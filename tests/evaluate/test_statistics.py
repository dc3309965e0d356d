"""Bootstrap intervals: coverage on known distributions and agreement with scipy.stats.bootstrap."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from rankrec.evaluate import PairedComparison, bootstrap_ci, paired_difference
from rankrec.evaluate import statistics as statistics_module


def test_percentile_interval_covers_the_true_mean_about_95_percent_of_the_time():
    # Efron & Tibshirani, An Introduction to the Bootstrap (1993): the percentile interval of the mean is
    # close to its nominal level for moderate n. 200 seeded repetitions of normal data with known mean;
    # the 0.88-0.99 band is common practice (binomial spread of 200 trials plus slight under-coverage).
    rng = np.random.default_rng(2024)
    true_mean = 0.3
    covered = 0
    for repetition in range(200):
        sample = rng.normal(true_mean, 1.0, size=60)
        low, high = bootstrap_ci(sample, samples=1000, level=0.95, seed=repetition)
        covered += low <= true_mean <= high
    assert 0.88 <= covered / 200 <= 0.99


def test_percentile_interval_agrees_with_scipy_bootstrap():
    # scipy.stats.bootstrap(method="percentile") as the reference. Different random streams, so the ends
    # differ by Monte-Carlo error (≈ 0.04 standard errors each with 5000 resamples); allow 0.25.
    rng = np.random.default_rng(7)
    sample = rng.exponential(0.4, size=200)  # skewed, like per-user metric values
    low, high = bootstrap_ci(sample, samples=5000, level=0.9, seed=1)
    reference = stats.bootstrap(
        (sample,),
        np.mean,
        n_resamples=5000,
        confidence_level=0.9,
        method="percentile",
        rng=np.random.default_rng(2),
    ).confidence_interval
    standard_error = sample.std(ddof=1) / np.sqrt(sample.size)
    assert low == pytest.approx(reference.low, abs=0.25 * standard_error)
    assert high == pytest.approx(reference.high, abs=0.25 * standard_error)
    assert low < sample.mean() < high


def test_paired_interval_agrees_with_scipy_paired_bootstrap():
    # scipy.stats.bootstrap(paired=True) resamples the same users for both arrays, as paired_difference does.
    rng = np.random.default_rng(9)
    a = rng.beta(2, 5, size=300)
    b = np.clip(a + rng.normal(-0.02, 0.05, size=300), 0, 1)
    result = paired_difference(a, b, samples=5000, level=0.95, seed=3)
    reference = stats.bootstrap(
        (a, b),
        lambda x, y, axis=-1: x.mean(axis=axis) - y.mean(axis=axis),
        paired=True,
        n_resamples=5000,
        method="percentile",
        rng=np.random.default_rng(4),
    ).confidence_interval
    standard_error = (a - b).std(ddof=1) / np.sqrt(a.size)
    assert result.low == pytest.approx(reference.low, abs=0.25 * standard_error)
    assert result.high == pytest.approx(reference.high, abs=0.25 * standard_error)
    assert result.mean_difference == pytest.approx(a.mean() - b.mean())


def test_identical_methods_differ_by_exactly_zero():
    # A paired difference of a method with itself is 0 in every resample (definition of the paired bootstrap).
    values = np.random.default_rng(1).random(100)
    result = paired_difference(values, values.copy())
    assert isinstance(result, PairedComparison)
    assert (result.mean_difference, result.low, result.high, result.share_a_better) == (0.0, 0.0, 0.0, 0.0)
    assert result.users == 100


def test_a_shifted_copy_gives_an_interval_that_excludes_zero():
    # b is a's values plus a 0.03 shift and small noise: the paired interval must exclude 0, while an
    # unpaired view (two independent intervals, per-user spread 0.29) overlaps heavily. Efron & Tibshirani
    # (1993) on paired designs: pairing removes the between-user variance.
    rng = np.random.default_rng(12)
    a = rng.random(200)
    b = a + 0.03 + rng.normal(0, 0.01, size=200)
    result = paired_difference(a, b, seed=5)
    assert result.high < 0
    assert result.mean_difference == pytest.approx(-0.03, abs=0.003)
    assert result.share_a_better == 0.0
    low_a, high_a = bootstrap_ci(a, seed=5)
    low_b, high_b = bootstrap_ci(b, seed=6)
    assert low_b < high_a  # the separate intervals overlap
    exact = paired_difference(a, a + 0.25)
    assert exact.low == pytest.approx(-0.25) and exact.high == pytest.approx(-0.25)


def test_nan_users_are_left_out():
    # Convention shared with rankrec.evaluate.metrics: users without relevant pages are NaN and left out.
    values = np.array([0.1, np.nan, 0.5, 0.9, np.nan])
    assert bootstrap_ci(values, seed=3) == bootstrap_ci(values[~np.isnan(values)], seed=3)
    result = paired_difference(values, np.array([0.0, 0.2, np.nan, 0.4, 0.1]))
    assert result.users == 2
    assert result.mean_difference == pytest.approx(((0.1 - 0.0) + (0.9 - 0.4)) / 2)


def test_chunked_draws_equal_one_big_draw(monkeypatch):
    # numpy's Generator.integers consumes its stream element by element, so splitting the index matrix into
    # chunks must not change a single resample.
    values = np.random.default_rng(0).random(50)
    whole = bootstrap_ci(values, samples=300, seed=8)
    monkeypatch.setattr(statistics_module, "_CHUNK_ELEMENTS", 50 * 7)
    assert bootstrap_ci(values, samples=300, seed=8) == whole


def test_bad_arguments_are_refused():
    with pytest.raises(ValueError, match="level"):
        bootstrap_ci([1.0, 2.0], level=1.0)
    with pytest.raises(ValueError, match="samples"):
        bootstrap_ci([1.0, 2.0], samples=0)
    with pytest.raises(ValueError, match="no user"):
        bootstrap_ci([np.nan, np.nan])
    with pytest.raises(ValueError, match="same users"):
        paired_difference([1.0, 2.0], [1.0])
    with pytest.raises(ValueError, match="finite"):
        bootstrap_ci([1.0, np.inf])
    with pytest.raises(ValueError, match="1-D"):
        bootstrap_ci([[1.0, 2.0]])


# ------------------------------------------------------------------------------- users with several values


def test_groups_of_one_are_the_plain_bootstrap_draw_for_draw():
    values = np.random.default_rng(3).random(40)
    plain = bootstrap_ci(values, samples=300, seed=5)
    grouped = bootstrap_ci(values, samples=300, seed=5, groups=np.arange(40) * 7)  # codes in value order
    assert grouped == pytest.approx(plain, abs=1e-12)


def test_a_user_repeated_counts_once():
    # Davison & Hinkley, Bootstrap Methods and their Application (1997), section 3.8: resample clusters whole.
    # A user whose value appears three times is one cluster; the ratio of sums then equals the mean of the
    # per-user values, so the interval is the plain bootstrap of one value per user with the same draws.
    per_user = np.random.default_rng(4).random(30)
    repeated = np.repeat(per_user, 3)
    users = np.repeat(np.arange(30), 3)
    plain = bootstrap_ci(per_user, samples=400, seed=8)
    assert bootstrap_ci(repeated, samples=400, seed=8, groups=users) == pytest.approx(plain, abs=1e-12)
    naive = bootstrap_ci(repeated, samples=400, seed=8)  # treating the copies as independent: too narrow
    assert naive[1] - naive[0] < 0.75 * (plain[1] - plain[0])
    paired = paired_difference(repeated, np.zeros(90), samples=400, seed=8, groups=users)
    assert (paired.low, paired.high) == pytest.approx(plain, abs=1e-12) and paired.users == 90


def test_groups_must_match_the_values():
    with pytest.raises(ValueError, match="groups"):
        bootstrap_ci([0.1, 0.2, 0.3], groups=[0, 1])

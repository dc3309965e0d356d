"""Uncertainty of per-user metric means: percentile bootstrap over users, single and paired.

Users whose value is NaN (for instance users with no held-out relevant page, see
:mod:`rankrec.evaluate.metrics`) are left out before resampling; in a paired comparison a user is left out
when either method has NaN. Resampling draws index matrices in chunks, so memory stays bounded while every
resample is a vectorised gather.

When one user owns several values (the sessions of a session task), ``groups`` names each value's user:
users are resampled whole and each resample's statistic is the mean over all the values of the users drawn
(the cluster bootstrap, Davison & Hinkley 1997, section 3.8), so a user's correlated sessions are not
counted as independent evidence. With one value per user it is the plain bootstrap, draw for draw.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .._validation import check_count, check_fraction

_CHUNK_ELEMENTS = 1 << 22  # indices drawn per chunk (32 MiB of int64)


@dataclass(frozen=True)
class PairedComparison:
    """Paired bootstrap comparison of method ``a`` against method ``b`` on the same users.

    Attributes
    ----------
    mean_difference : float
        ``mean(a) − mean(b)`` over the users kept.
    low, high : float
        Percentile bootstrap interval of the mean difference at ``level``.
    share_a_better : float
        Share of resamples in which the mean of ``a`` exceeds the mean of ``b`` (strictly).
    users : int
        Users kept (both values not NaN).
    level : float
        Confidence level of the interval.
    """

    mean_difference: float
    low: float
    high: float
    share_a_better: float
    users: int
    level: float


def _check_values(name: str, values) -> np.ndarray:
    array = np.asarray(values, dtype=np.float64)
    if array.ndim != 1:
        raise ValueError(f"{name} must be one value per user (1-D); got shape {array.shape!r}")
    if np.isinf(array).any():
        raise ValueError(f"{name} must be finite or NaN; got {array[np.isinf(array)][0]!r}")
    return array


def _check_settings(samples, level, seed) -> tuple[int, float, np.random.Generator]:
    samples = check_count("samples", samples)
    level = check_fraction("level", level, open_low=True, open_high=True)
    if not isinstance(seed, np.random.Generator):
        seed = np.random.default_rng(check_count("seed", seed, minimum=0))
    return samples, level, seed


def _resampled_means(
    values: np.ndarray, samples: int, rng: np.random.Generator, groups: np.ndarray | None = None
) -> np.ndarray:
    """Means of ``samples`` resamples (with replacement, same size) of ``values``, or of whole groups."""
    if groups is None:
        sums, counts = values, None
    else:
        _, compact = np.unique(groups, return_inverse=True)
        sums = np.bincount(compact, weights=values)
        counts = np.bincount(compact).astype(np.float64)
    n = sums.size
    rows = max(1, _CHUNK_ELEMENTS // n)
    means = np.empty(samples)
    for start in range(0, samples, rows):
        stop = min(samples, start + rows)
        drawn = rng.integers(0, n, size=(stop - start, n))
        if counts is None:
            means[start:stop] = sums[drawn].mean(axis=1)
        else:
            means[start:stop] = sums[drawn].sum(axis=1) / counts[drawn].sum(axis=1)
    return means


def _check_groups(groups, size: int) -> np.ndarray | None:
    if groups is None:
        return None
    array = np.asarray(groups)
    if array.shape != (size,):
        raise ValueError(f"groups must give one group per value, shape {(size,)!r}; got {array.shape!r}")
    return array


def _interval(means: np.ndarray, level: float) -> tuple[float, float]:
    tail = (1.0 - level) / 2.0
    low, high = np.quantile(means, [tail, 1.0 - tail])
    return float(low), float(high)


def bootstrap_ci(
    per_user_values, *, samples: int = 1000, level: float = 0.95, seed=0, groups=None
) -> tuple[float, float]:
    """Percentile bootstrap interval of the mean over users.

    Draws ``samples`` resamples of the (non-NaN) users with replacement and returns the ``(1 − level)/2``
    and ``(1 + level)/2`` quantiles (linear interpolation) of their means.

    Parameters
    ----------
    per_user_values : array of shape (users,)
        One metric value per user; NaN users are left out.
    samples : int
        Number of bootstrap resamples.
    level : float
        Confidence level, in (0, 1).
    seed : int or numpy.random.Generator
        Seed of the resampling.
    groups : array of shape (users,), optional
        The user of each value, when a user has several (see the module docstring).

    Returns
    -------
    (low, high) : tuple of float

    >>> low, high = bootstrap_ci([0.2, 0.4, 0.6, 0.8, float("nan")], samples=200)
    >>> bool(0.2 <= low < 0.5 < high <= 0.8)
    True
    """
    values = _check_values("per_user_values", per_user_values)
    groups = _check_groups(groups, values.size)
    samples, level, rng = _check_settings(samples, level, seed)
    kept = ~np.isnan(values)
    if not kept.any():
        raise ValueError("per_user_values has no user with a value (all NaN or empty)")
    chosen = None if groups is None else groups[kept]
    return _interval(_resampled_means(values[kept], samples, rng, chosen), level)


def paired_difference(
    a, b, *, samples: int = 1000, level: float = 0.95, seed=0, groups=None
) -> PairedComparison:
    """Paired bootstrap of ``mean(a) − mean(b)``: each resample draws the same users for both methods.

    ``a[i]`` and ``b[i]`` must be the same user's values under the two methods. Resampling the per-user
    differences is the same as resampling users and differencing the two means. ``groups``: as in
    :func:`bootstrap_ci` (``users`` then counts the values kept, not the groups).

    >>> result = paired_difference([0.5, 0.7, 0.9, 0.6], [0.1, 0.3, 0.4, 0.2], samples=200)
    >>> round(result.mean_difference, 3), result.low > 0, result.users
    (0.425, True, 4)
    """
    first, second = _check_values("a", a), _check_values("b", b)
    if first.shape != second.shape:
        raise ValueError(f"a and b must hold the same users; got shapes {first.shape!r} and {second.shape!r}")
    groups = _check_groups(groups, first.size)
    samples, level, rng = _check_settings(samples, level, seed)
    differences = first - second
    kept = ~np.isnan(differences)
    differences = differences[kept]
    if differences.size == 0:
        raise ValueError("a and b have no user with a value in both (all NaN or empty)")
    means = _resampled_means(differences, samples, rng, None if groups is None else groups[kept])
    low, high = _interval(means, level)
    return PairedComparison(
        mean_difference=float(differences.mean()),
        low=low,
        high=high,
        share_a_better=float((means > 0).mean()),
        users=int(differences.size),
        level=level,
    )

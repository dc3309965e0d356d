"""Checks of argument values, in one place. ValueError for bad values, TypeError for wrong types.

Every message names the parameter and shows the value with ``!r``.
"""

from __future__ import annotations

import math
from numbers import Real


def check_real(name: str, value) -> float:
    if isinstance(value, bool) or not isinstance(value, Real):
        raise TypeError(f"{name} must be a number, not {type(value).__name__} {value!r}")
    value = float(value)
    if not math.isfinite(value):
        raise ValueError(f"{name} must be finite; got {value!r}")
    return value


def check_fraction(name: str, value, *, open_low: bool = False, open_high: bool = False) -> float:
    """A number in [0, 1] (ends excluded on request).

    >>> check_fraction("damping", 0.85)
    0.85
    """
    value = check_real(name, value)
    low_ok = value > 0 if open_low else value >= 0
    high_ok = value < 1 if open_high else value <= 1
    if not (low_ok and high_ok):
        low, high = "(" if open_low else "[", ")" if open_high else "]"
        raise ValueError(f"{name} must lie in {low}0, 1{high}; got {value!r}")
    return value


def check_positive(name: str, value) -> float:
    value = check_real(name, value)
    if value <= 0:
        raise ValueError(f"{name} must be positive; got {value!r}")
    return value


def check_count(name: str, value, *, minimum: int = 1) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise TypeError(f"{name} must be an integer, not {type(value).__name__} {value!r}")
    if value < minimum:
        raise ValueError(f"{name} must be at least {minimum}; got {value!r}")
    return value


def check_choice(name: str, value, choices) -> str:
    if value not in choices:
        raise ValueError(f"{name} must be one of {', '.join(map(repr, choices))}; got {value!r}")
    return value

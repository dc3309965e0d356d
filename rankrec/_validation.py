"""Checks of argument values, in one place. ValueError for bad values, TypeError for wrong types.

Every message names the parameter and shows the value with ``!r``.
"""

from __future__ import annotations

import math
import re
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


ID_MAX_CHARS = 256
"""Longest page, user, team or group id accepted anywhere (HTTP, views, importers), in characters."""

QUOTED_CHARS = 32
"""How much of a refused value a message quotes (a prefix, so a huge value is not echoed)."""

# every character of the Unicode categories Cc (controls), Zl and Zp (line and paragraph separators)
# and Cs (surrogates, which UTF-8 cannot encode)
_REFUSED = re.compile("[\x00-\x1f\x7f-\x9f\u2028\u2029\ud800-\udfff]")


def quoted(value: str) -> str:
    """``value`` for a message: ``repr`` of at most ``QUOTED_CHARS`` characters, marked when cut.

    >>> quoted("x" * 300)
    "'xxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxx'... (300 characters)"
    """
    if len(value) <= QUOTED_CHARS:
        return repr(value)
    return f"{value[:QUOTED_CHARS]!r}... ({len(value)} characters)"


def refused_character(text: str) -> bool:
    """True if ``text`` holds a character no id may hold (see :func:`id_problem`)."""
    return _REFUSED.search(text) is not None


def id_problem(value: str) -> str | None:
    """Why ``value`` (a string) cannot be an id, or None when it can: empty or blank, longer than
    ``ID_MAX_CHARS``, or holding a control character, a surrogate or a line or paragraph separator.

    >>> id_problem("ops/patching-quarterly-checklist") is None, id_problem("a\\nb")
    (True, 'holds a control character or line separator at position 1')
    """
    if not value.strip():
        return "is empty"
    if len(value) > ID_MAX_CHARS:
        return f"is longer than {ID_MAX_CHARS} characters"
    found = _REFUSED.search(value)
    if found is not None:
        return f"holds a control character or line separator at position {found.start()}"
    return None


def check_id(name: str, value) -> str:
    """A page, user, team or group id, as every entry point accepts it (the one bound of the project):
    a string of 1 to ``ID_MAX_CHARS`` characters, not blank, without control characters, surrogates
    or line separators (so whatever is stored can be named again, e.g. to erase it). ValueError
    quoting at most a short prefix of a bad value (:func:`quoted`); TypeError for a non-string.

    >>> check_id("user id", "u00042")
    'u00042'
    >>> check_id("user id", "u" * 300_000)  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    ValueError: user id is longer than 256 characters; got 'uuuuuuuu...'... (300000 characters)
    """
    if not isinstance(value, str):
        raise TypeError(f"{name} must be a string, not {type(value).__name__}")
    problem = id_problem(value)
    if problem is not None:
        raise ValueError(f"{name} {problem}; got {quoted(value)}")
    return value

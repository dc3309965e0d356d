"""Train/test splits of a view log that cannot leak the test period into what a model learns from.

Every split returns a :class:`Split`: the training views, the queries a model answers, the held-out pages
each query should find (``relevant``) and the settings. A model reads ``split.train`` and
``split.queries`` only; ``split.held_out`` and ``split.relevant`` are for scoring and auditing.
The types, the session rule and the shared checks live in :mod:`rankrec.evaluate.tasks`; every name is
importable from here too.

Leakage rules
-------------
- :func:`temporal_split` and :func:`session_split`: one global instant ``train_until``. Training holds every
  view strictly before it, and nothing else; every held-out view and every query lies at or after it.
- :func:`last_n_split` holds out each test user's last ``n`` views. With ``global_cap=True`` (default)
  training is capped at the earliest held-out view of any test user, so no model sees any reader's
  activity from after any query (popularity counts included); a test user's views between the cap and
  their own held-out views are used by nobody (counted in ``counts["unused_views"]``). With
  ``global_cap=False`` it is the classic leave-last-n-out: every view that is not held out trains, so a
  user's own future never reaches the model but *other* users' later views do (through popularity and
  co-visitation); use it only to compare with numbers published that way.
- ``new_only=True`` (user tasks): a held-out page the user already viewed in training is not relevant,
  and every method must leave the user's training pages out of its list (:func:`excluded_pages`).
  ``new_only=False`` keeps re-reads relevant and excludes nothing. Session tasks always exclude, and never
  count as relevant, the session's own prefix pages.
- Queries without training views (user tasks) or without any relevant page are dropped and counted.

:func:`assert_no_leakage` checks these rules on any split.
"""

from __future__ import annotations

from types import MappingProxyType

import numpy as np
import scipy.sparse as sp

from .._validation import check_choice, check_count, check_fraction, check_positive, check_real
from .tasks import (
    SESSION_GAP_SECONDS,
    Queries,
    Split,
    Views,
    _checked,
    _frozen,
    _group_starts,
    _views,
    assert_no_leakage,
    excluded_pages,
    session_numbers,
    training_pages,
)

__all__ = [
    "GAIN_KINDS",
    "SESSION_GAP_SECONDS",
    "Queries",
    "Split",
    "Views",
    "assert_no_leakage",
    "excluded_pages",
    "last_n_split",
    "session_numbers",
    "session_split",
    "temporal_split",
    "training_pages",
]

GAIN_KINDS = ("binary", "graded")


# ------------------------------------------------------------------------------------------- helpers


def _default_cutoff(times: np.ndarray, test_share: float, cutoff) -> float:
    if cutoff is not None:
        return check_real("cutoff", cutoff)
    test_share = check_fraction("test_share", test_share, open_low=True, open_high=True)
    if times.size == 0:
        return 0.0
    low, high = float(times.min()), float(times.max())
    return low + (1.0 - test_share) * (high - low)


def _relevance(rows, pages, size: int, queries: int, gains: str) -> sp.csr_array:
    matrix = sp.csr_array((np.ones(rows.size), (rows, pages)), shape=(queries, size), dtype=np.float64)
    matrix.sum_duplicates()
    matrix.sort_indices()
    if gains == "binary":
        matrix.data[:] = 1.0
    for array in (matrix.data, matrix.indices, matrix.indptr):
        array.flags.writeable = False
    return matrix


def _member(keys: np.ndarray, sorted_keys: np.ndarray) -> np.ndarray:
    """``np.isin(keys, sorted_keys)`` for already sorted ``sorted_keys``."""
    if sorted_keys.size == 0:
        return np.zeros(keys.size, dtype=bool)
    position = np.minimum(np.searchsorted(sorted_keys, keys), sorted_keys.size - 1)
    return sorted_keys[position] == keys


def _user_task(
    name,
    users,
    pages,
    times,
    size,
    train,
    test,
    *,
    cutoff,
    train_until,
    query_time,
    new_only,
    gains,
    min_train_views,
    settings,
    unused,
) -> Split:
    """Shared tail of the user tasks: ``train``/``test`` are masks over the sorted views."""
    codes, compact = np.unique(users, return_inverse=True)
    train_count = np.bincount(compact[train], minlength=codes.size)
    test_users = np.unique(compact[test])
    has_history = train_count[test_users] >= min_train_views
    keep_view = test & np.isin(compact, test_users[has_history])
    if new_only:
        seen = np.unique(compact[train] * size + pages[train])
        keep_view &= ~_member(compact * size + pages, seen)
    candidates = test_users[has_history]
    chosen = np.unique(compact[keep_view])
    rows = np.searchsorted(chosen, compact[keep_view])
    held = np.flatnonzero(keep_view)
    query_users = codes[chosen]
    query_times = np.full(chosen.size, cutoff) if query_time is None else query_time[chosen]
    counts = {
        "train_views": int(train.sum()),
        "held_out_views": int(held.size),
        "unused_views": int(unused),
        "queries": int(chosen.size),
        "dropped_without_history": int((~has_history).sum()),
        "dropped_without_relevant": int(candidates.size - chosen.size),
    }
    return Split(
        name=name,
        train=_views(users[train], pages[train], times[train], size),
        cutoff=cutoff,
        train_until=train_until,
        queries=Queries(
            _frozen(query_users), _frozen(query_times), _frozen(np.zeros((chosen.size, 0), np.int64))
        ),
        relevant=_relevance(rows, pages[held], size, chosen.size, gains),
        held_out=_views(users[held], pages[held], times[held], size),
        settings=MappingProxyType(settings),
        counts=MappingProxyType(counts),
    )


# ----------------------------------------------------------------------------------------- the splits


def temporal_split(
    users,
    pages,
    times,
    size: int,
    *,
    test_share: float = 0.2,
    cutoff: float | None = None,
    min_train_views: int = 1,
    new_only: bool = True,
    gains: str = "binary",
) -> Split:
    """Global temporal cutoff: train on every view before it, predict each user's pages after it.

    Parameters
    ----------
    users, pages, times : 1-D arrays
        User codes (>= 0), dense page numbers in ``[0, size)`` and Unix seconds, one entry per view, in
        any order.
    size : int
        Pages in the catalogue.
    test_share : float
        Without ``cutoff``: the last ``test_share`` of the time span ``[min(times), max(times)]`` is test.
    cutoff : float, optional
        The instant itself (views strictly before it train, views at or after it are test).
    min_train_views : int
        Users with fewer training views are dropped (counted in ``counts["dropped_without_history"]``).
    new_only : bool
        Relevant pages are test-period pages the user had *not* viewed before the cutoff (default; the common
        practice of next-item evaluation). False keeps re-reads.
    gains : {"binary", "graded"}
        Gain 1, or the number of the user's test-period views of the page.

    Examples
    --------
    >>> s = temporal_split([0, 0, 0, 1], [0, 1, 2, 2], [0.0, 1, 9, 10], 3, cutoff=5.0)
    >>> s.queries.users.tolist(), s.relevant.toarray().tolist(), s.counts["dropped_without_history"]
    ([0], [[0.0, 0.0, 1.0]], 1)
    """
    check_choice("gains", gains, GAIN_KINDS)
    min_train_views = check_count("min_train_views", min_train_views)
    users, pages, times, size = _checked(users, pages, times, size)
    cutoff = _default_cutoff(times, test_share, cutoff)
    train = times < cutoff
    settings = {
        "test_share": test_share,
        "cutoff": cutoff,
        "min_train_views": min_train_views,
        "new_only": bool(new_only),
        "gains": gains,
    }
    return _user_task(
        "temporal",
        users,
        pages,
        times,
        size,
        train,
        ~train,
        cutoff=cutoff,
        train_until=cutoff,
        query_time=None,
        new_only=bool(new_only),
        gains=gains,
        min_train_views=min_train_views,
        settings=settings,
        unused=0,
    )


def last_n_split(
    users,
    pages,
    times,
    size: int,
    *,
    n: int = 1,
    test_share: float | None = 0.2,
    global_cap: bool = True,
    min_train_views: int = 1,
    new_only: bool = True,
    gains: str = "binary",
) -> Split:
    """Hold out each test user's last ``n`` views.

    Test users are those with more than ``n`` views whose held-out views all fall in the last ``test_share``
    of the time span (every user with more than ``n`` views when ``test_share`` is None).

    ``global_cap=True``: training is every view (of anyone) strictly before the earliest held-out view of
    any test user; that instant is ``cutoff``. ``global_cap=False``: training is every view not held out
    (others' later views leak through popularity; see the module docstring); ``cutoff`` is None and each
    query's time is the user's first held-out view.
    Other arguments as in :func:`temporal_split`.

    Examples
    --------
    >>> s = last_n_split([0, 0, 0, 1, 1], [0, 1, 2, 0, 1], [0.0, 1, 9, 2, 10], 3, test_share=0.5)
    >>> s.cutoff, s.queries.users.tolist(), s.relevant.toarray().tolist()
    (9.0, [0, 1], [[0.0, 0.0, 1.0], [0.0, 1.0, 0.0]])
    """
    check_choice("gains", gains, GAIN_KINDS)
    n = check_count("n", n)
    min_train_views = check_count("min_train_views", min_train_views)
    users, pages, times, size = _checked(users, pages, times, size)
    group = np.cumsum(_group_starts(users)) - 1
    group_start = np.flatnonzero(_group_starts(users))
    group_end = np.append(group_start[1:], users.size)  # one past each user's last view
    first, last = group_start[group], group_end[group]
    held = (last - 1 - np.arange(users.size) < n) & (last - first > n)
    hold_start = np.full(users.size, np.inf)
    hold_start[held] = times[last[held] - n]
    if test_share is not None and users.size:
        threshold = _default_cutoff(times, test_share, None)
        held &= hold_start >= threshold
        hold_start = np.where(held, hold_start, np.inf)
    if global_cap:
        cutoff = float(hold_start.min()) if held.any() else (float(times.max()) + 1.0 if times.size else 0.0)
        train = times < cutoff
        train_until, query_time = cutoff, None
    else:
        train = ~held
        cutoff, train_until = None, np.inf
        codes, compact = np.unique(users, return_inverse=True)
        query_time = np.full(codes.size, np.inf)
        np.minimum.at(query_time, compact[held], times[held])
    unused = int((~train & ~held).sum())
    settings = {
        "n": n,
        "test_share": test_share,
        "global_cap": bool(global_cap),
        "min_train_views": min_train_views,
        "new_only": bool(new_only),
        "gains": gains,
    }
    return _user_task(
        "last-n",
        users,
        pages,
        times,
        size,
        train,
        held,
        cutoff=cutoff,
        train_until=train_until,
        query_time=query_time,
        new_only=bool(new_only),
        gains=gains,
        min_train_views=min_train_views,
        settings=settings,
        unused=unused,
    )


def session_split(
    users,
    pages,
    times,
    size: int,
    *,
    gap: float = SESSION_GAP_SECONDS,
    test_share: float = 0.2,
    cutoff: float | None = None,
    prefix: int = 1,
    gains: str = "binary",
) -> Split:
    """Next pages of a session: given its first ``prefix`` views, predict the distinct pages it goes on to.

    Sessions come from :func:`session_numbers` with ``gap``. Test sessions start at or after the global
    cutoff (default: the last ``test_share`` of the time span); training is every view strictly before it.
    Relevant pages are the pages viewed after the prefix, minus the prefix pages (graded: their number of
    views there). Sessions with at most ``prefix`` views, or with nothing new after the prefix, are dropped
    and counted. ``split.cutoff`` is None (each query's "now" is its session start); ``train_until`` is the
    global cutoff.

    Examples
    --------
    >>> s = session_split([0, 0, 0, 0], [0, 1, 2, 1], [0.0, 10, 5000, 5010], 3, cutoff=100.0)
    >>> s.queries.pages.tolist(), s.relevant.toarray().tolist(), s.train.pages.tolist()
    ([[2]], [[0.0, 1.0, 0.0]], [0, 1])
    """
    check_choice("gains", gains, GAIN_KINDS)
    prefix = check_count("prefix", prefix)
    gap = check_positive("gap", gap)
    users, pages, times, size = _checked(users, pages, times, size)
    cutoff = _default_cutoff(times, test_share, cutoff)
    session = session_numbers(users, times, gap)
    starts = np.flatnonzero(_group_starts(session))
    lengths = np.diff(np.append(starts, session.size))
    position = np.arange(session.size) - starts[session] if session.size else session
    in_test = times[starts][session] >= cutoff if session.size else np.zeros(0, dtype=bool)
    long_enough = lengths > prefix
    head = in_test & (position < prefix) & long_enough[session]
    tail = in_test & (position >= prefix) & long_enough[session]
    tail &= ~_member(session * size + pages, np.unique(session[head] * size + pages[head]))
    chosen = np.unique(session[tail])
    test_sessions = np.unique(session[in_test])
    rows = np.searchsorted(chosen, session[tail])
    prefix_pages = np.full((chosen.size, prefix), -1, dtype=np.int64)
    ask = head & np.isin(session, chosen)
    prefix_pages[np.searchsorted(chosen, session[ask]), position[ask]] = pages[ask]
    train = times < cutoff
    held = np.flatnonzero(tail)
    counts = {
        "train_views": int(train.sum()),
        "held_out_views": int(held.size),
        "unused_views": int((~train & ~in_test).sum()),
        "queries": int(chosen.size),
        "dropped_too_short": int((~long_enough[test_sessions]).sum()),
        "dropped_without_relevant": int(long_enough[test_sessions].sum() - chosen.size),
    }
    settings = {"gap": gap, "test_share": test_share, "cutoff": cutoff, "prefix": prefix, "gains": gains}
    return Split(
        name="sessions",
        train=_views(users[train], pages[train], times[train], size),
        cutoff=None,
        train_until=cutoff,
        queries=Queries(
            _frozen(users[starts[chosen]]), _frozen(times[starts[chosen]]), _frozen(prefix_pages)
        ),
        relevant=_relevance(rows, pages[held], size, chosen.size, gains),
        held_out=_views(users[held], pages[held], times[held], size),
        settings=MappingProxyType(settings),
        counts=MappingProxyType(counts),
    )

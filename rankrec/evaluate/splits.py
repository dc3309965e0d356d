"""Train/test splits of a view log that cannot leak the test period into what a model learns from.

Every split returns a :class:`Split`: the training views, the queries a model answers, the held-out pages
each query should find (``relevant``) and the settings. A model reads ``split.train`` and
``split.queries`` only; ``split.held_out`` and ``split.relevant`` are for scoring and auditing.

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

from dataclasses import dataclass
from types import MappingProxyType

import numpy as np
import scipy.sparse as sp

from .._validation import check_choice, check_count, check_fraction, check_positive, check_real

GAIN_KINDS = ("binary", "graded")
SESSION_GAP_SECONDS = 1800.0  # 30 minutes of inactivity ends a session (common practice in web analytics)


@dataclass(frozen=True, eq=False)
class Views:
    """Views ordered by user, then time (then input order): user codes, dense page numbers, Unix seconds."""

    users: np.ndarray
    pages: np.ndarray
    times: np.ndarray
    size: int

    def __len__(self) -> int:
        return int(self.users.size)


@dataclass(frozen=True, eq=False)
class Queries:
    """What a model is asked, one row per query.

    ``users`` are user codes; ``times`` each query's "now" (the split's cutoff for user tasks, the session
    start for session tasks); ``pages`` the session prefix, shape (queries, prefix), ``-1`` padded, in
    viewing order (shape (queries, 0) for user tasks).
    """

    users: np.ndarray
    times: np.ndarray
    pages: np.ndarray

    def __len__(self) -> int:
        return int(self.users.size)


@dataclass(frozen=True, eq=False)
class Split:
    """One evaluation task. See the module docstring for the leakage rules.

    Attributes
    ----------
    name : {"temporal", "last-n", "sessions"}
    train : Views
        Everything a model may learn from.
    cutoff : float or None
        The instant every model treats as "now"; None when it is per query (``queries.times``).
    train_until : float
        Every training view is strictly earlier (the classic ``last_n_split(global_cap=False)`` has no
        global bound: ``inf``).
    queries : Queries
    relevant : scipy.sparse.csr_array, shape (queries, pages)
        Gain of each held-out page: 1 (binary) or the number of held-out views (graded).
    held_out : Views
        The held-out views that ``relevant`` counts (for scoring and auditing, never for a model).
    settings : mapping
        The arguments that made the split (``new_only``, ``gap``, ``prefix``, ...), resolved.
    counts : mapping
        ``train_views``, ``held_out_views``, ``unused_views``, ``queries`` and ``dropped_*`` counts.
    """

    name: str
    train: Views
    cutoff: float | None
    train_until: float
    queries: Queries
    relevant: sp.csr_array
    held_out: Views
    settings: MappingProxyType
    counts: MappingProxyType

    @property
    def size(self) -> int:
        return self.train.size

    @property
    def task(self) -> str:
        """``"sessions"`` (queries carry prefix pages) or ``"users"``."""
        return "sessions" if self.name == "sessions" else "users"

    @property
    def new_only(self) -> bool:
        return bool(self.settings.get("new_only", False))


# ------------------------------------------------------------------------------------------- helpers


def _frozen(array: np.ndarray) -> np.ndarray:
    array = np.ascontiguousarray(array)
    array.flags.writeable = False
    return array


def _views(users, pages, times, size) -> Views:
    return Views(_frozen(users), _frozen(pages), _frozen(times), size)


def _checked(users, pages, times, size) -> tuple[np.ndarray, np.ndarray, np.ndarray, int]:
    """Validated copies, sorted by user, then time, then input order."""
    size = check_count("size", size)
    arrays = {}
    for name, value, kinds in (("users", users, "iu"), ("pages", pages, "iu"), ("times", times, "iuf")):
        array = np.asarray(value)
        if array.ndim != 1:
            raise ValueError(f"{name} must be one-dimensional; got shape {array.shape!r}")
        if array.size and array.dtype.kind not in kinds:
            wanted = "integers" if kinds == "iu" else "numbers"
            raise TypeError(f"{name} must hold {wanted}, not {array.dtype.name} (e.g. {array[0]!r})")
        arrays[name] = array
    lengths = {name: array.size for name, array in arrays.items()}
    if len(set(lengths.values())) > 1:
        raise ValueError(f"users, pages and times must have one length; got {lengths!r}")
    users = arrays["users"].astype(np.int64)
    pages = arrays["pages"].astype(np.int64)
    times = arrays["times"].astype(np.float64)
    if users.size and users.min() < 0:
        raise ValueError(f"users must be codes >= 0; got {int(users.min())!r}")
    if pages.size and (pages.min() < 0 or pages.max() >= size):
        bad = pages[(pages < 0) | (pages >= size)][0]
        raise ValueError(f"pages must lie in [0, size={size}); got {int(bad)!r}")
    if times.size and not np.all(np.isfinite(times)):
        raise ValueError(f"times must be finite; got {times[~np.isfinite(times)][0]!r}")
    order = np.lexsort((np.arange(users.size), times, users))
    return users[order], pages[order], times[order], size


def _default_cutoff(times: np.ndarray, test_share: float, cutoff) -> float:
    if cutoff is not None:
        return check_real("cutoff", cutoff)
    test_share = check_fraction("test_share", test_share, open_low=True, open_high=True)
    if times.size == 0:
        return 0.0
    low, high = float(times.min()), float(times.max())
    return low + (1.0 - test_share) * (high - low)


def _group_starts(codes: np.ndarray) -> np.ndarray:
    """True where a run of equal codes begins (codes sorted or grouped)."""
    starts = np.ones(codes.size, dtype=bool)
    starts[1:] = codes[1:] != codes[:-1]
    return starts


def session_numbers(users: np.ndarray, times: np.ndarray, gap: float = SESSION_GAP_SECONDS) -> np.ndarray:
    """Session number of every view, for views ordered by user, then time.

    A session ends when the reader changes or more than ``gap`` seconds pass between two consecutive
    views (a pause of exactly ``gap`` stays inside, as in :func:`rankrec.graph.navigation_counts`).

    >>> session_numbers(np.array([1, 1, 1, 2]), np.array([0.0, 1800, 3601, 3601])).tolist()
    [0, 0, 1, 2]
    """
    gap = check_positive("gap", gap)
    users, times = np.asarray(users), np.asarray(times, dtype=np.float64)
    new = _group_starts(users)
    new[1:] |= (times[1:] - times[:-1]) > gap
    return np.cumsum(new) - 1


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


# ------------------------------------------------------------------------------ exclusions and checks


def training_pages(split: Split) -> sp.csr_array:
    """Queries × pages, 1 where the query's user viewed the page in training (any task)."""
    order = np.argsort(split.queries.users, kind="stable")
    sorted_users = split.queries.users[order]
    train = split.train
    position = np.minimum(np.searchsorted(sorted_users, train.users), max(sorted_users.size - 1, 0))
    known = (sorted_users[position] == train.users) if sorted_users.size else np.zeros(len(train), bool)
    # a user may ask several queries (sessions): repeat their training pages for each of those rows
    first = np.searchsorted(sorted_users, train.users[known])
    last = np.searchsorted(sorted_users, train.users[known], side="right")
    repeats = last - first
    offsets = np.arange(repeats.sum()) - np.repeat(np.cumsum(repeats) - repeats, repeats)
    rows = order[np.repeat(first, repeats) + offsets]
    matrix = sp.csr_array(
        (np.ones(rows.size), (rows, np.repeat(train.pages[known], repeats))),
        shape=(len(split.queries), split.size),
    )
    matrix.sum_duplicates()
    matrix.data[:] = 1.0
    return matrix


def excluded_pages(split: Split) -> sp.csr_array:
    """Queries × pages, 1 for each page no method may list for that query.

    Session tasks: the query's prefix pages. User tasks with ``new_only``: the pages the user viewed in
    training. User tasks without it: nothing.
    """
    queries = len(split.queries)
    if split.task == "sessions":
        prefix = split.queries.pages
        rows = np.repeat(np.arange(queries), prefix.shape[1])
        flat = prefix.ravel()
        matrix = sp.csr_array(
            (np.ones(int((flat >= 0).sum())), (rows[flat >= 0], flat[flat >= 0])), shape=(queries, split.size)
        )
        matrix.sum_duplicates()
        matrix.data[:] = 1.0
    elif split.new_only:
        matrix = training_pages(split)
    else:
        matrix = sp.csr_array((queries, split.size), dtype=np.float64)
    matrix.sort_indices()
    return matrix


def assert_no_leakage(split: Split) -> None:
    """Raise ValueError when the split breaks its leakage rules (see the module docstring).

    Checks that training views precede ``train_until`` (per user, that they precede the user's held-out
    views), that queries and held-out views do not precede it, that ``relevant`` counts exactly the
    held-out views, and that no relevant page is an excluded one.
    """
    train, held = split.train, split.held_out
    if len(train) and not train.times.max() < split.train_until:
        raise ValueError(
            f"split {split.name!r} leaks: a training view at {train.times.max()!r} is not "
            f"before train_until={split.train_until!r}"
        )
    for label, values in (("held-out view", held.times), ("query", split.queries.times)):
        if values.size and np.isfinite(split.train_until) and values.min() < split.train_until:
            raise ValueError(
                f"split {split.name!r} leaks: a {label} at {values.min()!r} precedes "
                f"train_until={split.train_until!r}"
            )
    if len(train) and len(held):
        codes, compact = np.unique(np.concatenate([train.users, held.users]), return_inverse=True)
        latest = np.full(codes.size, -np.inf)
        np.maximum.at(latest, compact[: len(train)], train.times)
        earliest = np.full(codes.size, np.inf)
        np.minimum.at(earliest, compact[len(train) :], held.times)
        if (latest > earliest).any():
            user = int(codes[np.argmax(latest > earliest)])
            raise ValueError(
                f"split {split.name!r} leaks: user {user!r} trains on a view after a held-out one"
            )
    relevant = split.relevant
    if relevant.shape != (len(split.queries), split.size):
        raise ValueError(
            f"split {split.name!r}: relevant has shape {relevant.shape!r}, expected "
            f"{(len(split.queries), split.size)!r}"
        )
    if int(np.asarray(relevant.sum()).round()) > len(held) or (len(held) and relevant.nnz == 0):
        raise ValueError(f"split {split.name!r}: relevant does not match the {len(held)!r} held-out views")
    overlap = relevant.multiply(excluded_pages(split))
    if overlap.nnz and overlap.sum() > 0:
        raise ValueError(f"split {split.name!r}: {overlap.nnz!r} relevant pages are excluded pages")

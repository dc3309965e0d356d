"""Restart distributions from reading history: per-user profiles and team averages.

A user's profile is a distribution over the wiki's pages, built from the views the user made
up to a cutoff time ``now``:

1. every view at or before ``now`` (and, with ``window_days``, no older than the window) gets
   the weight ``0.5 ** (age / half_life)``, where ``age = now - timestamp``; views after
   ``now`` are ignored, so a profile built for a cutoff never sees what happened later;
2. optionally the weight is multiplied by a dwell factor (see :func:`profile_matrix`);
3. repeat views of one page by one user are damped (``log``, ``cap`` or ``none``);
4. each user's row is divided by its sum.

A team's restart distribution is the mean of its members' rows, each member counted once,
and is refused (:class:`rankrec.errors.GroupTooSmall`) when too few members have read anything.
Timestamps are Unix seconds, as the store keeps them.
"""

from __future__ import annotations

import difflib
from collections.abc import Iterable
from dataclasses import dataclass
from functools import cached_property

import numpy as np
import scipy.sparse as sp

from ._validation import check_choice, check_count, check_positive, check_real
from .configuration import REPEAT_MODES, Configuration
from .errors import GroupTooSmall, UnknownTeam, UnknownUser
from .graph import WikiGraph, dense_numbers, row_normalised
from .store import Store

SECONDS_PER_DAY = 86_400.0
DWELL_CAP_SECONDS = 600.0  # dwell beyond 10 minutes is mostly an idle tab (common practice)
DWELL_UNIT_SECONDS = 60.0  # a one-minute read weighs as much as a view without dwell


# -- validation -------------------------------------------------------------------------------------
def _vector(name: str, value, *, integer: bool) -> np.ndarray:
    array = np.asarray(value)
    if array.ndim != 1:
        raise ValueError(f"{name} must be one-dimensional; got shape {array.shape!r}")
    if array.size == 0:
        return array.astype(np.int64 if integer else np.float64)
    if integer and array.dtype.kind not in "iu":
        raise TypeError(f"{name} must hold integers, not {array.dtype.name} (e.g. {array[0]!r})")
    if not integer:
        if array.dtype.kind not in "iuf":
            raise TypeError(f"{name} must hold numbers, not {array.dtype.name} (e.g. {array[0]!r})")
        array = array.astype(np.float64, copy=False)
    return array.astype(np.int64, copy=False) if integer else array


def _same_length(arrays: dict[str, np.ndarray]) -> None:
    lengths = {name: array.size for name, array in arrays.items()}
    if len(set(lengths.values())) > 1:
        raise ValueError(f"users, pages, times (and dwell) must have one length; got {lengths!r}")


# -- profiles ---------------------------------------------------------------------------------------
def _latest_views(users: np.ndarray, pages: np.ndarray, times: np.ndarray, cap: int) -> np.ndarray:
    """Mask keeping, per (user, page), the ``cap`` most recent views."""
    order = np.lexsort((-times, pages, users))
    sorted_users, sorted_pages = users[order], pages[order]
    position = np.arange(order.size)
    starts = np.ones(order.size, dtype=bool)
    starts[1:] = (sorted_users[1:] != sorted_users[:-1]) | (sorted_pages[1:] != sorted_pages[:-1])
    group_start = np.maximum.accumulate(np.where(starts, position, 0))
    keep = np.zeros(order.size, dtype=bool)
    keep[order] = position - group_start < cap
    return keep


def profile_matrix(
    users,
    pages,
    times,
    size: int,
    *,
    now: float,
    half_life_days: float = Configuration.half_life_days,
    repeat: str = Configuration.repeat,
    cap: int = 3,
    dwell=None,
    dwell_weighting: bool = False,
    window_days: float | None = None,
    user_count: int | None = None,
) -> sp.csr_matrix:
    """Every user's restart distribution over ``size`` pages, as one sparse matrix.

    Parameters
    ----------
    users, pages, times : array_like, one entry per view
        Dense user numbers (``>= 0``), dense page numbers (``-1`` = a page outside the graph:
        skipped) and Unix timestamps in seconds. Any order.
    size : int
        Number of pages (columns).
    now : float
        Cutoff. A view with ``timestamp <= now`` counts with age ``now - timestamp``; a view
        after ``now`` is ignored.
    half_life_days : float
        A view this many days old weighs half a view at ``now``: weight ``0.5 ** (age / half_life)``.
    repeat : {"log", "cap", "none"}
        Damping of repeat views of one page by one user. ``"log"``: the summed decayed weight
        ``w`` of the (user, page) pair becomes ``log1p(w)`` (so 200 fresh views weigh
        ``log(201) ≈ 5.3`` against ``log(2) ≈ 0.69`` for one; note that for old views, whose
        ``w`` is small, ``log1p(w) ≈ w`` and the damping fades). ``"cap"``: only the ``cap``
        most recent views of the pair count, summed. ``"none"``: plain sums.
    cap : int
        Views per (user, page) kept by ``repeat="cap"``.
    dwell : array_like or None
        Seconds spent on each view; NaN = unknown. Used only with ``dwell_weighting``.
    dwell_weighting : bool
        Multiply each view's weight by ``min(dwell, 600) / 60``: reading time in minutes, capped
        at 10 minutes (common practice against idle tabs). Unknown dwell counts as one minute,
        i.e. neutral (factor 1); zero dwell gives the view no weight. Applied before ``repeat``.
    window_days : float or None
        Ignore views older than this many days (``age > window``).
    user_count : int or None
        Number of rows; by default ``max(users) + 1``.

    Returns
    -------
    scipy.sparse.csr_matrix
        ``(user_count, size)`` float64; each row sums to 1, or is empty for a user without an
        eligible view.

    Examples
    --------
    >>> day = 86_400.0
    >>> m = profile_matrix([0, 0], [0, 1], [0.0, 30 * day], 2, now=30 * day, repeat="none")
    >>> m.toarray().round(3).tolist()  # the 30-day-old view weighs half the fresh one
    [[0.333, 0.667]]
    """
    users = _vector("users", users, integer=True)
    pages = _vector("pages", pages, integer=True)
    times = _vector("times", times, integer=False)
    arrays = {"users": users, "pages": pages, "times": times}
    size = check_count("size", size, minimum=0)
    now = check_real("now", now)
    half_life = check_positive("half_life_days", half_life_days) * SECONDS_PER_DAY
    check_choice("repeat", repeat, REPEAT_MODES)
    cap = check_count("cap", cap, minimum=1)
    if not isinstance(dwell_weighting, bool):
        raise TypeError(f"dwell_weighting must be True or False, not {dwell_weighting!r}")
    if dwell_weighting:
        if dwell is None:
            raise ValueError("dwell must be given when dwell_weighting is True; got dwell=None")
        dwell = _vector("dwell", dwell, integer=False)
        if np.any(dwell < 0):
            raise ValueError(f"dwell must not be negative; got {dwell[dwell < 0][0]!r}")
        arrays["dwell"] = dwell
    _same_length(arrays)
    if not np.all(np.isfinite(times)):
        raise ValueError(f"times must be finite; got {times[~np.isfinite(times)][0]!r}")
    if users.size and users.min() < 0:
        raise ValueError(f"users must be dense numbers >= 0; got {users.min()!r}")
    if pages.size and (pages.min() < -1 or pages.max() >= size):
        bad = pages[(pages < -1) | (pages >= size)][0]
        raise ValueError(f"pages must lie in [-1, size={size}); got {bad!r}")
    default_rows = int(users.max()) + 1 if users.size else 0
    rows = default_rows if user_count is None else check_count("user_count", user_count, minimum=0)
    if rows < default_rows:
        raise ValueError(f"user_count must exceed every user number {default_rows - 1}; got {user_count!r}")

    age = now - times
    keep = (pages >= 0) & (age >= 0)
    if window_days is not None:
        keep &= age <= check_positive("window_days", window_days) * SECONDS_PER_DAY
    users, pages, age = users[keep], pages[keep], age[keep]
    weight = np.exp2(-age / half_life)
    if dwell_weighting:
        seconds = dwell[keep]
        weight *= np.where(np.isnan(seconds), DWELL_UNIT_SECONDS, np.minimum(seconds, DWELL_CAP_SECONDS))
        weight /= DWELL_UNIT_SECONDS
    if repeat == "cap":
        latest = _latest_views(users, pages, -age, cap)
        users, pages, weight = users[latest], pages[latest], weight[latest]
    matrix = sp.csr_matrix((weight, (users, pages)), shape=(rows, size), dtype=np.float64)
    matrix.sum_duplicates()
    if repeat == "log":
        np.log1p(matrix.data, out=matrix.data)
    matrix.eliminate_zeros()
    return row_normalised(matrix)


# -- teams ------------------------------------------------------------------------------------------
def team_restart(
    profiles, members: Iterable, *, min_readers: int = Configuration.team_min_readers, team: str | None = None
) -> np.ndarray:
    """Mean of the members' normalised profile rows: a team's restart distribution.

    Each distinct member with a non-empty row counts once, with weight ``1 / readers``, however
    much they read; members without an eligible view are left out of the mean.

    Parameters
    ----------
    profiles : Profiles or sparse matrix
        Users × pages; rows are normalised here again, so raw weights work too.
    members : iterable of int, or of user ids when ``profiles`` is a :class:`Profiles`
        Rows of the team's members. Repeats are counted once.
    min_readers : int
        Fewest distinct active readers (members with a non-empty row) to publish the result.
    team : str or None
        Team name, only for the error message.

    Raises
    ------
    GroupTooSmall
        Fewer than ``min_readers`` distinct active readers. The message names no member.

    Examples
    --------
    >>> m = sp.csr_matrix(np.array([[1.0, 0], [1, 3], [0, 0]]))
    >>> team_restart(m, [0, 1, 1, 2], min_readers=2).round(3).tolist()
    [0.625, 0.375]
    """
    min_readers = check_count("min_readers", min_readers, minimum=1)
    members = list(members)
    if isinstance(profiles, Profiles):
        if any(isinstance(member, str) for member in members):
            members = profiles.rows_of(members).tolist()
        profiles = profiles.matrix
    matrix = sp.csr_matrix(profiles, dtype=np.float64)
    rows = _vector("members", np.asarray(members, dtype=np.int64 if not members else None), integer=True)
    if rows.size and (rows.min() < 0 or rows.max() >= matrix.shape[0]):
        bad = rows[(rows < 0) | (rows >= matrix.shape[0])][0]
        raise ValueError(f"members must be rows in [0, {matrix.shape[0]}); got {bad!r}")
    if matrix.nnz and matrix.data.min() < 0:
        raise ValueError(f"profiles must not be negative; got {matrix.data.min()!r}")
    chosen = row_normalised(matrix[np.unique(rows)])
    readers = int(np.count_nonzero(np.diff(chosen.indptr)))
    if readers < min_readers:
        raise GroupTooSmall(team, readers, min_readers)
    return np.asarray(chosen.sum(axis=0)).ravel() / readers


# -- from the store ---------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class Profiles:
    """Profiles of every user in a store: ``matrix[row_of(user)]`` is the user's distribution.

    ``matrix`` is users × pages of the graph (CSR), ``users`` the user ids in row order, ``now``
    the cutoff used (None for a store without views).
    """

    matrix: sp.csr_matrix
    users: tuple[str, ...]
    now: float | None

    @cached_property
    def _rows(self) -> dict[str, int]:
        return {user: row for row, user in enumerate(self.users)}

    def row_of(self, user: str) -> int:
        """Row of ``user``; UnknownUser (with close ids) when the store has no such user."""
        try:
            return self._rows[user]
        except KeyError:
            close = difflib.get_close_matches(user, self._rows, n=3, cutoff=0.5)
            raise UnknownUser(user, close) from None

    def rows_of(self, users: Iterable[str]) -> np.ndarray:
        return np.fromiter((self.row_of(user) for user in users), dtype=np.int64)

    def restart(self, user: str) -> np.ndarray:
        """The user's distribution as a dense vector (all zero if they read nothing eligible)."""
        return self.matrix[self.row_of(user)].toarray().ravel()


def load_profiles(store: Store, graph: WikiGraph, *, now: float | None = None, **options) -> Profiles:
    """Profiles of all the store's users over ``graph``'s pages (options: see :func:`profile_matrix`).

    ``now`` defaults to the latest view in the store. Views of pages outside the graph are
    skipped; users without eligible views keep an empty row.
    """
    with store.reading():  # one snapshot: a user arriving meanwhile waits for the next call
        user_ids, users = store.users()
        if now is None:
            now = store.latest_view_time()
        if options.get("dwell_weighting"):
            viewers, viewed, times, dwell = store.view_arrays(with_dwell=True)
        else:
            (viewers, viewed, times), dwell = store.view_arrays(), None
    if now is None:  # no views at all
        matrix = sp.csr_matrix((user_ids.size, graph.size), dtype=np.float64)
    else:
        matrix = profile_matrix(
            dense_numbers(user_ids, viewers),
            dense_numbers(graph.row_ids, viewed),
            times,
            graph.size,
            now=now,
            dwell=dwell,
            user_count=user_ids.size,
            **options,
        )
    return Profiles(matrix=matrix, users=tuple(users), now=now)


def team_members(store: Store, team: str) -> tuple[str, ...]:
    """User ids of ``team``'s members, sorted; UnknownTeam (with close names) when there is none."""
    members = store.members_of("team", team)
    if not members:
        raise UnknownTeam(team, difflib.get_close_matches(team, store.names_of("team"), n=3, cutoff=0.5))
    return members


def user_groups(store: Store, user: str) -> frozenset[str]:
    """Access groups ``user`` belongs to (empty for a user the store does not know)."""
    row = store.user_row(user)
    return frozenset() if row is None else store.groups_of_users([row])[row]


# -- the one profile path ---------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class ViewLog:
    """Reading history in the graph's numbering, ordered by reader, then time.

    ``users`` are reader codes (the store's user row ids), ``pages`` dense page numbers (-1: a page
    outside the graph), ``times`` Unix seconds.
    """

    users: np.ndarray
    pages: np.ndarray
    times: np.ndarray

    def __post_init__(self) -> None:
        users = np.asarray(self.users, dtype=np.int64)
        pages = np.asarray(self.pages, dtype=np.int64)
        times = np.asarray(self.times, dtype=np.float64)
        if not users.shape == pages.shape == times.shape or users.ndim != 1:
            raise ValueError(
                f"users, pages and times must be 1-D of one length; got {users.shape}, "
                f"{pages.shape}, {times.shape}"
            )
        order = np.lexsort((times, users))
        for name, values in (("users", users), ("pages", pages), ("times", times)):
            object.__setattr__(self, name, values[order])

    @property
    def latest(self) -> float | None:
        return float(self.times.max()) if self.times.size else None

    def counts(self, size: int) -> np.ndarray:
        """Views per page (views outside the graph left out)."""
        inside = self.pages >= 0
        return np.bincount(self.pages[inside], minlength=size).astype(np.int64)


def reader_profiles(views: ViewLog, size: int, configuration, *, now: float) -> tuple:
    """Every reader's restart distribution at ``now`` (rows) and the reader code of each row.

    The one profile function: team vectors at build time and readers at request time
    (:mod:`rankrec.recommend.audience`) both come from :func:`rankrec.profiles.profile_matrix` with the
    configuration's :meth:`~rankrec.configuration.Configuration.profile_options`.
    """
    codes, rows = np.unique(views.users, return_inverse=True)
    matrix = profile_matrix(
        rows.ravel(),
        views.pages,
        views.times,
        size,
        now=now,
        user_count=codes.size,
        **configuration.profile_options(),
    )
    return matrix, codes

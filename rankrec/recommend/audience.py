"""Who a list is for: a reader (access groups, reading profile, recent reads) or a team.

Both are read from the store and put in the index's page numbering. Profiles follow
:func:`rankrec.profiles.profile_matrix` (time decay, repeat damping); ``now`` defaults to the
latest view in the store, as :func:`rankrec.profiles.load_profiles` does.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from ..errors import GroupTooSmall, UnknownUser
from ..graph import dense_numbers
from ..index import Index
from ..profiles import SECONDS_PER_DAY, ViewLog, reader_profiles, team_members, team_restart
from ..store import Store


@dataclass(frozen=True, eq=False)
class Reader:
    """A reader: ``groups`` they belong to, ``restart`` their profile over the index's pages (sums to
    one, or all zero without history), ``recent`` the pages not to list again (read in the last
    ``recent_days`` of the index's configuration, or a split's excluded pages)."""

    user: str
    groups: frozenset[str]
    restart: np.ndarray
    recent: np.ndarray


@dataclass(frozen=True, eq=False)
class Team:
    """A team: mean of its members' profiles, pages all members may see, readers per page.

    ``read_by[p]`` counts the distinct members whose profile holds page ``p``. Nothing here names
    a member.
    """

    name: str
    members: int
    readers: int
    restart: np.ndarray
    visible: np.ndarray
    read_by: np.ndarray


def _now(store: Store, now: float | None) -> float | None:
    return store.latest_view_time() if now is None else now


def _user_row(store: Store, user: str) -> int:
    row = store.user_row(user)
    if row is None:
        known = store.users()[1]
        raise UnknownUser(user, difflib.get_close_matches(user, known, n=3, cutoff=0.5))
    return row


def _profiles(store, index, user_rows, now):
    """Profiles of ``user_rows`` (rows in that order; empty for a user without views) by the one profile
    function (:func:`rankrec.profiles.reader_profiles`, the index's configuration), and their views."""
    users, pages, times = store.views_of_users(user_rows)
    dense = dense_numbers(np.asarray(index.row_ids), pages)
    if now is None or times.size == 0:
        return np.zeros((len(user_rows), 0)), dense, times
    profiles, codes = reader_profiles(ViewLog(users, dense, times), index.size, index.configuration, now=now)
    order = dense_numbers(codes, np.asarray(user_rows, dtype=np.int64))
    rows = sp.vstack([profiles, sp.csr_matrix((1, index.size))]).tocsr()  # the last row: empty
    return rows[np.where(order >= 0, order, profiles.shape[0])], dense, times


def reader_from_store(
    store: Store,
    index: Index,
    user: str,
    *,
    now: float | None = None,
) -> Reader:
    """The reader ``user`` (UnknownUser with close ids if the store has no such user). Their profile
    and "read recently" follow the index's configuration (``half_life_days``, ``repeat``, ``recent_days``)."""
    recent_days = index.configuration.recent_days
    with store.reading():  # the user, their views and groups from one snapshot
        row = _user_row(store, user)
        now = _now(store, now)
        matrix, dense, times = _profiles(store, index, [row], now)
        groups = store.groups_of_users([row])[row]
    restart = np.zeros(index.size)
    recent = np.zeros(0, dtype=np.int64)
    if matrix.shape[1]:
        restart = matrix[0].toarray().ravel()
        fresh = (dense >= 0) & (times <= now) & (now - times <= recent_days * SECONDS_PER_DAY)
        recent = np.unique(dense[fresh])
    return Reader(user=user, groups=groups, restart=restart, recent=recent)


def team_from_store(
    store: Store,
    index: Index,
    team: str,
    *,
    min_readers: int | None = None,
    now: float | None = None,
) -> Team:
    """The team ``team``: UnknownTeam (close names) if none; GroupTooSmall under ``min_readers``
    distinct active readers (by default the index configuration's ``team_min_readers``)."""
    if min_readers is None:
        min_readers = index.configuration.team_min_readers
    with store.reading():  # the members, their views and groups from one snapshot
        members = team_members(store, team)
        rows = [_user_row(store, member) for member in members]
        now = _now(store, now)
        matrix, _, _ = _profiles(store, index, rows, now)
        member_groups = store.groups_of_users(rows)
    if not matrix.shape[1]:
        raise GroupTooSmall(team, 0, min_readers)
    restart = team_restart(matrix, range(len(rows)), min_readers=min_readers, team=team)
    readers = int(np.count_nonzero(np.diff(matrix.indptr)))
    read_by = np.bincount(matrix.indices[matrix.data > 0], minlength=index.size).astype(np.int32)
    visible = np.ones(index.size, dtype=bool)
    for groups in set(member_groups.values()):
        visible &= index.visible(groups)
    return Team(
        name=team, members=len(rows), readers=readers, restart=restart, visible=visible, read_by=read_by
    )

"""Who a list is for: a reader (access groups, reading profile, recent reads) or a team.

Both are read from the store and put in the index's page numbering. Profiles follow
:func:`rankrec.profiles.profile_matrix` (time decay, repeat damping); ``now`` defaults to the
latest view in the store, as :func:`rankrec.profiles.load_profiles` does.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass

import numpy as np

from .._validation import check_positive
from ..errors import GroupTooSmall, UnknownUser
from ..graph import dense_numbers
from ..index import Index
from ..profiles import SECONDS_PER_DAY, profile_matrix, team_members, team_restart
from ..store import Store

RECENT_DAYS = 30.0  # "read recently": the last 30 days (common practice for a monthly window)


@dataclass(frozen=True, eq=False)
class Reader:
    """A reader: ``groups`` they belong to, ``restart`` their profile over the index's pages (sums to
    one, or all zero without history), ``recent`` the pages they read in the last ``RECENT_DAYS``."""

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
    return store.scalar("SELECT max(timestamp) FROM views") if now is None else now


def _user_row(store: Store, user: str) -> int:
    row = store.connection.execute("SELECT id FROM users WHERE user = ?", (user,)).fetchone()
    if row is None:
        known = [found[0] for found in store.connection.execute("SELECT user FROM users")]
        raise UnknownUser(user, difflib.get_close_matches(user, known, n=3, cutoff=0.5))
    return int(row[0])


def _views_of(store: Store, user_rows: list[int]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    users, pages, times = [], [], []
    for first in range(0, len(user_rows), 500):
        chunk = user_rows[first : first + 500]
        rows = store.connection.execute(
            f"SELECT user_id, page_id, timestamp FROM views WHERE user_id IN ({','.join('?' * len(chunk))})",
            chunk,
        ).fetchall()
        if rows:
            table = np.array(rows, dtype=np.float64)
            users.append(table[:, 0].astype(np.int64))
            pages.append(table[:, 1].astype(np.int64))
            times.append(table[:, 2])
    if not users:
        return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64), np.zeros(0)
    return np.concatenate(users), np.concatenate(pages), np.concatenate(times)


def _groups_of(store: Store, user_rows: list[int]) -> dict[int, frozenset[str]]:
    found: dict[int, set[str]] = {row: set() for row in user_rows}
    for first in range(0, len(user_rows), 500):
        chunk = user_rows[first : first + 500]
        for user_id, name in store.connection.execute(
            "SELECT user_id, name FROM memberships WHERE kind = 'group' "
            f"AND user_id IN ({','.join('?' * len(chunk))})",
            chunk,
        ):
            found[user_id].add(name)
    return {row: frozenset(names) for row, names in found.items()}


def _profiles(store, index, user_rows, now, options):
    users, pages, times = _views_of(store, user_rows)
    local = dense_numbers(np.array(sorted(user_rows), dtype=np.int64), users)  # rows follow sorted ids
    dense = dense_numbers(np.asarray(index.row_ids), pages)
    if now is None or times.size == 0:
        return np.zeros((len(user_rows), 0)), dense, times
    matrix = profile_matrix(local, dense, times, index.size, now=now, user_count=len(user_rows), **options)
    return matrix, dense, times


def reader_from_store(
    store: Store,
    index: Index,
    user: str,
    *,
    recent_days: float = RECENT_DAYS,
    now: float | None = None,
    **profile_options,
) -> Reader:
    """The reader ``user`` (UnknownUser with close ids if the store has no such user)."""
    check_positive("recent_days", recent_days)
    row = _user_row(store, user)
    now = _now(store, now)
    matrix, dense, times = _profiles(store, index, [row], now, profile_options)
    restart = np.zeros(index.size)
    recent = np.zeros(0, dtype=np.int64)
    if matrix.shape[1]:
        restart = matrix[0].toarray().ravel()
        fresh = (dense >= 0) & (times <= now) & (now - times <= recent_days * SECONDS_PER_DAY)
        recent = np.unique(dense[fresh])
    return Reader(user=user, groups=_groups_of(store, [row])[row], restart=restart, recent=recent)


def team_from_store(
    store: Store,
    index: Index,
    team: str,
    *,
    min_readers: int = 5,
    now: float | None = None,
    **profile_options,
) -> Team:
    """The team ``team``: UnknownTeam (close names) if none; GroupTooSmall under ``min_readers``
    distinct active readers."""
    members = team_members(store, team)
    rows = [_user_row(store, member) for member in members]
    now = _now(store, now)
    matrix, _, _ = _profiles(store, index, rows, now, profile_options)
    if not matrix.shape[1]:
        raise GroupTooSmall(team, 0, min_readers)
    restart = team_restart(matrix, range(len(rows)), min_readers=min_readers, team=team)
    readers = int(np.count_nonzero(np.diff(matrix.indptr)))
    read_by = np.bincount(matrix.indices[matrix.data > 0], minlength=index.size).astype(np.int32)
    visible = np.ones(index.size, dtype=bool)
    for groups in set(_groups_of(store, rows).values()):
        visible &= index.visible(groups)
    return Team(
        name=team, members=len(rows), readers=readers, restart=restart, visible=visible, read_by=read_by
    )

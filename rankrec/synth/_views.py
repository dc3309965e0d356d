"""Reading history: sessions of random walks on the link graph, inside a fixed window.

A session starts in one two-hour slot (working hours and weekdays are likelier), its
views come within its first 89 minutes, so two sessions of one reader are more than
30 minutes apart. Each step follows a link of the current page, returns to one of the
reader's favourite pages, or jumps to a popular page of a space the reader's team
reads. A reader only ever views pages that are public or guarded by one of the
reader's groups; archived pages are read less.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ._people import People
from ._wiki import Wiki

WINDOW_END = 1_782_777_600  # 2026-06-30T00:00:00Z in Unix seconds
LOCAL_OFFSET = 2 * 3600  # the organisation's clocks run at UTC+02:00 (summer time)
SLOT = 2 * 3600
SESSION_SPAN = 89 * 60  # every view of a session falls within this long after its slot starts
START_SPREAD = 30 * 60
MEAN_SESSION_LENGTH = 4
MAX_SESSION_LENGTH = 24
FAVOURITES = 6
FOLLOW_LINK = 0.6  # chance that a step follows a link of the current page (when it has links)
RETURN_TO_FAVOURITE = 0.15
ARCHIVED_READ_WEIGHT = 0.15
MISSING_DWELL_SHARE = 0.03
# Chance of a session starting in a slot, by local hour at the start of the slot.
_HOUR_WEIGHT = {
    0: 0.01,
    2: 0.01,
    4: 0.01,
    6: 0.15,
    8: 1.0,
    10: 1.0,
    12: 0.8,
    14: 1.0,
    16: 0.9,
    18: 0.3,
    20: 0.1,
    22: 0.03,
}
_WEEKEND_WEIGHT = 0.08


@dataclass(frozen=True)
class Views:
    """Views in time order; ``previous`` is the page viewed just before in the same session or -1."""

    reader: np.ndarray  # int32
    page: np.ndarray  # int32
    time: np.ndarray  # int64 Unix seconds
    dwell: np.ndarray  # int32 seconds, -1 = not recorded
    previous: np.ndarray  # int32

    @property
    def size(self) -> int:
        return len(self.page)


class _Chooser:
    """Vectorised draws of pages for many readers at once."""

    def __init__(self, wiki: Wiki, people: People, rng: np.random.Generator) -> None:
        self.wiki, self.people, self.rng = wiki, people, rng
        weight = wiki.popularity * np.where(wiki.archived, ARCHIVED_READ_WEIGHT, 1.0)
        self.read_cumulative = np.cumsum(weight)
        self.public_cumulative = np.cumsum(np.where(wiki.group < 0, weight, 0.0))
        self.page_mask = np.where(wiki.group < 0, 0, 1 << np.maximum(wiki.group, 0)).astype(np.uint8)
        teams, spaces = people.affinity.shape
        self.space_cumulative = (np.cumsum(people.affinity, axis=1) + np.arange(teams)[:, None]).ravel()
        self.spaces = spaces
        self.fallback = int(np.argmax(np.where(wiki.group < 0, weight, -1.0)))

    def visible(self, reader: np.ndarray, page: np.ndarray) -> np.ndarray:
        mask = self.page_mask[page]
        return (mask == 0) | ((mask & self.people.group_mask[reader]) != 0)

    def _in_space(self, cumulative: np.ndarray, space: np.ndarray) -> np.ndarray:
        start, stop = self.wiki.space_start[space], self.wiki.space_start[space + 1]
        before = np.r_[0.0, cumulative]
        low, high = before[start], before[stop]
        value = low + self.rng.random(len(space)) * (high - low) * (1.0 - 1e-12)
        page = np.searchsorted(cumulative, value, side="right")
        return np.clip(page, start, stop - 1).astype(np.int32)

    def team_page(self, reader: np.ndarray) -> np.ndarray:
        """A popular page of a space the reader's team reads, visible to the reader."""
        team = self.people.team[reader]
        flat = np.searchsorted(self.space_cumulative, team + self.rng.random(len(reader)), side="right")
        space = np.clip(flat - team * self.spaces, 0, self.spaces - 1)
        page = self._in_space(self.read_cumulative, space)
        hidden = ~self.visible(reader, page)
        if hidden.any():
            page[hidden] = self._in_space(self.public_cumulative, space[hidden])
            still = ~self.visible(reader, page)
            page[still] = self.fallback
        return page

    def follow_link(self, page: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """A uniformly chosen out-link of each page, and whether the page had one."""
        start = self.wiki.indptr[page]
        degree = self.wiki.indptr[page + 1] - start
        has = degree > 0
        pick = start + np.floor(self.rng.random(len(page)) * degree).astype(np.int64)
        target = np.where(has, self.wiki.targets[np.minimum(pick, len(self.wiki.targets) - 1)], -1)
        return target.astype(np.int32), has


def _slot_weights(days: int) -> np.ndarray:
    slot = np.arange(days * 12)
    hour = (2 * (slot % 12) + LOCAL_OFFSET // 3600) % 24
    weight = np.array([_HOUR_WEIGHT[h] for h in range(0, 24, 2)])[hour // 2]
    day_start = WINDOW_END - days * 86400 + (slot // 12) * 86400
    weekday = (day_start // 86400 + 3) % 7  # 1970-01-01 was a Thursday; 0 = Monday
    weight = weight * np.where(weekday >= 5, _WEEKEND_WEIGHT, 1.0)
    return weight / weight.sum()


def _sessions(people: People, days: int, views_per_reader: float, rng: np.random.Generator):
    wanted = np.maximum(1, np.round(rng.lognormal(np.log(views_per_reader), 0.35, size=people.size)))
    count = np.maximum(1, np.round(wanted / MEAN_SESSION_LENGTH)).astype(np.int64)
    reader = np.repeat(np.arange(people.size, dtype=np.int64), count)
    slot = rng.choice(days * 12, size=len(reader), p=_slot_weights(days))
    key = reader * (days * 12) + slot
    key.sort(kind="stable")
    key = key[np.r_[True, key[1:] != key[:-1]]]  # one session per reader and slot
    reader, slot = key // (days * 12), key % (days * 12)
    length = np.minimum(rng.geometric(1.0 / MEAN_SESSION_LENGTH, size=len(key)), MAX_SESSION_LENGTH)
    return reader.astype(np.int32), slot, length


def build_views(
    wiki: Wiki, people: People, *, days: int, views_per_reader: float, rng: np.random.Generator, progress=None
) -> Views:
    """Draw every reader's sessions and walk them; return the views in time order."""
    reader, slot, length = _sessions(people, days, views_per_reader, rng)
    chooser = _Chooser(wiki, people, rng)
    sessions, steps = len(reader), int(length.max())
    favourites = chooser.team_page(np.repeat(np.arange(people.size), FAVOURITES)).reshape(-1, FAVOURITES)
    pages = np.full((sessions, steps), -1, dtype=np.int32)
    for step in range(steps):
        active = np.flatnonzero(length > step)
        who = reader[active]
        choice = rng.random(len(active))
        favourite = favourites[who, rng.integers(0, FAVOURITES, size=len(active))]
        page = chooser.team_page(who)
        if step == 0:
            page = np.where(choice < 0.4, favourite, page)
        else:
            linked, has_link = chooser.follow_link(pages[active, step - 1])
            follow = (choice < FOLLOW_LINK) & has_link
            follow[follow] = chooser.visible(who[follow], linked[follow])
            back = ~follow & (choice >= FOLLOW_LINK) & (choice < FOLLOW_LINK + RETURN_TO_FAVOURITE)
            page = np.where(follow, linked, np.where(back, favourite, page))
        pages[active, step] = page
        if progress is not None:
            progress("reading history", step + 1, steps)
    dwell = np.clip(np.round(rng.lognormal(np.log(45.0), 1.0, size=pages.shape)), 3, 1500).astype(np.int64)
    pause = rng.integers(2, 26, size=pages.shape)
    slot_start = WINDOW_END - days * 86400 + slot * SLOT
    first = slot_start + rng.integers(0, START_SPREAD, size=sessions)
    offset = np.zeros(pages.shape, dtype=np.int64)
    np.cumsum((dwell + pause)[:, :-1], axis=1, out=offset[:, 1:])
    time = first[:, None] + offset
    kept = (np.arange(steps)[None, :] < length[:, None]) & (time < slot_start[:, None] + SESSION_SPAN)
    previous = np.full(pages.shape, -1, dtype=np.int32)
    previous[:, 1:] = pages[:, :-1]
    dwell[rng.random(pages.shape) < MISSING_DWELL_SHARE] = -1
    flat_reader = np.broadcast_to(reader[:, None], pages.shape)[kept]
    flat_page, flat_time = pages[kept], time[kept]
    order = np.lexsort((flat_page, flat_reader, flat_time))
    return Views(
        reader=flat_reader[order],
        page=flat_page[order],
        time=flat_time[order],
        dwell=dwell[kept][order].astype(np.int32),
        previous=previous[kept][order],
    )

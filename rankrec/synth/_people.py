"""Readers of the invented wiki: teams with favourite spaces, access-group memberships."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import _words
from ._wiki import Wiki

GROUP_SHARE_IN_HOME_TEAM = 0.8  # readers of a team whose home space a group guards
GROUP_SHARE_ELSEWHERE = 0.02
LEADERSHIP_SHARE = 0.03


@dataclass(frozen=True)
class People:
    user_ids: np.ndarray  # S: b"u00042"
    team: np.ndarray  # int32 per reader
    team_names: tuple[str, ...]
    team_home: np.ndarray  # int16 per team: index of its home space
    affinity: np.ndarray  # float64 (teams, spaces), rows sum to 1: where a team reads
    group_mask: np.ndarray  # uint8 per reader, bit g = member of wiki.group_names[g]
    agent: np.ndarray  # int8 per reader: index into _words.BROWSER_AGENTS

    @property
    def size(self) -> int:
        return len(self.user_ids)


def _team_names(count: int, space_names: tuple[str, ...]) -> tuple[list[str], list[int]]:
    """Round-robin over the spaces: first each space's named teams, then numbered ones."""
    names, homes, round_ = [], [], 0
    while len(names) < count:
        for home, space in enumerate(space_names):
            listed = _words.SPACE_TEAMS[space]
            names.append(listed[round_] if round_ < len(listed) else f"{space}-team-{round_ + 1}")
            homes.append(home)
            if len(names) == count:
                break
        round_ += 1
    return names, homes


def _affinity(homes: np.ndarray, wiki: Wiki, rng: np.random.Generator) -> np.ndarray:
    n_spaces = len(wiki.space_names)
    sizes = np.diff(wiki.space_start).astype(np.float64)
    affinity = np.tile(0.1 * sizes / sizes.sum(), (len(homes), 1))
    affinity[np.arange(len(homes)), homes] += 0.65
    second = (homes + rng.integers(1, n_spaces, size=len(homes))) % n_spaces
    has_second = rng.random(len(homes)) < 0.6
    affinity[np.arange(len(homes))[has_second], second[has_second]] += 0.25
    return affinity / affinity.sum(axis=1, keepdims=True)


def _memberships(team_home_of_reader, wiki: Wiki, rng: np.random.Generator) -> np.ndarray:
    readers = len(team_home_of_reader)
    mask = np.zeros(readers, dtype=np.uint8)
    for bit, group in enumerate(wiki.group_names):
        guarded = _words.GROUP_SPACES[group]
        if guarded and guarded in wiki.space_names:
            home = team_home_of_reader == wiki.space_names.index(guarded)
            share = np.where(home, GROUP_SHARE_IN_HOME_TEAM, GROUP_SHARE_ELSEWHERE)
        else:
            share = np.full(readers, LEADERSHIP_SHARE)
        member = rng.random(readers) < share
        if not member.any():  # every group that guards a page has someone who may read it
            member[rng.integers(readers)] = True
        mask[member] |= np.uint8(1 << bit)
    return mask


def build_people(wiki: Wiki, readers: int, rng: np.random.Generator) -> People:
    """Draw ``readers`` readers in teams (about eight readers a team, 3 to 60 teams)."""
    teams = int(np.clip(round(readers / 8), 3, 60))
    teams = min(teams, readers)
    names, homes = _team_names(teams, wiki.space_names)
    team_home = np.array(homes, dtype=np.int16)
    size_weight = rng.lognormal(0.0, 0.6, size=teams)
    team = np.empty(readers, dtype=np.int32)
    team[:teams] = np.arange(teams)  # every team has a member
    team[teams:] = rng.choice(teams, size=readers - teams, p=size_weight / size_weight.sum())
    rng.shuffle(team)
    user_ids = np.strings.add(b"u", np.char.zfill(np.arange(1, readers + 1).astype("S"), 5))
    return People(
        user_ids=user_ids,
        team=team,
        team_names=tuple(names),
        team_home=team_home,
        affinity=_affinity(team_home, wiki, rng),
        group_mask=_memberships(team_home[team], wiki, rng),
        agent=rng.integers(0, len(_words.BROWSER_AGENTS), size=readers).astype(np.int8),
    )

"""Lists worth showing: related pages, a reader's personal list, a team's landing ordering.

Every list is filtered *before* it is cut to ``k``: the seed itself, archived pages, pages the
audience may not see (a page with access groups is visible to a reader in any of them; a page
without groups to everyone; with no reader, only pages visible to everyone; for a team, only
pages every member may see) and, on request, pages the seed links to and pages the reader read
recently. So a list is full whenever enough eligible pages exist: when the personalised
scores run out, the remaining places go to eligible pages by global PageRank (and say so).

Scores are personalised PageRank values, ranked after an optional lift ``score / global^β``
(β from the index's manifest unless given) so that site-wide hubs do not top every list.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np

from .._validation import check_count, check_fraction, check_real
from ..configuration import check_lift
from ..index import Index
from ..pagerank import push
from .audience import Reader, Team
from .candidates import mix_text, page_candidates, text_row
from .explain import FROM_RESTART, NO_LINK, READ_ON, SIMILAR_TEXT, VIA_PAGE, contributions, restart_scale
from .select import cap_per_space, choose_pages, hubs_later, lifted

READ_BY_BAND = 5  # "read by N or more of your team": N a multiple of 5, never the exact count


@dataclass(frozen=True)
class Item:
    """One recommended page: its id, title, space, ranking score, PageRank score and why it is here."""

    page: str
    title: str
    space: str | None
    score: float
    pagerank: float
    reason: str


@dataclass(frozen=True)
class Recommendations:
    """A list, best first. ``error_bound`` bounds the L1 error of the PageRank scores (None: unknown);
    ``eligible`` counts the pages that passed the filters."""

    kind: str
    subject: str
    items: tuple[Item, ...]
    error_bound: float | None
    eligible: int
    seconds: float

    def rows(self) -> list[dict]:
        """Items as plain dicts (rank, page, title, space, score, reason) for output."""
        return [
            {
                "rank": rank,
                "page": item.page,
                "title": item.title,
                "space": item.space,
                "score": item.score,
                "reason": item.reason,
            }
            for rank, item in enumerate(self.items, start=1)
        ]


# -- choosing ---------------------------------------------------------------------------------------
def _lift(index: Index, lift: float | None) -> float:
    return float(index.configuration.lift) if lift is None else check_lift(lift)


def _ranked(index: Index, pages: np.ndarray, values: np.ndarray, lift: float) -> np.ndarray:
    return lifted(values, np.asarray(index.global_vector)[pages], lift)


def _select(
    index: Index, vector: np.ndarray, eligible: np.ndarray, k: int, lift: float, per_space: int | None
) -> np.ndarray:
    """Best ``k`` eligible pages: positive scores first, then eligible pages by global PageRank."""
    return choose_pages(
        vector,
        index.global_vector,
        eligible,
        k,
        lift=lift,
        order=index.global_order,
        per_space=per_space,
        space=index.space,
        divisor=index.lift_divisor(lift),
    )


def _eligible(
    index: Index,
    visible: np.ndarray,
    *,
    seed: int | None = None,
    linked: bool = False,
    read: np.ndarray | None = None,
) -> np.ndarray:
    mask = visible & index.listable
    if seed is not None:
        mask[seed] = False
        if linked:
            mask[index.links_from(seed)] = False
    if read is not None:
        mask[read] = False
    return mask


# -- explaining -------------------------------------------------------------------------------------
@dataclass(frozen=True)
class _Audience:
    visible: np.ndarray
    read: np.ndarray | None = None  # the reader's profile: a page they read weighs more than 0
    read_by: np.ndarray | None = None  # team members who read each page
    readers: int = 0  # the team's distinct active readers
    minimum: int = 5  # the configuration's team_min_readers
    personal: bool = False
    seed: int | None = None


def team_readers(count: int, readers: int, minimum: int) -> str | None:
    """How a landing reason may say how many of a team read a page, or None to say nothing.

    Counts are banded down to a multiple of :data:`READ_BY_BAND` and shown only from ``minimum``
    readers up; a page every active reader read says "widely read", so a reason never tells that
    each member read it, nor exactly how many did (a k-anonymity floor: common practice).

    >>> team_readers(3, 12, 5), team_readers(13, 20, 5), team_readers(12, 12, 5)
    (None, 'read by 10 or more of your team', 'widely read in your team')
    """
    if count < max(minimum, READ_BY_BAND):
        return None
    if count >= readers:
        return "widely read in your team"
    return f"read by {count // READ_BY_BAND * READ_BY_BAND} or more of your team"


def _reason(index: Index, page: int, kind: int, via: int, space: int, audience: _Audience) -> str:
    if audience.read_by is not None:
        said = team_readers(int(audience.read_by[page]), audience.readers, audience.minimum)
        if said is not None:
            return said
    if kind == SIMILAR_TEXT:
        return "similar text" if audience.seed is None else f"similar text to {index.titles[audience.seed]}"
    if kind == READ_ON and audience.seed is not None:
        return "readers go on to it from here"
    if kind == NO_LINK:
        return "among the most linked-to pages of the wiki"
    if kind == FROM_RESTART and audience.personal:
        return "you read it before"
    if kind == VIA_PAGE and via >= 0 and audience.visible[via]:
        if via == audience.seed:
            return f"linked from {index.titles[via]}"
        if audience.read is not None and audience.read[via] > 0:
            return f"you read {index.titles[via]}, which links here"
        return f"via {index.titles[via]}"
    if space >= 0:
        return f"mostly reached from pages in space {index.space_names[space]}"
    if audience.seed is not None:
        return f"closely connected to {index.titles[audience.seed]}"
    return "close to what you read" if audience.personal else "close to what your team reads"


def _items(
    index: Index,
    chosen: np.ndarray,
    vector_values: np.ndarray,
    lift: float,
    explained,
    audience: _Audience,
    ranking: np.ndarray | None = None,
) -> tuple[Item, ...]:
    """Items of ``chosen``: ``ranking`` scores when given (a related score mixing in text), else lifted."""
    scores = _ranked(index, chosen, vector_values, lift) if ranking is None else ranking
    columns = (chosen, scores, vector_values, explained.kind, explained.via, explained.space)
    # Python numbers up front (tolist): per-element reads of numpy arrays cost more than the rest
    return tuple(
        Item(
            page=index.pages[page],
            title=index.titles[page],
            space=index.space_of(page),
            score=float(score),
            pagerank=float(value),
            reason=_reason(index, page, kind, via, space, audience),
        )
        for page, score, value, kind, via, space in zip(
            *(np.asarray(column).tolist() for column in columns), strict=True
        )
    )


def _explain_full(index: Index, vector: np.ndarray, chosen: np.ndarray, restart: np.ndarray | None):
    damping = index.configuration.damping
    restart_part = None
    if restart is not None:
        restart_part = restart_scale(vector, index.transition.dangling_pages, damping) * restart[chosen]
    explained = contributions(
        index.transition.backward,
        lambda pages: vector[pages],
        chosen,
        np.asarray(index.space),
        damping=damping,
        restart_part=restart_part,
    )
    unscored = vector[chosen] <= 0
    explained.kind[unscored] = NO_LINK
    return explained


# -- the three lists --------------------------------------------------------------------------------
def related(
    index: Index,
    page: str | int,
    *,
    reader: Reader | None = None,
    k: int = 10,
    exclude_linked: bool = False,
    exclude_read: bool = False,
    personal_share: float = 0.0,
    lift: float | None = None,
    per_space: int | None = None,
) -> Recommendations:
    """Pages related to ``page``, for ``reader`` (their access groups; None: public pages only).

    ``page`` is a page id, or its number in the index (:meth:`rankrec.index.Index.page_number`)
    when the caller has looked it up already; the list's subject is the page id either way.
    ``personal_share`` ``w`` in [0, 1] mixes the reader's personal vector in: ``(1 − w)·x_page + w·x_reader``
    ("related, for you"). ``exclude_read`` drops pages the reader read recently.
    """
    started = time.perf_counter()
    check_count("k", k)
    check_fraction("personal_share", personal_share)
    if per_space is not None:
        check_count("per_space", per_space)
    lift = _lift(index, lift)
    hub_free_top = index.configuration.hub_free_top
    seed = _seed_number(index, page)
    page = index.pages[seed]
    visible = index.visible(None if reader is None else reader.groups)
    read = reader.recent if (exclude_read and reader is not None) else None
    eligible = _eligible(index, visible, seed=seed, linked=exclude_linked, read=read)
    audience = _Audience(visible=visible, read=None if reader is None else reader.restart, seed=seed)
    if personal_share == 0 and lift == index.configuration.lift:
        found = page_candidates(index, seed)
        ordered = np.flatnonzero(eligible[found["pages"]])
        ordered = ordered[hubs_later(found["pages"][ordered], index.hubs, hub_free_top)]
        if per_space is not None:
            codes = np.asarray(index.space)[found["pages"][ordered]]
            ordered = ordered[cap_per_space(codes, k, per_space, {})]
        positions = ordered[:k]
        count = int(eligible.sum())
        if positions.size == k or positions.size == count:
            chosen = found["pages"][positions].astype(np.int64)
            explained = _Stored(found, positions)
            values, ranking = (found[name][positions].astype(float) for name in ("scores", "combined"))
            items = _items(index, chosen, values, lift, explained, audience, ranking)
            return Recommendations("related", page, items, None, count, time.perf_counter() - started)
    vector = index.seed_vector(seed)
    restart = None
    if personal_share > 0 and reader is not None and reader.restart.sum() > 0:
        personal = _personal_vector(index, reader.restart)
        vector = (1.0 - personal_share) * vector + personal_share * personal.vector
        restart = personal_share * reader.restart
        restart[seed] = 0.0
    mixed, text_part = _with_text(index, seed, vector, lift)
    wider = k + hub_free_top  # room to move hubs down without leaving the list short
    if mixed is None:
        chosen = _select(index, vector, eligible, wider, lift, per_space)
        chosen = chosen[hubs_later(chosen, index.hubs, hub_free_top)][:k]
        explained = _explain_full(index, vector, chosen, restart)
        items = _items(index, chosen, vector[chosen], lift, explained, audience)
    else:
        chosen = _select(index, mixed, eligible, wider, 0.0, per_space)
        chosen = chosen[hubs_later(chosen, index.hubs, hub_free_top)][:k]
        explained = _explain_full(index, vector, chosen, restart)
        explained.kind[text_part[chosen] > mixed[chosen] - text_part[chosen]] = SIMILAR_TEXT
        items = _items(index, chosen, vector[chosen], lift, explained, audience, mixed[chosen])
    return Recommendations("related", page, items, None, int(eligible.sum()), time.perf_counter() - started)


def _with_text(index: Index, seed: int, vector: np.ndarray, lift: float):
    """The related score mixing in text (:func:`rankrec.recommend.candidates.mix_text`) over every page,
    and its text part; (None, None) when the index has no text or the configuration no text weight."""
    weight = index.configuration.text_weight
    similar_pages, sims = text_row(index.text, seed, index.archived)
    if weight == 0 or similar_pages.size == 0:
        return None, None
    base = (vector > 0) & ~np.asarray(index.archived)
    base[seed] = False
    links = np.where(base, lifted(vector, np.asarray(index.global_vector), lift), 0.0)
    dense = np.zeros(index.size)
    dense[similar_pages] = sims
    return mix_text(links, float(links.max()), dense, float(sims.max()), weight)


def _seed_number(index: Index, page: str | int) -> int:
    """The dense number of ``page`` (an id: looked up, UnknownPage if absent; a number: range-checked)."""
    if isinstance(page, str):
        return index.page_number(page)
    if isinstance(page, bool) or not isinstance(page, int | np.integer):
        raise TypeError(f"page must be a page id (str) or a page number (int); got {page!r}")
    if not 0 <= page < index.size:
        raise ValueError(f"page number must lie in [0, {index.size}); got {page!r}")
    return int(page)


@dataclass(frozen=True)
class _Stored:
    via: np.ndarray
    space: np.ndarray
    kind: np.ndarray

    def __init__(self, found: dict, positions: np.ndarray) -> None:
        object.__setattr__(self, "via", found["via"][positions])
        object.__setattr__(self, "space", found["space"][positions])
        object.__setattr__(self, "kind", found["kind"][positions])


@dataclass(frozen=True)
class _Personal:
    vector: np.ndarray
    error_bound: float


def _personal_vector(index: Index, restart: np.ndarray, epsilon: float | None = None) -> _Personal:
    """Personalised PageRank of a restart distribution: the index's basis plus push for the rest
    (residual threshold ``epsilon``, by default the index's measured one: ``Index.vector_epsilon``)."""
    if epsilon is None:
        epsilon = index.vector_epsilon
    check_real("epsilon", epsilon)
    if not 0 < epsilon < 1:
        raise ValueError(f"epsilon must lie in (0, 1); got {epsilon!r}")
    if index.basis is not None:
        found = index.basis.personalised(index.transition, restart, epsilon=epsilon)
        return _Personal(found.vector, found.error_bound)
    pages = np.flatnonzero(restart != 0)
    result = push(
        index.transition,
        dict(zip(pages.tolist(), restart[pages].tolist(), strict=True)),
        damping=index.configuration.damping,
        epsilon=epsilon,
    )
    vector = np.zeros(index.size)
    vector[np.asarray(result.vector.coords[0])] = result.vector.data
    total = vector.sum()
    # p ≤ x and ‖x − p‖₁ = ρ, so ‖x − p/‖p‖₁‖₁ ≤ 2ρ (x sums to one)
    return _Personal(vector / total, min(2.0, 2.0 * result.residual_mass / total))


def recommend(
    index: Index,
    reader: Reader,
    *,
    k: int = 10,
    exclude_read: bool = True,
    lift: float | None = None,
    per_space: int | None = None,
    epsilon: float | None = None,
) -> Recommendations:
    """A reader's personal list from their reading profile (basis combination plus push).

    ``error_bound`` is the L1 bound of the personal vector (so every item's ``pagerank`` is within
    it of the exact personalised PageRank); ``epsilon`` is the push threshold for the part of the
    profile outside the basis (smaller: tighter bound, slower). A reader without reading history
    gets the global PageRank order of what they may see.
    """
    started = time.perf_counter()
    check_count("k", k)
    if per_space is not None:
        check_count("per_space", per_space)
    lift = _lift(index, lift)
    visible = index.visible(reader.groups)
    eligible = _eligible(index, visible, read=reader.recent if exclude_read else None)
    if reader.restart.sum() > 0:
        personal = _personal_vector(index, reader.restart, epsilon)
        restart = reader.restart
    else:
        personal = _Personal(np.zeros(index.size), 0.0)
        restart = None
    chosen = _select(index, personal.vector, eligible, k, lift, per_space)
    explained = _explain_full(index, personal.vector, chosen, restart)
    audience = _Audience(visible=visible, read=reader.restart, personal=True)
    items = _items(index, chosen, personal.vector[chosen], lift, explained, audience)
    return Recommendations(
        "personal",
        reader.user,
        items,
        personal.error_bound,
        int(eligible.sum()),
        time.perf_counter() - started,
    )


def landing(
    index: Index,
    team: Team,
    *,
    k: int = 20,
    lift: float | None = None,
    per_space: int | None = None,
    epsilon: float | None = None,
) -> Recommendations:
    """A team's landing ordering: only pages every member may see; no output names a member.

    ``team`` comes from :func:`rankrec.recommend.team_from_store`, which already refused a team with
    too few distinct active readers (GroupTooSmall). The ordering uses the team's vector as of the
    index build when the index holds it (every team that passed the minimum then); otherwise the
    team's current profile is solved now (basis plus push, ``epsilon``). Visibility and "read by N"
    always come from the store as it is now.
    """
    started = time.perf_counter()
    check_count("k", k)
    if per_space is not None:
        check_count("per_space", per_space)
    lift = _lift(index, lift)
    eligible = _eligible(index, team.visible)
    stored = index.team_vector(team.name)
    if stored is not None:
        personal = _Personal(stored, index.team_error_bound)
    else:
        personal = _personal_vector(index, team.restart, epsilon)
    chosen = _select(index, personal.vector, eligible, k, lift, per_space)
    explained = _explain_full(index, personal.vector, chosen, team.restart)
    audience = _Audience(
        visible=team.visible,
        read_by=team.read_by,
        readers=team.readers,
        minimum=index.configuration.team_min_readers,
    )
    items = _items(index, chosen, personal.vector[chosen], lift, explained, audience)
    return Recommendations(
        "landing", team.name, items, personal.error_bound, int(eligible.sum()), time.perf_counter() - started
    )

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

import json
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .._validation import check_count, check_fraction, check_real
from ..errors import InputError
from ..explain import FROM_RESTART, NO_LINK, VIA_PAGE, contributions, restart_scale
from ..index import Index
from ..pagerank import push
from ..ranking import top_k
from .audience import Reader, Team

READ_BY_MINIMUM = 3  # "read by N of your team" only from 3 readers up (small counts are not shown)


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
    if lift is None:
        return float(index.manifest.lift)
    if check_real("lift", lift) < 0:
        raise ValueError(f"lift must not be negative; got {lift!r}")
    return float(lift)


def _lifted(values: np.ndarray, global_values: np.ndarray, lift: float) -> np.ndarray:
    """The ranking score ``value / global^lift`` (plain values when ``lift`` is 0)."""
    return values / np.power(global_values, lift) if lift else np.asarray(values, dtype=float)


def _ranked(index: Index, pages: np.ndarray, values: np.ndarray, lift: float) -> np.ndarray:
    return _lifted(values, np.asarray(index.global_vector)[pages], lift)


_SELECT_CELLS = 1 << 22  # pages x columns handled at once when filling short lists
_FILL_FIRST = 256  # pages of the global order looked at first when filling (x4 until enough)


def select_pages(vectors, global_vector, eligible, k: int, *, lift: float, order=None) -> np.ndarray:
    """The best ``k`` eligible pages of each column of ``vectors``: the ranking every list uses.

    Pages with a positive score come first, ranked by ``score / global^lift`` (``lift`` 0: by
    score); the places left go to the other eligible pages by global PageRank. Ties go to the
    lower page number. Serving calls it for one vector; offline evaluation for blocks of them.

    Parameters
    ----------
    vectors : array of shape (n,) or (n, q)
        PageRank scores, one column per list.
    global_vector : array of shape (n,)
        Global PageRank (positive).
    eligible : bool array of shape (n,) or like ``vectors``
        Pages the list may hold.
    k : int
        Length of each list.
    lift : float
        Lift exponent, >= 0.
    order : int array of shape (n,), optional
        Every page by descending ``global_vector``, ties to the lower page
        (``np.lexsort((np.arange(n), -global_vector))``, as :attr:`rankrec.index.Index.global_order`
        keeps it); computed when not given.

    Returns
    -------
    int64 array of shape (k,) or (q, k): page numbers, best first, ``-1`` padded at the tail
    when fewer than ``k`` pages are eligible.

    >>> select_pages(np.array([0.5, 0.0, 0.2, 0.3]), np.array([0.5, 0.1, 0.1, 0.3]),
    ...              np.array([True, True, True, False]), 3, lift=1.0).tolist()
    [2, 0, 1]
    """
    k = check_count("k", k)
    if check_real("lift", lift) < 0:
        raise ValueError(f"lift must not be negative; got {lift!r}")
    scores = np.asarray(vectors, dtype=np.float64)
    single = scores.ndim == 1
    scores = scores[:, None] if single else scores
    if scores.ndim != 2:
        raise ValueError(f"vectors must have shape (n,) or (n, q); got {np.shape(vectors)!r}")
    n, columns = scores.shape
    overall = np.asarray(global_vector, dtype=np.float64)
    allowed = np.asarray(eligible, dtype=bool)
    allowed = allowed[:, None] if allowed.ndim == 1 else allowed
    if overall.shape != (n,) or allowed.shape[0] != n or allowed.shape[1] not in (1, columns):
        raise ValueError(
            f"global_vector {overall.shape!r} and eligible {np.shape(eligible)!r} must match vectors "
            f"{np.shape(vectors)!r}"
        )
    if order is not None and np.shape(order) != (n,):
        raise ValueError(f"order must have shape ({n},); got {np.shape(order)!r}")
    positive = allowed & (scores > 0)
    lists = _scored(scores, overall, positive, k, lift)
    found = (lists >= 0).sum(axis=1)
    short = np.flatnonzero(found < k)
    if short.size:
        order = np.lexsort((np.arange(n), -overall)) if order is None else np.asarray(order)
        step = max(1, _SELECT_CELLS // max(n, 1))
        for start in range(0, short.size, step):
            _fill(lists, short[start : start + step], found, allowed, positive, order, k)
    return lists[0] if single else lists


def _scored(scores, overall, positive, k: int, lift: float) -> np.ndarray:
    """(columns, k): the best positive-scored pages of each column by lifted score (-1 padded)."""
    if scores.shape[1] > 1:
        return _top_of_columns(np.where(positive, _lifted(scores, overall[:, None], lift), -np.inf), k)
    # one list: rank only the scored pages (often few); rows ascend, so ties still go to the lower page
    rows = np.flatnonzero(positive[:, 0])
    best = _top_of_columns(_lifted(scores[rows, 0], overall[rows], lift)[:, None], k)
    return np.where(best >= 0, rows[np.maximum(best, 0)] if rows.size else -1, -1)


def _fill(lists, chunk, found, allowed, positive, order, k: int) -> None:
    """Give the short lists ``chunk`` their remaining places: eligible unscored pages in ``order``.

    Only a head of the order is looked at (the first pages there are nearly always eligible), and
    a longer head only while some list still lacks pages; the first free pages of the head are the
    first free pages of the whole order, so the lists equal those of a pass over all pages.
    """
    n = order.size
    usable = allowed if allowed.shape[1] == 1 else allowed[:, chunk]
    unscored = ~positive[:, chunk]
    need = (k - found[chunk])[None, :]
    head = min(n, _FILL_FIRST + 4 * k)
    while True:
        pages = order[:head]
        free = usable[pages] & unscored[pages]
        rank = np.cumsum(free, axis=0) - 1
        if head == n or bool((rank[-1] + 1 >= need).all()):
            break
        head = min(n, head * 4)
    rows, cols = np.nonzero(free & (rank < need))
    lists[chunk[cols], found[chunk[cols]] + rank[rows, cols]] = pages[rows]


def _top_of_columns(ranked: np.ndarray, k: int) -> np.ndarray:
    """(columns, k): each column's ``k`` largest finite entries, best first, ties to the lower row."""
    n, columns = ranked.shape
    width = min(k, n)
    lists = np.full((columns, k), -1, dtype=np.int64)
    if width == 0 or columns == 0:
        return lists
    threshold = -np.partition(-ranked, width - 1, axis=0)[width - 1]
    above = ranked > threshold
    level = ranked == threshold
    wanted = width - above.sum(axis=0)
    chosen = above | (level & (np.cumsum(level, axis=0) <= wanted))
    cols, rows = np.nonzero(chosen.T)  # grouped by column, width entries each
    rows = rows.reshape(columns, width)
    values = np.take_along_axis(ranked.T, rows, axis=1)
    order = np.lexsort((rows, -values), axis=-1)
    rows, values = np.take_along_axis(rows, order, 1), np.take_along_axis(values, order, 1)
    lists[:, :width] = np.where(np.isfinite(values), rows, -1)
    return lists


def _per_space(index: Index, ordered: np.ndarray, k: int, per_space: int | None, taken: dict) -> list[int]:
    chosen = []
    for page in ordered.tolist():
        if len(chosen) == k:
            break
        if per_space is not None:
            code = int(index.space[page])
            if taken.get(code, 0) >= per_space:
                continue
            taken[code] = taken.get(code, 0) + 1
        chosen.append(page)
    return chosen


def _select(
    index: Index, vector: np.ndarray, eligible: np.ndarray, k: int, lift: float, per_space: int | None
) -> np.ndarray:
    """Best ``k`` eligible pages: positive scores first, then eligible pages by global PageRank."""
    if per_space is None:
        chosen = select_pages(vector, index.global_vector, eligible, k, lift=lift, order=index.global_order)
        return chosen[chosen >= 0]
    positive = np.flatnonzero(eligible & (vector > 0))
    scores = _ranked(index, positive, vector[positive], lift)
    taken: dict = {}
    want = k
    while True:
        ordered = positive[top_k(scores, min(want, positive.size))]
        chosen = _per_space(index, ordered, k, per_space, dict(taken))
        if len(chosen) == k or want >= positive.size:
            break
        want *= 4
    _per_space(index, np.array(chosen, dtype=np.int64), k, per_space, taken)
    if len(chosen) < k:
        rest = np.flatnonzero(eligible & ~(vector > 0))
        want = k
        while True:
            ordered = rest[top_k(np.asarray(index.global_vector)[rest], min(want, rest.size))]
            extra = _per_space(index, ordered, k - len(chosen), per_space, dict(taken))
            if len(extra) == k - len(chosen) or want >= rest.size:
                break
            want *= 4
        chosen += extra
    return np.array(chosen, dtype=np.int64)


def _eligible(
    index: Index,
    visible: np.ndarray,
    *,
    seed: int | None = None,
    linked: bool = False,
    read: np.ndarray | None = None,
) -> np.ndarray:
    mask = visible & ~np.asarray(index.archived)
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
    read: np.ndarray | None = None  # pages the reader has in their profile
    read_by: np.ndarray | None = None  # team members who read each page
    personal: bool = False
    seed: int | None = None


def _reason(index: Index, page: int, kind: int, via: int, space: int, audience: _Audience) -> str:
    if audience.read_by is not None and audience.read_by[page] >= READ_BY_MINIMUM:
        return f"read by {int(audience.read_by[page])} of your team"
    if kind == NO_LINK:
        return "among the most linked-to pages of the wiki"
    if kind == FROM_RESTART and audience.personal:
        return "you read it before"
    if kind == VIA_PAGE and via >= 0 and audience.visible[via]:
        if via == audience.seed:
            return f"linked from {index.titles[via]}"
        if audience.read is not None and audience.read[via]:
            return f"you read {index.titles[via]}, which links here"
        return f"via {index.titles[via]}"
    if space >= 0:
        return f"mostly reached from pages in space {index.space_names[space]}"
    if audience.seed is not None:
        return f"closely connected to {index.titles[audience.seed]}"
    return "close to what you read" if audience.personal else "close to what your team reads"


def _items(
    index: Index, chosen: np.ndarray, vector_values: np.ndarray, lift: float, explained, audience: _Audience
) -> tuple[Item, ...]:
    scores = _ranked(index, chosen, vector_values, lift)
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
    damping = index.manifest.damping
    restart_part = None
    if restart is not None:
        restart_part = restart_scale(vector, np.asarray(index.transition.dangling), damping) * restart[chosen]
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
    blend: float = 0.0,
    lift: float | None = None,
    per_space: int | None = None,
) -> Recommendations:
    """Pages related to ``page``, for ``reader`` (their access groups; None: public pages only).

    ``page`` is a page id, or its number in the index (:meth:`rankrec.index.Index.page_number`)
    when the caller has looked it up already; the list's subject is the page id either way.
    ``blend`` in [0, 1] mixes the reader's personal vector in: ``(1 − w)·x_page + w·x_reader``
    ("related, for you"). ``exclude_read`` drops pages the reader read recently.
    """
    started = time.perf_counter()
    check_count("k", k)
    check_fraction("blend", blend)
    if per_space is not None:
        check_count("per_space", per_space)
    lift = _lift(index, lift)
    seed = _seed_number(index, page)
    page = index.pages[seed]
    visible = index.visible(None if reader is None else reader.groups)
    read = reader.recent if (exclude_read and reader is not None) else None
    eligible = _eligible(index, visible, seed=seed, linked=exclude_linked, read=read)
    audience = _Audience(visible=visible, read=None if reader is None else reader.restart > 0, seed=seed)
    if blend == 0 and lift == index.manifest.lift:
        found = index.seed_candidates(seed)
        keep = eligible[found["pages"]]
        ordered = np.flatnonzero(keep)
        positions = _per_space_positions(index, found["pages"], ordered, k, per_space)
        count = int(eligible.sum())
        if positions.size == k or positions.size == count:
            chosen = found["pages"][positions].astype(np.int64)
            explained = _Stored(found, positions)
            items = _items(index, chosen, found["scores"][positions].astype(float), lift, explained, audience)
            return Recommendations("related", page, items, None, count, time.perf_counter() - started)
    vector = index.seed_vector(seed)
    restart = None
    if blend > 0 and reader is not None and reader.restart.sum() > 0:
        personal = _personal_vector(index, reader.restart)
        vector = (1.0 - blend) * vector + blend * personal.vector
        restart = blend * reader.restart
        restart[seed] = 0.0
    chosen = _select(index, vector, eligible, k, lift, per_space)
    explained = _explain_full(index, vector, chosen, restart)
    items = _items(index, chosen, vector[chosen], lift, explained, audience)
    return Recommendations("related", page, items, None, int(eligible.sum()), time.perf_counter() - started)


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


def _per_space_positions(
    index: Index, pages: np.ndarray, ordered: np.ndarray, k: int, per_space: int | None
) -> np.ndarray:
    if per_space is None:
        return ordered[:k]
    taken: dict = {}
    keep = []
    for position in ordered.tolist():
        code = int(index.space[pages[position]])
        if taken.get(code, 0) < per_space:
            taken[code] = taken.get(code, 0) + 1
            keep.append(position)
            if len(keep) == k:
                break
    return np.array(keep, dtype=np.int64)


@dataclass(frozen=True)
class _Personal:
    vector: np.ndarray
    error_bound: float


PERSONAL_EPSILON = 1e-6  # push threshold of personal and team vectors: about 50 ms at 1M pages


def _personal_vector(index: Index, restart: np.ndarray, epsilon: float = PERSONAL_EPSILON) -> _Personal:
    """Personalised PageRank of a restart distribution: the index's basis plus push for the rest."""
    check_real("epsilon", epsilon)
    if not 0 < epsilon < 1:
        raise ValueError(f"epsilon must lie in (0, 1); got {epsilon!r}")
    if index.basis is not None:
        found = index.basis.personalized(index.transition, restart, epsilon=epsilon)
        return _Personal(found.vector, found.error_bound)
    pages = np.flatnonzero(restart)
    result = push(
        index.transition,
        dict(zip(pages.tolist(), restart[pages].tolist(), strict=True)),
        damping=index.manifest.damping,
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
    epsilon: float = PERSONAL_EPSILON,
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
    audience = _Audience(visible=visible, read=reader.restart > 0, personal=True)
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
    epsilon: float = PERSONAL_EPSILON,
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
    audience = _Audience(visible=team.visible, read_by=team.read_by)
    items = _items(index, chosen, personal.vector[chosen], lift, explained, audience)
    return Recommendations(
        "landing", team.name, items, personal.error_bound, int(eligible.sum()), time.perf_counter() - started
    )


# -- comparing with an earlier export ---------------------------------------------------------------
def read_previous(path: str | Path) -> tuple[str, ...]:
    """Pages of an earlier JSON export (a list of objects with ``page``; rows marked "left" skipped)."""
    try:
        rows = json.loads(Path(path).read_text(encoding="utf-8"))
    except (OSError, ValueError) as error:
        raise InputError(str(path), None, f"not a readable JSON export: {error}") from None
    if not isinstance(rows, list) or not all(isinstance(row, dict) and "page" in row for row in rows):
        raise InputError(str(path), None, "expected a JSON list of objects with a 'page' field")
    return tuple(str(row["page"]) for row in rows if row.get("change") != "left")


def changes_since(result: Recommendations, previous) -> tuple[frozenset[str], tuple[str, ...]]:
    """Pages that entered the list (not in ``previous``) and pages that left it (in previous order).

    >>> items = tuple(Item(p, p, None, 1.0, 1.0, "") for p in ("a", "b"))
    >>> entered, left = changes_since(Recommendations("landing", "t", items, None, 2, 0.0), ["b", "c"])
    >>> sorted(entered), left
    (['a'], ('c',))
    """
    before = list(dict.fromkeys(previous))
    now = [item.page for item in result.items]
    return frozenset(set(now) - set(before)), tuple(page for page in before if page not in set(now))

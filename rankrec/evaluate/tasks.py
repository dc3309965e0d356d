"""What an evaluation task holds, and what every split shares.

A :class:`Split` (made by :mod:`rankrec.evaluate.splits`) carries the training :class:`Views`, the
:class:`Queries` a model answers, the held-out pages each query should find and the settings. Shared by every
split: the validation and order of raw views (user, then time), the session rule (:func:`session_numbers`),
the pages no method may list for a query (:func:`excluded_pages`, from :func:`training_pages`) and
:func:`assert_no_leakage`, which checks the leakage rules stated in :mod:`rankrec.evaluate.splits`.
"""

from __future__ import annotations

from dataclasses import dataclass
from types import MappingProxyType

import numpy as np
import scipy.sparse as sp

from .._validation import check_count, check_positive
from ..configuration import SESSION_GAP_SECONDS


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
    """One evaluation task. See :mod:`rankrec.evaluate.splits` for the leakage rules.

    Attributes
    ----------
    name : {"temporal", "last-n", "sessions", "links", "editorial"}
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
    links : scipy.sparse.csr_array or None
        The link matrix every method may use, when the task hides links (held-out links); None: the wiki's.
    chrome : scipy.sparse.csr_array or None
        Links judged page chrome, never hidden and never a target (held-out links: the validation split
        carved from the training part follows the same rule).
    reserve : scipy.sparse.csr_array or None
        Editorial blocks: the curated links of the pages kept out of the test queries, which the validation
        split hides (:func:`rankrec.evaluate.links.editorial_validation`).
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
    links: sp.csr_array | None = None
    chrome: sp.csr_array | None = None
    reserve: sp.csr_array | None = None

    @property
    def size(self) -> int:
        return self.train.size

    @property
    def task(self) -> str:
        """``"sessions"`` (queries carry prefix pages: sessions, held-out links, editorial blocks) or
        ``"users"``."""
        return "sessions" if self.name in ("sessions", "links", "editorial") else "users"

    @property
    def new_only(self) -> bool:
        return bool(self.settings.get("new_only", False))


# --------------------------------------------------------------------------------------------- views


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

    Session tasks: the query's prefix pages. Tasks that hide links (``split.links``: held-out links,
    editorial blocks): also the links the query page keeps, which its reader already has in front of
    them, as a user task leaves out what the user read (the "filtered" setting of link-prediction
    evaluation, common practice); a list spends no place on them, whatever the method. User tasks
    with ``new_only``: the pages the user viewed in training. User tasks without it: nothing.
    """
    queries = len(split.queries)
    if split.task == "sessions":
        prefix = split.queries.pages
        rows = np.repeat(np.arange(queries), prefix.shape[1])
        flat = prefix.ravel()
        matrix = sp.csr_array(
            (np.ones(int((flat >= 0).sum())), (rows[flat >= 0], flat[flat >= 0])), shape=(queries, split.size)
        )
        if split.links is not None and queries:
            kept = sp.csr_array(split.links)[prefix[:, 0]]
            ones = sp.csr_array((np.ones(kept.nnz), kept.indices, kept.indptr), shape=kept.shape)
            matrix = sp.csr_array(matrix + ones)
        matrix.sum_duplicates()
        matrix.data[:] = 1.0
    elif split.new_only:
        matrix = training_pages(split)
    else:
        matrix = sp.csr_array((queries, split.size), dtype=np.float64)
    matrix.sort_indices()
    return matrix


def assert_no_leakage(split: Split) -> None:
    """Raise ValueError when the split breaks its leakage rules (see :mod:`rankrec.evaluate.splits`).

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

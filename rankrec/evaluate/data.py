"""What an evaluation reads from a store: its links, views, spaces and teams in page numbers
(:class:`EvaluationData`, :func:`load_data`, one snapshot, what a build reads)."""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path

import numpy as np
import scipy.sparse as sp

from ..derive import chrome_in_share, site_hubs
from ..errors import InputError
from ..evidence import Evidence, read_evidence
from ..store import Store


@dataclass(frozen=True, eq=False)
class EvaluationData:
    """A store's links and views in page numbers: everything an evaluation reads from it.

    ``users`` are the store's user row ids (codes), ``teams[user]`` a team code or -1, ``space`` each
    page's space code (``space_names``; pages without a space share the code of ``"(none)"``).
    """

    store: str
    pages: np.ndarray
    adjacency: sp.csr_matrix
    users: np.ndarray
    viewed: np.ndarray
    times: np.ndarray
    space: np.ndarray
    space_names: tuple[str, ...]
    teams: np.ndarray | None
    team_names: tuple[str, ...]
    fingerprint: str
    counts: dict = field(default_factory=dict)
    evidence: Evidence | None = None  # the store as a build reads it (rankrec's lists are built from it)

    @property
    def size(self) -> int:
        return int(self.pages.size)

    @cached_property
    def hubs(self) -> np.ndarray:
        """Site hubs and chrome pages (:func:`rankrec.derive.site_hubs`, what serving keeps out of the
        first ``hub_free_top`` places of a related list), for the ``hub_in_top_3`` figure."""
        chrome = chrome_in_share(self.evidence) if self.evidence is not None else np.zeros(self.size)
        return site_hubs(self.adjacency, chrome)


def _fingerprint(graph_fingerprint: str, users, viewed, times, teams) -> str:
    """The graph's own fingerprint (pages and links, already hashed by load_graph) and the views."""
    digest = hashlib.sha256(graph_fingerprint.encode())
    for array in (users, viewed, times):
        digest.update(np.ascontiguousarray(array).tobytes())
    if teams is not None:
        digest.update(np.ascontiguousarray(teams).tobytes())
    return digest.hexdigest()[:16]


def load_data(store: Store, *, topics: str = "spaces") -> EvaluationData:
    """Read ``store`` for an evaluation (:func:`rankrec.build.read_evidence`: one snapshot, what a build
    reads); InputError when it holds fewer than two pages. A store without views can still be evaluated
    on held-out links (:func:`make_split` says so for the other tasks)."""
    evidence = read_evidence(store, topics=topics)
    graph, views = evidence.graph, evidence.views
    inside = views.pages >= 0
    names = ["(none)" if code < 0 else evidence.space_names[code] for code in evidence.space_codes.tolist()]
    space_names, space = np.unique(np.array(names, dtype=object), return_inverse=True)
    teams, team_names = None, tuple(evidence.teams)
    users, dense, times = views.users[inside], views.pages[inside], views.times[inside]
    if team_names:
        members = [(int(user), name) for name in team_names for user in evidence.teams[name]]
        top = max(int(users.max(initial=0)), max(user for user, _ in members))
        teams = np.full(top + 1, -1, dtype=np.int64)
        for user, name in reversed(members):  # a member of several teams counts in the first by name
            teams[user] = team_names.index(name)
    adjacency = sp.csr_matrix(graph.adjacency)
    counts = {
        "pages": graph.size,
        "links": int(adjacency.nnz),
        "views": int(inside.sum()),
        "views_outside_the_graph": int((~inside).sum()),
        "users": int(np.unique(users).size),
        "spaces": len(space_names),
        "teams": len(team_names),
    }
    return EvaluationData(
        store=str(store.path),
        pages=graph.pages,
        adjacency=adjacency,
        users=users,
        viewed=dense,
        times=times,
        space=space.astype(np.int64).ravel(),
        space_names=tuple(map(str, space_names)),
        teams=teams,
        team_names=team_names,
        fingerprint=_fingerprint(graph.fingerprint, users, dense, times, teams),
        counts=counts,
        evidence=evidence,
    )


def open_store(path: str | Path) -> Store:
    """The store at ``path`` (InputError when there is no such file: evaluation never creates one)."""
    if not Path(path).is_file():
        raise InputError(str(path), None, "no wiki store here; create one with `rankrec import`")
    return Store(path, create=False)

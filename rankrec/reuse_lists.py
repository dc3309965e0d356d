"""What a rebuild takes over from the index it replaces besides the text: the learnt ranker, and the
related lists that the changes since cannot have moved beyond the list's own error bound.

A related list is its seed's personalised PageRank vector, ranked. The pages whose transition rows
changed since the earlier index (links edited, readers' moves, pages added or gone) move seed ``s``'s
vector by at most ``α / (1 − α) · Σ_u π′_s(u) ‖P′_u − P_u‖₁`` in L1
(:func:`rankrec.pagerank.change_bound` weighted by :func:`rankrec.pagerank.row_changes`, one reverse
push for every seed at once). A list is taken over when those bounds, summed over the rebuilds since it
was computed (its drift, kept per list in ``related_drift.npy``), stay within the L1 error its own vector
was computed with (the push's residual mass, kept in ``related_error.npy``; the power iteration's
``tol · α / (1 − α)``), so a taken-over vector is within twice the error a fresh push may have. A list is
also computed afresh when anything else its seed's candidates are drawn from changed: the seed's in-links,
its text neighbours (a cosine moved by more than :data:`SIMILARITY_TOLERANCE`), its co-visited pages or
successors, its space, tags or archived state, a page of its list that is gone, archived or moved to
another space or tags, and every list when, with a ranker, pages' views or sessions changed (new reading
history: the most-read pages are candidates of every list).

What a taken-over list does not follow: the small moves of the candidates' global inputs (global PageRank,
in-link counts, views) that every list reads; its scores keep the values of the build that made it. The
ranker is taken over while the pages whose rows changed since it was trained stay within
:data:`RETRAIN_SHARE` of the wiki; past that it is trained again and every list computed afresh.
``rankrec build --full`` computes everything.
"""

from __future__ import annotations

import json
import shutil
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import scipy.sparse as sp

from ._arrays import load_array, load_csr, load_strings
from .errors import InputError
from .index import INDEX_FORMAT, PAGES_READ, READING, load_transition
from .pagerank import change_bound, changed_pages, row_changes
from .ranker.features import popular_pages
from .ranker.model import load_ranker
from .reuse import link_files
from .text import load_text_neighbours

UNREADABLE = (OSError, ValueError, InputError)  # an earlier index changed or went away meanwhile
RETRAIN_SHARE = 0.05  # pages whose rows changed since the ranker was trained, as a share of the wiki
SIMILARITY_TOLERANCE = 1e-2  # a text or reading neighbour's value moved by more than this: the row changed
REACH_EPSILON = 1e-4  # the reverse push's threshold: its bound is at most 2α/(1−α)·1e-4 above the exact one


@dataclass(frozen=True, eq=False)
class Earlier:
    """The index a build replaces, when its lists can be taken over: its folder, manifest and the page
    numbering between the two (``new_of_old``, ``old_of_new``; -1 where a page is on one side only)."""

    folder: Path
    manifest: dict
    new_of_old: np.ndarray
    old_of_new: np.ndarray

    @property
    def size(self) -> int:
        return int(self.new_of_old.size)

    @property
    def name(self) -> str:
        return self.folder.name

    def matrix(self, name: str):
        """The earlier index's square CSR array ``name``, or None when it has none."""
        if not (self.folder / f"{name}.data.npy").exists():
            return None
        return load_csr(self.folder, name, (self.size, self.size))

    def array(self, name: str):
        return load_array(self.folder, name) if (self.folder / f"{name}.npy").exists() else None


def _numbering(old_ids: list[str], new_ids) -> tuple[np.ndarray, np.ndarray]:
    """(new number of each old page, old number of each new page), -1 where a page is on one side only."""
    where = {page: number for number, page in enumerate(np.asarray(new_ids).tolist())}
    new_of_old = np.fromiter((where.get(page, -1) for page in old_ids), dtype=np.int64, count=len(old_ids))
    old_of_new = np.full(len(where), -1, dtype=np.int64)
    found = new_of_old >= 0
    old_of_new[new_of_old[found]] = np.flatnonzero(found)
    return new_of_old, old_of_new


def earlier_index(target: Path | None, evidence, store_id, configuration, k_related: int, method: str):
    """(:class:`Earlier`, "") when the index at ``target`` was built from the store ``store_id`` with the
    same settings and keeps its lists' error bounds, else (None, why not)."""
    if target is None:
        return None, "a full build was asked for"
    try:
        manifest = json.loads((target / "manifest.json").read_text())
        names = json.loads((target / "names.json").read_text())
    except (OSError, ValueError):
        return None, "no earlier index to take over from"
    folder = target.resolve()
    checks = (
        (manifest.get("format_version") == INDEX_FORMAT, "the earlier index has another format"),
        (manifest.get("store_id") == store_id, "the earlier index was built from another store"),
        (
            manifest.get("configuration") == json.loads(json.dumps(configuration.to_dict())),
            "the settings changed",
        ),
        (manifest.get("k_related") == k_related, "the number of candidates kept changed"),
        (manifest.get("precompute", {}).get("method") == method, "the precompute method changed"),
        (
            (folder / "related_error.npy").exists() and (folder / "related_drift.npy").exists(),
            "the earlier index keeps no error bounds of its lists",
        ),
        (
            names.get("spaces") == evidence.space_names and names.get("tags") == evidence.tag_names,
            "the spaces or tags changed",
        ),
    )
    for holds, reason in checks:
        if not holds:
            return None, reason
    table = load_strings(folder, "pages")
    new_of_old, old_of_new = _numbering([table[i] for i in range(len(table))], evidence.graph.pages)
    return Earlier(folder, manifest, new_of_old, old_of_new), ""


def _rows_moved(earlier: Earlier, old_matrix, new_matrix, tol: float = SIMILARITY_TOLERANCE) -> np.ndarray:
    """Per new page, whether its row of a square page × page matrix changed (no matrix on either side:
    none changed; on one side only: all)."""
    size = earlier.old_of_new.size
    if old_matrix is None or new_matrix is None:
        return np.full(size, (old_matrix is None) != (new_matrix is None))
    return changed_pages(old_matrix, new_matrix, earlier.new_of_old, tol=tol)[0]


def _pages_changed(earlier: Earlier, evidence) -> np.ndarray:
    """Per new page: new, or its archived state, space or tags changed."""
    there = earlier.old_of_new >= 0
    mapped = earlier.old_of_new[there]
    same = np.zeros(evidence.size, dtype=bool)
    same[there] = (np.asarray(load_array(earlier.folder, "archived"))[mapped] == evidence.archived[there]) & (
        np.asarray(load_array(earlier.folder, "space"))[mapped] == evidence.space_codes[there]
    )
    tags = evidence.tag_incidence
    if tags is not None:
        old = load_csr(earlier.folder, "page_tags", (earlier.size, tags.shape[1]))
        moved = sp.coo_array(sp.csr_array(tags[there]) - sp.csr_array(old[mapped]))
        same[np.flatnonzero(there)[moved.row[moved.data != 0]]] = False
    return ~same


def _reading_moved(earlier: Earlier, evidence, pages_read) -> bool:
    """Whether the ranker reads reading counts (``pages_read`` holds arrays) and a page's views or
    sessions changed. Every list's candidates include the most-read pages, so their counts move every
    list: measured on the 100,000-page synthetic wiki after a day's views (1.4% more), lists kept by the
    other rules matched lists computed afresh in 54% of their top 10s (0.98 overlap)."""
    sessions = (pages_read or (None, None))[1]
    if sessions is None:
        return False
    there = earlier.old_of_new >= 0
    for name, new in (("views", evidence.views.counts(evidence.size)), (PAGES_READ[1], sessions)):
        old = earlier.array(name)
        if old is None:
            return True
        mapped = np.zeros(evidence.size)
        mapped[there] = np.asarray(old, dtype=np.float64)[earlier.old_of_new[there]]
        if not np.array_equal(mapped, np.asarray(new, dtype=np.float64)):
            return True
    return False


def _lost_candidates(earlier: Earlier, rows: np.ndarray, flagged: np.ndarray) -> np.ndarray:
    """Per chosen page with an earlier list: a page of its list is gone, or ``flagged`` (a new page
    number; archived, or its space or tags changed: features of the candidate)."""
    lost = np.zeros(rows.size, dtype=bool)
    kept = np.flatnonzero(rows >= 0)
    pages = load_array(earlier.folder, "related_pages")
    for first in range(0, kept.size, 65_536):
        positions = kept[first : first + 65_536]
        found = np.asarray(pages[rows[positions]])
        renumbered = np.where(found >= 0, earlier.new_of_old[np.maximum(found, 0)], 0)
        gone = (found >= 0) & ((renumbered < 0) | flagged[np.maximum(renumbered, 0)])
        lost[positions] = gone.any(axis=1)
    return lost


def _pattern(matrix) -> sp.csr_array:
    """The non-zero pattern of a CSR matrix (each entry 1)."""
    matrix = sp.csr_array(matrix)
    ones = np.ones(matrix.indices.size, dtype=np.int8)
    return sp.csr_array((ones, matrix.indices, matrix.indptr), shape=matrix.shape)


@dataclass(frozen=True)
class Changes:
    """What changed since the earlier index, per page of the new one: how far its transition row moved
    (``distance``; ``rows``: it moved), and
    whether a link or reading move to it appeared or went (``linked``: a page whose in-link weights
    only moved, because a page linking to it gained or lost another link, is not counted)."""

    distance: np.ndarray  # how far each row moved, in L1 (rankrec.pagerank.row_changes)
    linked: np.ndarray

    @classmethod
    def of(cls, earlier: Earlier, transition) -> Changes:
        old = load_transition(earlier.folder, earlier.size)
        distance = row_changes(old, transition, earlier.new_of_old)
        linked = changed_pages(_pattern(old.forward), _pattern(transition.forward), earlier.new_of_old)[1]
        return cls(distance, linked)

    @property
    def rows(self) -> np.ndarray:
        return self.distance > 1e-12

    @property
    def share(self) -> float:
        return float(self.rows.mean()) if self.rows.size else 0.0


def take_over_ranker(
    earlier: Earlier | None, changes: Changes | None, staging: Path
) -> tuple[dict | None, str]:
    """Copy the earlier index's ranker into ``staging`` when the pages changed since it was trained stay
    within :data:`RETRAIN_SHARE`; return (its training summary with what was taken over, "") or (None,
    why it is trained again)."""
    if earlier is None or changes is None:
        return None, ""
    summary = dict(earlier.manifest.get("ranker") or {})
    if not summary.get("used") or not (earlier.folder / "ranker").is_dir():
        return None, "the earlier index has no learnt ranker"
    changed = float(summary.get("changed_since_training", 0.0)) + changes.share
    if changed > RETRAIN_SHARE:
        return None, f"the ranker was trained again ({changed:.1%} of the pages changed since it was trained)"
    try:
        link_files(earlier.folder / "ranker", staging / "ranker")
        if load_ranker(staging / "ranker") is None:
            raise InputError(str(earlier.folder / "ranker"), None, "no ranker.json")
    except UNREADABLE as error:  # the earlier index changed or went away meanwhile: train afresh
        shutil.rmtree(staging / "ranker", ignore_errors=True)
        return None, f"the earlier index's ranker could not be read ({error})"
    trained_in = summary.get("trained_in", earlier.name)
    taken = {"taken_over_from": earlier.name, "trained_in": trained_in, "changed_since_training": changed}
    return summary | taken, ""


@dataclass(frozen=True, eq=False)
class TakenOver:
    """The earlier lists a build copies: ``rows[i]``, the earlier row of the ``i``-th chosen page, or -1 to
    compute it, and ``drift[i]``, how far its vector may have moved since it was computed, this build's
    change included (:meth:`copy_into` is what :func:`rankrec.recommend.candidates.write_related` calls)."""

    earlier: Earlier
    rows: np.ndarray
    drift: np.ndarray

    def copy_into(self, arrays: dict) -> np.ndarray:
        """Copy the taken-over rows into ``arrays`` (renumbered, with their drift); return the positions
        left to compute."""
        kept = np.flatnonzero(self.rows >= 0)
        earlier = {
            name: load_array(self.earlier.folder, f"related_{name}") for name in arrays if name != "drift"
        }
        for first in range(0, kept.size, 65_536):  # a block at a time: the earlier files are memory-mapped
            positions = kept[first : first + 65_536]
            rows = self.rows[positions]
            for name, values in earlier.items():
                found = np.asarray(values[rows])
                if name in ("pages", "via"):
                    found = np.where(found >= 0, self.earlier.new_of_old[np.maximum(found, 0)], -1)
                arrays[name][positions] = found
            arrays["drift"][positions] = self.drift[positions]
        return np.flatnonzero(self.rows < 0)


def lists_to_take_over(
    earlier: Earlier,
    changes: Changes,
    evidence,
    transition,
    chosen,
    configuration,
    *,
    text=None,
    text_unchanged: bool = False,
    reading=None,
    pages_read=None,
) -> tuple[TakenOver, dict]:
    """Which of the ``chosen`` pages' earlier lists the build copies (the module docstring's rules), and
    how many lists each rule sent to be computed afresh. ``text_unchanged``: the text neighbours were
    taken over from the earlier index (no row to compare)."""
    size = evidence.size
    old = earlier.old_of_new[chosen]
    earlier_row = load_array(earlier.folder, "related_row")
    rows = np.where(old >= 0, np.asarray(earlier_row)[np.maximum(old, 0)], -1).astype(np.int64)
    afresh: dict[str, np.ndarray] = {"new": rows < 0}
    error = np.asarray(load_array(earlier.folder, "related_error"), dtype=np.float64)
    drift = np.asarray(load_array(earlier.folder, "related_drift"), dtype=np.float64)
    bound = change_bound(transition, changes.distance, damping=configuration.damping, epsilon=REACH_EPSILON)
    there = np.maximum(rows, 0)
    drift = np.where(rows >= 0, drift[there] + bound[chosen], 0.0)  # summed over the rebuilds since
    afresh["vector moved"] = drift > np.where(rows >= 0, error[there], 0.0)
    afresh["in-links changed"] = changes.linked[chosen]
    if not text_unchanged and (text is not None or (earlier.folder / "text").is_dir()):
        old_text = (
            load_text_neighbours(earlier.folder / "text") if (earlier.folder / "text").is_dir() else None
        )
        afresh["text neighbours changed"] = _rows_moved(
            earlier, None if old_text is None else old_text.similar, None if text is None else text.similar
        )[chosen]
    moved = np.zeros(size, dtype=bool)
    for name, matrix in zip(READING, reading or (None, None), strict=True):
        moved |= _rows_moved(earlier, earlier.matrix(name), matrix)
    afresh["reading changed"] = moved[chosen]
    changed = _pages_changed(earlier, evidence)
    afresh["page changed"] = changed[chosen]
    afresh["a listed page changed"] = _lost_candidates(earlier, rows, changed | evidence.archived)
    if _reading_moved(earlier, evidence, pages_read):
        afresh["reading history changed"] = np.ones(chosen.size, dtype=bool)
    sessions = (pages_read or (None, None))[1]
    old_sessions = earlier.array(PAGES_READ[1])
    old_popular = popular_pages(old_sessions, load_array(earlier.folder, "archived"))
    if not np.array_equal(
        np.sort(earlier.new_of_old[old_popular]), popular_pages(sessions, evidence.archived)
    ):
        afresh["most-read pages changed"] = np.ones(chosen.size, dtype=bool)
    recompute = np.zeros(chosen.size, dtype=bool)
    counts = {}
    for reason, mask in afresh.items():
        counts[reason] = int(np.count_nonzero(mask & ~recompute))
        recompute |= mask
    rows[recompute] = -1
    drift[recompute] = 0.0
    summary = {
        "from": earlier.name,
        "lists_taken_over": int(np.count_nonzero(rows >= 0)),
        "lists_computed": int(recompute.sum()),
        "computed_because": {reason: count for reason, count in counts.items() if count},
        "rows_changed": int(changes.rows.sum()),
    }
    return TakenOver(earlier, rows, drift.astype(np.float32)), summary

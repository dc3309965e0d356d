"""A cached basis of personalised PageRank vectors (topics and hubs) that combines exactly.

Basis vectors are stored in the unnormalised "leaky" form (dangling mass dropped), float32.
For any restart distribution ``r = Σ_j w_j r_j`` in their span, normalising ``Σ_j w_j x_j``
gives the strongly-preferential personalised PageRank of ``r`` (linearity, Jeh & Widom 2003);
the leaky form is what keeps it exact with dangling pages. A restart distribution partly
outside the span is split: the part on hub pages is combined from the basis, the rest is
pushed locally, and the result carries an L1 error bound.
"""

from __future__ import annotations

import json
import time
from collections.abc import Mapping
from dataclasses import asdict, dataclass, field
from datetime import UTC, datetime
from pathlib import Path

import numpy as np

from . import __version__
from ._atomic import publish_folder
from .errors import InputError, StaleBasis
from .graph import WikiGraph
from .pagerank import Transition, personalised_pagerank, push
from .pagerank._kernels import weighted_rows
from .pagerank.power import FLOAT32_TOL_FLOOR
from .progress import Progress, report

FORMAT_VERSION = 1


@dataclass(frozen=True)
class BasisManifest:
    """What a basis was computed from and how; saved beside the vectors."""

    fingerprint: str
    damping: float
    tol: float
    dangling: str
    names: tuple[str, ...]
    iterations: int
    converged: bool
    max_residual: float
    seconds: float
    created: str = field(default_factory=lambda: datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ"))
    versions: dict = field(default_factory=lambda: _versions())
    format_version: int = FORMAT_VERSION


def _versions() -> dict:
    import numba
    import scipy

    return {
        "rankrec": __version__,
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "numba": numba.__version__,
    }


@dataclass(frozen=True)
class PersonalVector:
    """A personalised PageRank vector made from the basis (and a local push for the rest).

    ``error_bound`` bounds the L1 distance to the exact strongly-preferential vector of the
    restart distribution; ``from_basis`` is the share of the restart mass the basis covered.
    """

    vector: np.ndarray
    error_bound: float
    from_basis: float
    pushes: int
    seconds: float


@dataclass(frozen=True, eq=False)
class Basis:
    """Leaky vectors ``vectors[:, j]`` for the restart distributions ``restarts[:, j]``.

    ``hubs[j]`` is the page a hub column restarts from (-1 for topic columns).
    """

    manifest: BasisManifest
    vectors: np.ndarray
    hubs: np.ndarray

    @property
    def names(self) -> tuple[str, ...]:
        return self.manifest.names

    def column(self, name: str) -> int:
        try:
            return self.names.index(name)
        except ValueError:
            raise KeyError(f"no basis vector named {name!r}") from None

    def combine(self, weights: Mapping[str, float] | np.ndarray) -> np.ndarray:
        """Exact personalised PageRank (float64, sums to 1) of a mix of basis restarts.

        ``weights`` maps basis names to non-negative weights, or is an array of shape (k,).
        """
        if isinstance(weights, Mapping):
            mix = np.zeros(len(self.names))
            for name, weight in weights.items():
                mix[self.column(name)] += weight
        else:
            mix = np.asarray(weights, dtype=np.float64)
        if mix.shape != (len(self.names),) or np.any(mix < 0) or not np.isfinite(mix).all() or mix.sum() <= 0:
            raise ValueError(
                f"weights must be {len(self.names)} non-negative numbers, not all zero; got {weights!r}"
            )
        used = np.flatnonzero(mix)
        combined = self._weighted(used, mix[used])
        return combined / combined.sum()

    def _weighted(self, columns: np.ndarray, weights: np.ndarray) -> np.ndarray:
        """``Σ_j weights[j] · vectors[:, columns[j]]`` in float64 (each column read once when the
        vectors are stored column by column, as :func:`save_basis` writes them)."""
        out = np.empty(self.vectors.shape[0])
        rows = np.asarray(self.vectors).T  # a view: one row per column of the basis
        weighted_rows(rows, np.asarray(columns, dtype=np.int64), np.asarray(weights, dtype=np.float64), out)
        return out

    def hub_columns(self, pages: np.ndarray) -> np.ndarray:
        """The basis column that restarts from each of ``pages`` (-1 for a page that is not a hub)."""
        hubs = np.flatnonzero(self.hubs >= 0)
        order = hubs[np.argsort(self.hubs[hubs], kind="stable")]
        sorted_pages = self.hubs[order]
        at = np.minimum(np.searchsorted(sorted_pages, pages), max(sorted_pages.size - 1, 0))
        found = sorted_pages[at] == pages if sorted_pages.size else np.zeros(len(pages), bool)
        return np.where(found, order[at] if order.size else -1, -1)

    def personalised(
        self, transition: Transition, restart: np.ndarray, *, epsilon: float = 1e-7
    ) -> PersonalVector:
        """Personalised PageRank of any restart distribution: hub part from the basis, rest pushed.

        Only the restart's non-zero pages are looked at; the vector is built in a few passes over
        the pages (the weighted basis columns, the pushed part added where it lies, one scaling).
        """
        started = time.perf_counter()
        restart = np.asarray(restart, dtype=np.float64)
        if restart.shape != (transition.n,):
            raise ValueError(f"restart must be a non-negative vector of length {transition.n}, not all zero")
        pages = np.flatnonzero(restart != 0)  # a boolean mask: 5x faster than a float array
        weights = restart[pages]
        if np.any(weights < 0) or not np.isfinite(weights).all() or weights.sum() <= 0:
            raise ValueError(f"restart must be a non-negative vector of length {transition.n}, not all zero")
        weights = weights / weights.sum()
        columns = self.hub_columns(pages)
        on_hub = columns >= 0
        hub_weights = weights[on_hub]
        damping = self.manifest.damping
        # a leaky vector of tolerance tol is within tol·α/(1−α) (L1) of the exact one (geometric series)
        tolerance = self.manifest.tol * damping / (1.0 - damping)
        error = 0.0
        if hub_weights.size:
            leaky = self._weighted(columns[on_hub], hub_weights)
            error += float(hub_weights.sum()) * (tolerance + 1e-6)  # 1e-6: float32 storage
        else:
            leaky = np.zeros(transition.n)
        pushes = 0
        rest_mass = float(weights[~on_hub].sum())
        if rest_mass > 1e-15:
            touched, values, bound, pushes = _leaky_push(
                transition, pages[~on_hub], weights[~on_hub] / rest_mass, damping, epsilon
            )
            leaky[touched] += rest_mass * values  # touched pages are distinct
            error += rest_mass * bound
        total = float(leaky.sum())
        leaky /= total
        # ‖a/‖a‖ − b/‖b‖‖₁ ≤ 2‖a − b‖₁ / ‖a‖₁ for the exact leaky vector a and this estimate b
        return PersonalVector(
            vector=leaky,
            error_bound=min(2.0, 2.0 * error / total),
            from_basis=float(hub_weights.sum()),
            pushes=pushes,
            seconds=time.perf_counter() - started,
        )


def _leaky_push(
    transition: Transition, pages: np.ndarray, weights: np.ndarray, damping: float, epsilon: float
):
    """Leaky vector of a seed distribution (``weights`` on ``pages``) from a forward push, with an L1
    error bound: ``(touched pages, values there, bound, pushes)``.

    The push approximates the strongly-preferential vector ``x`` of the seeds (``p ≤ x``,
    ``‖x − p‖₁ = ρ``, the residual mass). The leaky vector is ``c·x`` with
    ``c = (1 − α) / (1 − α + α·dᵀx)`` (sum the two fixed-point equations), and ``dᵀx`` lies in
    ``[dᵀp, dᵀp + ρ]``, so ``ĉ·p`` with ``ĉ`` at ``dᵀp`` is within ``(ĉ − c_low) + ĉ·ρ``.
    """
    result = push(
        transition, dict(zip(pages.tolist(), weights.tolist(), strict=True)), damping=damping, epsilon=epsilon
    )
    touched = np.asarray(result.vector.coords[0])
    estimate = result.vector.data
    residual = result.residual_mass
    on_dangling = float(estimate[transition.dangling[touched]].sum())
    scale_high = (1.0 - damping) / (1.0 - damping + damping * on_dangling)
    scale_low = (1.0 - damping) / (1.0 - damping + damping * min(1.0, on_dangling + residual))
    return touched, scale_high * estimate, (scale_high - scale_low) + scale_high * residual, result.pushes


def build_basis(
    graph: WikiGraph,
    transition: Transition,
    topics: Mapping[str, np.ndarray],
    hubs: np.ndarray,
    *,
    damping: float = 0.85,
    tol: float = 1e-6,
    block: int = 32,
    dtype: type | None = None,
    workers: int = 1,
    progress: Progress | None = None,
) -> Basis:
    """Leaky vectors for each topic (restart uniform over its pages) and each hub page.

    Columns are solved ``block`` at a time by one block power iteration each (memory stays at
    a few blocks of n float32 columns); ``progress("basis", done, total)`` is called after each block.
    Arithmetic is float32 (``dtype`` None) unless ``tol`` is below float32's floor; vectors are
    stored as float32 either way.
    """
    if dtype is None:
        dtype = np.float32 if tol >= FLOAT32_TOL_FLOOR else np.float64
    names = [*topics, *(f"hub:{graph.pages[page]}" for page in hubs)]
    total = len(names)
    if total == 0:
        raise ValueError("a basis needs at least one topic or hub; got none")
    hub_of = np.concatenate([np.full(len(topics), -1, dtype=np.int64), np.asarray(hubs, dtype=np.int64)])
    members = [*topics.values(), *([page] for page in hubs)]
    vectors = np.empty((graph.size, total), dtype=np.float32, order="F")  # column by column
    started = time.perf_counter()
    iterations, converged, residual = 0, True, 0.0
    for first in range(0, total, block):
        columns = range(first, min(first + block, total))
        restart = np.zeros((graph.size, len(columns)))
        for offset, column in enumerate(columns):
            pages = np.asarray(members[column], dtype=np.int64)
            restart[pages, offset] = 1.0 / pages.size
        result = personalised_pagerank(
            transition, restart, damping=damping, tol=tol, leaky=True, dtype=dtype, workers=workers
        )
        vectors[:, first : first + len(columns)] = result.vectors
        iterations = max(iterations, result.iterations)
        converged &= result.converged
        residual = max(residual, float(result.residuals.max()))
        report(progress, "basis", first + len(columns), total)
    manifest = BasisManifest(
        fingerprint=graph.fingerprint,
        damping=damping,
        tol=tol,
        dangling="restart",
        names=tuple(names),
        iterations=iterations,
        converged=bool(converged),
        max_residual=residual,
        seconds=time.perf_counter() - started,
    )
    return Basis(manifest=manifest, vectors=vectors, hubs=hub_of)


def save_basis(basis: Basis, folder: str | Path) -> Path:
    """Write the basis into ``folder`` (replaced as a whole, atomically)."""

    def write(staging: Path) -> None:
        # column by column (Fortran order): a combination reads each chosen vector once, in order
        np.save(staging / "vectors.npy", np.asfortranarray(basis.vectors, dtype=np.float32))
        np.save(staging / "hubs.npy", basis.hubs)
        (staging / "manifest.json").write_text(json.dumps(asdict(basis.manifest), indent=2) + "\n")

    return publish_folder(Path(folder), write)


def load_basis(folder: str | Path, graph: WikiGraph | None = None) -> Basis:
    """Memory-map a saved basis; with ``graph``, refuse one built for another graph (StaleBasis)."""
    folder = Path(folder)
    try:
        raw = json.loads((folder / "manifest.json").read_text())
        raw["names"] = tuple(raw["names"])
        manifest = BasisManifest(**raw)
        vectors = np.load(folder / "vectors.npy", mmap_mode="r")
        hubs = np.load(folder / "hubs.npy")
    except (OSError, ValueError, TypeError, KeyError) as error:
        raise InputError(str(folder), None, f"not a readable basis: {error}") from None
    if manifest.format_version != FORMAT_VERSION:
        raise InputError(
            str(folder), None, f"basis format {manifest.format_version}, expected {FORMAT_VERSION}"
        )
    if vectors.shape[1] != len(manifest.names) or hubs.shape != (len(manifest.names),):
        raise InputError(str(folder), None, "basis files disagree with its manifest")
    if graph is not None and manifest.fingerprint != graph.fingerprint:
        raise StaleBasis(expected=graph.fingerprint, found=manifest.fingerprint)
    return Basis(manifest=manifest, vectors=vectors, hubs=hubs)

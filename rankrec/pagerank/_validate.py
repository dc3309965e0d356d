"""Eager input checks shared by the solvers: every message names the parameter and shows the value."""

from __future__ import annotations

import numbers
from collections.abc import Mapping

import numpy as np
import scipy.sparse as sp

DANGLING_POLICIES = ("restart", "uniform")
DTYPES = (np.float32, np.float64)


def check_adjacency(adjacency: object) -> sp.csr_array:
    """Any scipy sparse square matrix of finite non-negative weights, as a canonical float64 CSR array."""
    if not sp.issparse(adjacency):
        raise TypeError(f"adjacency must be a scipy sparse matrix or array, got {type(adjacency).__name__!r}")
    if adjacency.ndim != 2 or adjacency.shape[0] != adjacency.shape[1]:
        raise ValueError(f"adjacency must be square, got shape {adjacency.shape!r}")
    if adjacency.dtype.kind not in "biuf":
        raise TypeError(f"adjacency must hold real weights, got dtype {adjacency.dtype!r}")
    matrix = sp.csr_array(adjacency, dtype=np.float64, copy=True)
    matrix.sum_duplicates()
    if not np.all(np.isfinite(matrix.data)):
        bad = _first(matrix.data, ~np.isfinite(matrix.data))
        raise ValueError(f"adjacency must hold finite weights, got {bad}")
    if np.any(matrix.data < 0):
        bad = _first(matrix.data, matrix.data < 0)
        raise ValueError(f"adjacency must hold non-negative weights, got {bad}")
    matrix.eliminate_zeros()
    matrix.sort_indices()
    return matrix


def _first(values: np.ndarray, mask: np.ndarray) -> str:
    return repr(float(values[np.flatnonzero(mask)[0]]))


def check_restart(restart: object, n: int, name: str = "restart") -> np.ndarray:
    """Restart distribution(s) as a new float64 array of shape (n,) or (n, k), each column summing to 1.

    ``None`` means uniform; a mapping ``{page index: weight}`` gives one column.
    """
    if restart is None:
        return np.full(n, 1.0 / n)
    if isinstance(restart, Mapping):
        restart = _from_mapping(restart, n, name)
    elif sp.issparse(restart):
        restart = restart.toarray()
    try:
        values = np.array(restart, dtype=np.float64, copy=True)
    except (TypeError, ValueError) as error:
        raise TypeError(f"{name} must be an array of weights, got {_short(restart)}") from error
    if values.ndim not in (1, 2) or values.shape[0] != n:
        raise ValueError(f"{name} must have shape ({n},) or ({n}, k), got shape {values.shape!r}")
    if values.ndim == 2 and values.shape[1] == 0:
        raise ValueError(f"{name} must have at least one column, got shape {values.shape!r}")
    if not np.all(np.isfinite(values)):
        raise ValueError(f"{name} must be finite, got {_short(restart)}")
    if np.any(values < 0):
        raise ValueError(f"{name} must be non-negative, got {_short(restart)}")
    totals = values.sum(axis=0)
    if np.any(totals <= 0):
        column = int(np.flatnonzero(np.atleast_1d(totals) <= 0)[0])
        where = "" if values.ndim == 1 else f" (column {column})"
        raise ValueError(
            f"{name} must not be all zero{where}, got {_short(restart)} of shape {values.shape!r}"
        )
    values /= totals
    return values


def _from_mapping(weights: Mapping, n: int, name: str) -> np.ndarray:
    values = np.zeros(n)
    for index, weight in weights.items():
        position = check_index(index, n, name)
        values[position] += weight
    return values


def check_index(index: object, n: int, name: str) -> int:
    """A page index in range(n)."""
    if isinstance(index, bool) or not isinstance(index, numbers.Integral):
        raise TypeError(f"{name} keys must be integer page indices, got {index!r}")
    if not 0 <= int(index) < n:
        raise ValueError(f"{name} index {index!r} is outside the graph's {n} pages")
    return int(index)


def check_seeds(seeds: object, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Seed pages and normalised weights from an index, a mapping {index: weight} or an array of indices."""
    if isinstance(seeds, numbers.Integral) and not isinstance(seeds, bool):
        return np.array([check_index(seeds, n, "seeds")], dtype=np.int64), np.ones(1)
    if isinstance(seeds, Mapping):
        pairs = {check_index(index, n, "seeds"): weight for index, weight in seeds.items()}
        indices = np.fromiter(pairs.keys(), dtype=np.int64, count=len(pairs))
        weights = np.fromiter((float(w) for w in pairs.values()), dtype=np.float64, count=len(pairs))
    else:
        array = np.asarray(seeds)
        if array.ndim != 1 or array.dtype.kind not in "iu":
            raise TypeError(
                f"seeds must be a page index, a mapping {{index: weight}} or a 1-d array of indices, "
                f"got {_short(seeds)}"
            )
        for index in array.tolist():
            check_index(index, n, "seeds")
        indices, counts = np.unique(array.astype(np.int64), return_counts=True)
        weights = counts.astype(np.float64)
    if indices.size == 0:
        raise ValueError(f"seeds must name at least one page, got {seeds!r}")
    if not np.all(np.isfinite(weights)) or np.any(weights < 0) or weights.sum() <= 0:
        raise ValueError(f"seeds weights must be finite, non-negative and not all zero, got {seeds!r}")
    keep = weights > 0
    return indices[keep], weights[keep] / weights[keep].sum()


def check_damping(damping: object) -> float:
    if isinstance(damping, bool) or not isinstance(damping, numbers.Real):
        raise TypeError(f"damping must be a real number, got {damping!r}")
    if not 0.0 < float(damping) < 1.0:
        raise ValueError(f"damping must lie strictly between 0 and 1, got {damping!r}")
    return float(damping)


def check_positive(value: object, name: str) -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise TypeError(f"{name} must be a real number, got {value!r}")
    if not (np.isfinite(value) and value > 0):
        raise ValueError(f"{name} must be a positive finite number, got {value!r}")
    return float(value)


def check_count(value: object, name: str, *, minimum: int = 1) -> int:
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise TypeError(f"{name} must be an integer, got {value!r}")
    if value < minimum:
        raise ValueError(f"{name} must be at least {minimum}, got {value!r}")
    return int(value)


def check_dangling(dangling: object) -> str:
    if dangling not in DANGLING_POLICIES:
        raise ValueError(f"dangling must be one of {DANGLING_POLICIES!r}, got {dangling!r}")
    return str(dangling)


def check_dtype(dtype: object) -> type:
    try:
        resolved = np.dtype(dtype).type
    except TypeError as error:
        raise TypeError(f"dtype must be float32 or float64, got {dtype!r}") from error
    if resolved not in DTYPES:
        raise ValueError(f"dtype must be float32 or float64, got {dtype!r}")
    return resolved


def _short(value: object) -> str:
    text = repr(value)
    return text if len(text) <= 80 else text[:77] + "..."

"""Arrays of an index folder on disk: strings as one UTF-8 blob with offsets, CSR matrices as their three
arrays, and every array memory-mapped when read (:mod:`rankrec.index` lays the folder out)."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import scipy.sparse as sp


def save_strings(folder: Path, name: str, values) -> None:
    encoded = [str(value).encode() for value in values]
    lengths = np.fromiter((len(item) for item in encoded), dtype=np.int64, count=len(encoded))
    np.save(folder / f"{name}.offsets.npy", np.concatenate([[0], np.cumsum(lengths)]).astype(np.int64))
    np.save(folder / f"{name}.bytes.npy", np.frombuffer(b"".join(encoded), dtype=np.uint8))


@dataclass(frozen=True, eq=False)
class StringTable:
    """Strings stored as one UTF-8 blob with offsets (memory-mapped); ``table[i]`` decodes one.

    >>> table = StringTable(np.frombuffer("abé".encode(), dtype=np.uint8), np.array([0, 2, 4]))
    >>> len(table), table[0], table[1]
    (2, 'ab', 'é')
    """

    blob: np.ndarray
    offsets: np.ndarray
    # memoryviews of the same memory: indexing one gives a Python int or a slice without making
    # numpy scalars or views, several times cheaper per string (lookups read some hundred a request)
    _bytes: memoryview = field(init=False, repr=False)
    _starts: memoryview = field(init=False, repr=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "_bytes", memoryview(np.ascontiguousarray(self.blob, dtype=np.uint8)))
        object.__setattr__(self, "_starts", memoryview(np.ascontiguousarray(self.offsets, dtype=np.int64)))

    def __len__(self) -> int:
        return int(self.offsets.size - 1)

    def __getitem__(self, index: int) -> str:
        return str(self._bytes[self._starts[index] : self._starts[index + 1]], "utf-8")


def load_strings(folder: Path, name: str) -> StringTable:
    return StringTable(load_array(folder, f"{name}.bytes"), load_array(folder, f"{name}.offsets"))


def save_csr(folder: Path, name: str, matrix) -> None:
    for part in ("indptr", "indices", "data"):
        np.save(folder / f"{name}.{part}.npy", np.asarray(getattr(matrix, part)))


def load_csr(folder: Path, name: str, shape: tuple[int, int]) -> sp.csr_array:
    parts = [load_array(folder, f"{name}.{part}") for part in ("data", "indices", "indptr")]
    return sp.csr_array(tuple(parts), shape=shape)


def load_array(folder: Path, name: str) -> np.ndarray:
    """Memory-map one array, as a plain ndarray view of the mapping (no copy).

    Element reads from an ``np.memmap`` go through its subclass hooks and cost several times
    those of a plain ndarray; the view keeps the mapping alive through its ``base``.
    """
    return np.asarray(np.load(folder / f"{name}.npy", mmap_mode="r"))

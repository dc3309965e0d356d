"""The page vectors of :mod:`rankrec.text`, built from text read once, a batch of pages at a time.

For each field (titles and headings; main text) the result is what scikit-learn's
``TfidfVectorizer(token_pattern=TOKEN_PATTERN, sublinear_tf=True, min_df=..., max_df=...,
max_features=..., dtype=float32)`` gives on all the pages at once, without holding all their text:

1. each batch of pages is counted by scikit-learn's ``CountVectorizer`` (lower-cased), cut into
   every run of letters and digits (:func:`runs`, the plain pattern :data:`RUNS`). A word of
   ``TOKEN_PATTERN`` is such a run with at least two letters, so the runs that are not words are
   dropped from the vocabulary at the end instead of token by token: the counts of the words are the
   same, and cutting text into runs is cheaper (under half the time, measured) than the pattern;
2. the batches' vocabularies are merged (a word keeps one number), with each word's page count
   and total count;
3. the vocabulary bounds are scikit-learn's (``CountVectorizer._limit_features``: words on fewer
   than ``min_df`` or more than ``max_df`` of the pages go, then the ``max_features`` most frequent
   stay), and the kept words are numbered in alphabetical order, as scikit-learn numbers them;
4. the counts, remapped, fill one matrix of both fields (titles' columns first), and scikit-learn's
   ``TfidfTransformer(sublinear_tf=True, norm=None)`` weighs it: its idf is per column, so it is each
   field's own; each field's part of a row is then scaled to unit length, as ``norm="l2"`` scales a
   field's rows, and weighed and normalised as :mod:`rankrec.text` says.

Memory: the batches' counts (8 bytes an entry: float32 count, int32 word) until they are copied
into the matrix, which frees them as it fills; then the matrix alone (8 bytes an entry). Once the
counts held exceed :data:`SPILL_ENTRIES`, they go to files in a temporary folder (``tempfile``'s:
``TMPDIR`` chooses it; 8 bytes an entry of disk, about 1.4 GB for a million pages of 300 words) and
are read back one batch at a time, so the counts and the matrix are never in memory together.
"""

from __future__ import annotations

import contextlib
import itertools
import re
import tempfile
from collections.abc import Iterable
from pathlib import Path

import numpy as np
import scipy.sparse as sp
from sklearn.feature_extraction.text import CountVectorizer, TfidfTransformer
from sklearn.preprocessing import normalize

from ._ascii_counts import count_ascii
from ._memory import release_memory
from ._pool import in_order

TOKEN_PATTERN = r"(?u)(?<![^\W_])(?=(?:[^\W_]*?[^\W\d_]){2})[^\W_]+(?![^\W_])"
"""Runs of letters and digits (``_`` and punctuation split them) that hold at least two letters."""
RUNS = r"(?u)[^\W_]+"
"""Every run of letters and digits: the words of ``TOKEN_PATTERN`` and the runs with under two letters."""
_WORD = re.compile(TOKEN_PATTERN)
_RUNS = re.compile(RUNS)
_SEPARATORS = str.maketrans({code: " " for code in range(128) if not chr(code).isalnum()})
BATCH = 25_000  # pages counted at a time (larger batches: less of CountVectorizer's per-call sorting)
_ROWS = 50_000  # rows weighed at a time
SPILL_ENTRIES = 2**24  # counts held in memory (8 bytes each) before the batches go to files


def runs(text: str) -> list[str]:
    """Every run of letters and digits in ``text``: ``re.findall(RUNS, text)``.

    ASCII text (most text) is split faster: its characters other than letters and digits become
    spaces and ``str.split`` cuts there (in ASCII, ``[^\\W_]`` is exactly ``str.isalnum``).

    >>> runs("ipv6, k8s_net: 2024!")
    ['ipv6', 'k8s', 'net', '2024']
    """
    if text.isascii():
        return text.translate(_SEPARATORS).split()
    return _RUNS.findall(text)


def count(documents: list[str]) -> tuple[list[str], np.ndarray, sp.csr_array]:
    """A batch's runs (its vocabulary), each one's column, and the pages × columns counts, by
    scikit-learn's ``CountVectorizer`` (lower-cased, :func:`runs`). The ASCII pages are counted by
    :func:`rankrec._ascii_counts.count_ascii` (the same counts, without a Python step per word), the
    others by ``CountVectorizer``, and the two parts joined."""
    plain = np.fromiter(map(str.isascii, documents), dtype=bool, count=len(documents))
    parts = []
    if plain.any():
        found = count_ascii(documents if plain.all() else [documents[i] for i in np.flatnonzero(plain)])
        if found is None:  # two runs with one hash: all the slow way
            plain[:] = False
        else:
            parts.append((np.flatnonzero(plain), found))
    if not plain.all():
        rest = np.flatnonzero(~plain)
        parts.append(
            (rest, _vectorised(documents if rest.size == plain.size else [documents[i] for i in rest]))
        )
    if len(parts) == 1:
        return parts[0][1]
    return _joined(parts, len(documents))


def _vectorised(documents: list[str]) -> tuple[list[str], np.ndarray, sp.csr_array]:
    counter = CountVectorizer(tokenizer=runs, token_pattern=None, dtype=np.float32)
    try:
        counts = sp.csr_array(counter.fit_transform(documents))
    except ValueError:  # no run of letters or digits in the whole batch
        return [], np.zeros(0, dtype=np.int64), sp.csr_array((len(documents), 0), dtype=np.float32)
    terms = list(counter.vocabulary_)
    return terms, np.fromiter(counter.vocabulary_.values(), dtype=np.int64, count=len(terms)), counts


def _joined(parts, pages: int) -> tuple[list[str], np.ndarray, sp.csr_array]:
    """One batch's counts from the counts of parts of its pages (``(rows, (terms, columns, counts))``)."""
    numbers: dict[str, int] = {}
    blocks, rows = [], []
    for where, (terms, columns, counts) in parts:
        column_term = np.empty(len(terms), dtype=np.int64)
        column_term[columns] = np.arange(len(terms))
        for term in terms:
            numbers.setdefault(term, len(numbers))
        term_number = np.fromiter(map(numbers.__getitem__, terms), dtype=np.int64, count=len(terms))
        remapped = term_number[column_term[counts.indices]] if counts.nnz else counts.indices
        blocks.append((counts.data, remapped, counts.indptr))
        rows.append(where)
    width = len(numbers)
    stacked = sp.vstack(
        [
            sp.csr_array((data, indices, indptr), shape=(indptr.size - 1, width))
            for data, indices, indptr in blocks
        ],
        format="csr",
    )
    order = np.empty(pages, dtype=np.int64)
    order[np.concatenate(rows)] = np.arange(pages)
    joined = sp.csr_array(stacked[order])
    return list(numbers), np.arange(width, dtype=np.int64), joined


def _count_fields(headings: list[str], bodies: list[str]):
    return count(headings), count(bodies)


class _Field:
    """One field's counts, batch after batch, over one vocabulary of every run seen so far."""

    def __init__(self) -> None:
        self.ids: dict[str, int] = {}
        self.terms: list[str] = []
        self.batches: list[sp.csr_array | Path] = []  # a Path: the batch's arrays in that file
        self.held = 0  # entries of the batches in memory
        self.folder: Path | None = None  # where batches go once spilled
        self.pages = np.zeros(0, dtype=np.int64)  # pages holding each term
        self.total = np.zeros(0, dtype=np.int64)  # its occurrences in all

    def add(self, counted: tuple[list[str], np.ndarray, sp.csr_array]) -> None:
        """Merge a batch as :func:`count` gives it: its terms take their numbers in this vocabulary."""
        terms, columns, counts = counted
        lookup = np.empty(len(terms), dtype=np.int32)
        lookup[columns] = self._numbers(terms)
        indices = lookup[counts.indices] if len(terms) else counts.indices.astype(np.int32)
        size = len(self.terms)
        if self.pages.size < size:
            grown = max(size, 2 * self.pages.size)
            self.pages = np.r_[self.pages, np.zeros(grown - self.pages.size, dtype=np.int64)]
            self.total = np.r_[self.total, np.zeros(grown - self.total.size, dtype=np.int64)]
        self.pages[:size] += np.bincount(indices, minlength=size)
        self.total[:size] += np.bincount(indices, weights=counts.data, minlength=size).astype(np.int64)
        self.batches.append(
            sp.csr_array((counts.data, indices, counts.indptr), shape=(counts.shape[0], size))
        )
        self.held += counts.nnz
        if self.folder is not None:
            self.spill(self.folder)

    def spill(self, folder: Path) -> None:
        """Write the batches held in memory to files in ``folder``, and every later batch as it comes."""
        self.folder = folder
        for position, batch in enumerate(self.batches):
            if isinstance(batch, sp.csr_array):
                path = folder / f"{id(self)}-{position}.npz"
                np.savez(path, data=batch.data, indices=batch.indices, indptr=batch.indptr)
                self.batches[position] = path
        self.held = 0

    def pop_batch(self) -> sp.csr_array:
        """The first batch (read back and its file removed when spilled), let go of here."""
        batch = self.batches.pop(0)
        if isinstance(batch, sp.csr_array):
            return batch
        with np.load(batch) as arrays:
            data, indices, indptr = arrays["data"], arrays["indices"], arrays["indptr"]
        batch.unlink()
        return sp.csr_array((data, indices, indptr), shape=(indptr.size - 1, len(self.terms)))

    def _numbers(self, terms: list[str]) -> np.ndarray:
        """Each term's number, new terms numbered next (map and zip: no Python loop over the terms)."""
        numbers = np.fromiter(
            map(self.ids.get, terms, itertools.repeat(-1)), dtype=np.int64, count=len(terms)
        )
        new = np.flatnonzero(numbers < 0)
        if new.size:
            fresh = list(map(terms.__getitem__, new.tolist()))
            first = len(self.terms)
            numbers[new] = np.arange(first, first + new.size)
            self.ids.update(zip(fresh, range(first, first + new.size), strict=True))
            self.terms.extend(fresh)
        return numbers

    def columns(self, pages: int, *, min_df: int, max_df: float, max_features: int) -> np.ndarray:
        """Each term's column (-1: dropped), kept words numbered alphabetically, as scikit-learn does."""
        size = len(self.terms)
        column = np.full(size, -1, dtype=np.int64)
        if max_df * pages < min_df or not size:
            return column
        order = np.array(sorted(range(size), key=self.terms.__getitem__), dtype=np.int64)
        words = np.fromiter(map(bool, map(_WORD.fullmatch, self.terms)), dtype=bool, count=size)
        order = order[words[order]]
        frequency = self.pages[order]
        mask = (frequency >= min_df) & (frequency <= max_df * pages)
        if mask.sum() > max_features:  # CountVectorizer._limit_features (scikit-learn 1.x)
            best = (-self.total[order][mask]).argsort()[:max_features]
            limited = np.zeros(order.size, dtype=bool)
            limited[np.flatnonzero(mask)[best]] = True
            mask = limited
        column[order[mask]] = np.arange(int(mask.sum()))
        return column


def _batches(headings: Iterable[str], bodies: Iterable[str], size: int):
    pairs = zip(headings, bodies)  # noqa: B905 (the caller checks that both have every page)
    while batch := list(itertools.islice(pairs, size)):
        yield tuple(map(list, zip(*batch, strict=True)))


def _counted(batches, workers: int):
    """:func:`count` of each field of each batch, in order: here, or in ``workers`` processes (at most
    two batches a process in flight, so that reading does not run far ahead of counting)."""
    yield from in_order(_count_fields, batches, workers)


def _fill(fields: list[_Field], columns: list[np.ndarray], offsets: list[int], pages: int, width: int):
    """One CSR count matrix of the fields' kept terms, built batch by batch (each freed once copied)."""
    total = sum(
        int(field.pages[: column.size][column >= 0].sum())
        for field, column in zip(fields, columns, strict=True)
    )
    # one index dtype for both arrays: scipy copies int32 indices to int64 to match an int64 indptr
    index = np.int32 if max(total, width) < 2**31 else np.int64
    indptr = np.zeros(pages + 1, dtype=index)
    indices = np.empty(total, dtype=index)
    data = np.empty(total, dtype=np.float32)
    row = filled = 0
    while fields[0].batches:
        parts = []
        for field, column, offset in zip(fields, columns, offsets, strict=True):
            batch = field.pop_batch()
            where = column[batch.indices] if batch.nnz else np.zeros(0, dtype=np.int64)
            keep = where >= 0
            rows = np.repeat(np.arange(batch.shape[0]), np.diff(batch.indptr))[keep]
            parts.append((rows, where[keep] + offset, batch.data[keep]))
        rows, cols, values = (np.concatenate(arrays) for arrays in zip(*parts, strict=True))
        count = batch.shape[0]
        block = sp.csr_array((values, (rows, cols)), shape=(count, width))
        block.sort_indices()
        indices[filled : filled + block.nnz] = block.indices
        data[filled : filled + block.nnz] = block.data
        indptr[row + 1 : row + count + 1] = filled + block.indptr[1:]
        row, filled = row + count, filled + block.nnz
    return sp.csr_array((data, indices, indptr), shape=(pages, width))


def page_vectors(
    headings: Iterable[str],
    bodies: Iterable[str],
    pages: int,
    *,
    title_weight: float,
    min_df: int,
    max_df: float,
    max_features: int,
    batch: int = BATCH,
    workers: int = 1,
    progress=None,
) -> tuple[sp.csr_array, int, int]:
    """``[w·H, (1−w)·B]`` with unit rows, and the two vocabularies' sizes (see the module docstring).

    ``headings`` and ``bodies`` are read once, side by side, ``batch`` pages at a time; they must
    hold ``pages`` entries each. With ``workers`` > 1, that many processes count the batches while
    this one reads the text and merges their counts (the result is the same).
    """
    bounds = {"min_df": min_df, "max_df": max_df, "max_features": max_features}
    with contextlib.ExitStack() as cleanup:
        return _page_vectors(headings, bodies, pages, title_weight, bounds, batch, workers, progress, cleanup)


def _page_vectors(headings, bodies, pages, title_weight, bounds, batch, workers, progress, cleanup):
    fields = [_Field(), _Field()]
    read = 0
    for heading_batch, body_batch in _counted(_batches(headings, bodies, batch), workers):
        fields[0].add(heading_batch)
        fields[1].add(body_batch)
        read += heading_batch[2].shape[0]
        if fields[0].folder is None and fields[0].held + fields[1].held > SPILL_ENTRIES:
            folder = Path(cleanup.enter_context(tempfile.TemporaryDirectory(prefix="rankrec-text-")))
            for field in fields:
                field.spill(folder)
        if progress is not None:
            progress("page text", read, pages)
    if read != pages:
        raise ValueError(f"headings and bodies must have {pages} entries each; read {read}")
    columns = [field.columns(pages, **bounds) for field in fields]
    sizes = [int((column >= 0).sum()) for column in columns]
    for position, weight in enumerate((title_weight, 1.0 - title_weight)):
        if weight == 0:  # a field of weight 0 adds nothing: leave its entries out
            columns[position] = np.full(columns[position].size, -1, dtype=np.int64)
    width = sizes[0] + sizes[1]
    if not fields[0].batches:
        return sp.csr_array((pages, width), dtype=np.float32), sizes[0], sizes[1]
    vectors = _fill(fields, columns, [0, sizes[0]], pages, width)
    del fields
    release_memory()
    _weigh(vectors, sizes[0], title_weight)
    return vectors, sizes[0], sizes[1]


def _weigh(vectors: sp.csr_array, heading_terms: int, title_weight: float) -> None:
    """TF-IDF (scikit-learn), each field's part of a row to unit length, weights, unit rows: in place."""
    if not vectors.nnz:
        return
    transformer = TfidfTransformer(sublinear_tf=True, norm=None).fit(vectors)
    weights = np.array([title_weight, 1.0 - title_weight], dtype=np.float32)
    indptr = vectors.indptr
    for first in range(0, vectors.shape[0], _ROWS):
        last = min(first + _ROWS, vectors.shape[0])
        start, end = int(indptr[first]), int(indptr[last])
        rows = sp.csr_array(transformer.transform(vectors[first:last], copy=False))
        values = rows.data
        field = (rows.indices >= heading_terms).astype(np.int64)
        key = 2 * np.repeat(np.arange(last - first), np.diff(rows.indptr)) + field
        lengths = np.sqrt(
            np.bincount(key, weights=values.astype(np.float64) ** 2, minlength=2 * (last - first))
        )
        values *= (weights[field] / lengths[key]).astype(np.float32)
        vectors.data[start:end] = normalize(rows, norm="l2", copy=False).data

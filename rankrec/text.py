"""Page-to-page text similarity: each page's most similar other pages by TF-IDF cosine, as a sparse list.

Each page has two fields, its title and headings, and its main text. Each field gets its own TF-IDF
vectors (scikit-learn's ``TfidfVectorizer``: own vocabulary and idf, sublinear tf, unit rows), so a
word's weight in titles comes from how many titles hold it, not how much text does. A page's vector is
``[w·h, (1−w)·b]`` scaled to unit length, ``w`` being ``title_weight``; two pages that both have both
fields then have cosine ``(w²·h·h' + (1−w)²·b·b') / (w² + (1−w)²)``, so titles count
``w² / (w² + (1−w)²)`` of the whole (0.31 at the default ``w = 0.4``). A page with only one field is
that field's unit vector; a page with no usable word has a zero vector and no neighbours.

Vocabulary: tokens are runs of letters and digits (any script) holding at least two letters, lower-
cased: ``ipv6`` and ``größe`` are words, ``2024`` and ``x`` are not. Scripts written without spaces
(Chinese, Japanese) give one token per run, which this module does not split. Stop-word lists do not
serve a wiki written in several languages, so words on more than ``max_df`` of the pages are dropped
(whatever the language), and so are words on fewer than ``min_df`` pages (they link nothing).

The rows hold every page: which pages a reader may see is for the lists that use them to decide.
"""

from __future__ import annotations

import json
import time
from collections.abc import Sequence
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np
import scipy.sparse as sp
from numba import njit
from sklearn.feature_extraction.text import TfidfVectorizer
from sklearn.preprocessing import normalize

from ._validation import check_count, check_fraction
from .errors import InputError
from .progress import Progress, report

TOKEN_PATTERN = r"(?u)(?<![^\W_])(?=(?:[^\W_]*?[^\W\d_]){2})[^\W_]+(?![^\W_])"
"""Runs of letters and digits (``_`` and punctuation split them) that hold at least two letters."""

_FILES = "text_neighbours"
FORMAT_VERSION = 1


@dataclass(frozen=True)
class TextNeighbours:
    """Each page's ``top`` most similar other pages.

    ``similar`` is an n × n CSR array (float32): row i holds page i's neighbours with their cosine
    similarity (> 0), column indices in increasing page order; never page i itself. ``exact`` says
    whether every pair was scored (see ``text_neighbours``); the values are exact cosines either way.
    ``heading_terms`` and ``body_terms`` are the two vocabularies' sizes, ``seconds`` the wall time.
    """

    similar: sp.csr_array
    top: int
    title_weight: float
    heading_terms: int
    body_terms: int
    exact: bool
    seconds: float

    @property
    def pages(self) -> int:
        return self.similar.shape[0]

    @property
    def pairs(self) -> int:
        return int(self.similar.nnz)


def _field(texts: Sequence[str], *, min_df: int, max_df: float, max_features: int) -> sp.csr_array:
    """One field's TF-IDF rows (n × its vocabulary, float32, unit or zero rows)."""
    if max_df * len(texts) < min_df:  # no word can be on at least min_df and at most max_df pages
        return sp.csr_array((len(texts), 0), dtype=np.float32)
    vectorizer = TfidfVectorizer(
        token_pattern=TOKEN_PATTERN,
        sublinear_tf=True,
        norm="l2",
        min_df=min_df,
        max_df=max_df,
        max_features=max_features,
        dtype=np.float32,
    )
    try:
        matrix = vectorizer.fit_transform(texts)
    except ValueError:  # the settings are checked already: this is "no word left" (empty vocabulary)
        return sp.csr_array((len(texts), 0), dtype=np.float32)
    return sp.csr_array(matrix)


def _combine(headings: sp.csr_array, bodies: sp.csr_array, title_weight: float) -> sp.csr_array:
    """``[w·H, (1−w)·B]`` with unit rows (zero rows stay zero); the fields are scaled in place."""
    headings.data *= np.float32(title_weight)
    bodies.data *= np.float32(1.0 - title_weight)
    combined = sp.csr_array(sp.hstack([headings, bodies], format="csr", dtype=np.float32))
    combined.eliminate_zeros()  # a zero weight leaves explicit zeros behind
    if combined.shape[1]:
        normalize(combined, norm="l2", copy=False)
    combined.sort_indices()
    return combined


@njit(cache=True, boundscheck=False)
def _best(values, columns, k):  # pragma: no cover
    """Positions of the ``k`` largest ``values`` (ties to the lower column), in no particular order."""
    m = values.size
    if m <= k:
        return np.arange(m)
    cut = np.partition(values, m - k)[m - k]
    chosen = np.empty(k, dtype=np.int64)
    taken = 0
    tied = []
    for x in range(m):
        if values[x] > cut:
            chosen[taken] = x
            taken += 1
        elif values[x] == cut:
            tied.append((columns[x], x))
    tied.sort()
    for y in range(k - taken):
        chosen[taken + y] = tied[y][1]
    return chosen


@njit(cache=True, boundscheck=False)
def _score_rows(  # pragma: no cover
    first, last, indptr, indices, data, p_indptr, p_indices, p_data, frequency, budget, keep, top
):
    """Pages ``first`` to ``last - 1``: each one's ``top`` best other pages (counts, columns, values).

    ``indptr, indices, data`` are the page vectors (CSR, unit rows, sorted terms), ``p_*`` the
    postings (term × page) of the terms on at most ``budget`` pages, ``frequency`` each term's page
    count. A page walks the postings of its rarest terms (ties: lower term) while their page counts
    add up to at most ``budget``, into an accumulator over pages; its ``keep`` best by that partial
    score are, when ``keep > top``, rescored by their exact dot product and cut to ``top``.
    """
    pages = indptr.size - 1
    rows = last - first
    accumulator = np.zeros(pages, dtype=np.float32)
    stamp = np.full(pages, -1, dtype=np.int64)
    touched = np.empty(pages, dtype=np.int32)
    dense = np.zeros(frequency.size, dtype=np.float32)
    counts = np.zeros(rows, dtype=np.int64)
    columns = np.empty(rows * top, dtype=np.int32)
    values = np.empty(rows * top, dtype=np.float32)
    for r in range(rows):
        page = first + r
        start, end = indptr[page], indptr[page + 1]
        m = 0
        spent = 0
        for o in np.argsort(frequency[indices[start:end]], kind="mergesort"):
            term = indices[start + o]
            spent += frequency[term]
            if spent > budget:
                break
            weight = data[start + o]
            for p in range(p_indptr[term], p_indptr[term + 1]):
                other = p_indices[p]
                if stamp[other] != page:
                    stamp[other] = page
                    accumulator[other] = 0.0
                    if other != page:
                        touched[m] = other
                        m += 1
                accumulator[other] += weight * p_data[p]
        found = touched[:m].copy()
        scores = np.empty(m, dtype=np.float32)
        for x in range(m):
            scores[x] = accumulator[found[x]]
        chosen = _best(scores, found, keep)
        found, scores = found[chosen], scores[chosen]
        if keep > top:
            for k in range(start, end):
                dense[indices[k]] = data[k]
            for x in range(found.size):
                other = found[x]
                total = 0.0
                for k in range(indptr[other], indptr[other + 1]):
                    total += dense[indices[k]] * data[k]
                scores[x] = total
            for k in range(start, end):
                dense[indices[k]] = 0.0
            chosen = _best(scores, found, top)
            found, scores = found[chosen], scores[chosen]
        kept = 0
        for x in range(found.size):
            if scores[x] > 0:
                columns[r * top + kept] = found[x]
                values[r * top + kept] = scores[x]
                kept += 1
        counts[r] = kept
    return counts, columns, values


def _most_postings(vectors: sp.csr_array, document_frequency: np.ndarray, chunk: int) -> int:
    """The most postings any page's terms have in all (computed chunk by chunk)."""
    most = 0
    for first in range(0, vectors.shape[0], chunk):
        block = vectors[first : first + chunk]
        spent = np.concatenate([[0], np.cumsum(document_frequency[block.indices])])
        most = max(most, int(np.diff(spent[block.indptr]).max(initial=0)))
    return most


def _check_settings(top, title_weight, chunk, probe_postings, candidates, min_df, max_df, max_features):
    check_count("top", top)
    check_fraction("title_weight", title_weight)
    check_count("chunk", chunk)
    check_count("probe_postings", probe_postings)
    check_count("candidates", candidates)
    if candidates < top:
        raise ValueError(f"candidates must be at least top ({top!r}); got {candidates!r}")
    check_count("min_df", min_df)
    check_fraction("max_df", max_df, open_low=True)
    check_count("max_features", max_features)


def text_neighbours(
    headings: Sequence[str],
    bodies: Sequence[str],
    *,
    top: int = 30,
    title_weight: float = 0.4,
    chunk: int = 2000,
    probe_postings: int = 5000,
    candidates: int = 60,
    min_df: int = 2,
    max_df: float = 0.5,
    max_features: int = 2**18,
    progress: Progress | None = None,
) -> TextNeighbours:
    """Each page's ``top`` most similar other pages by TF-IDF cosine of its title/headings and text.

    Parameters
    ----------
    headings, bodies : sequences of str, one per page (the same length; empty strings allowed)
        A page's title and headings, and its main text. Each is iterated once, in order, so a lazy
        sequence (say, decompressing page by page from the store) need not hold all the text.
    top : int
        Neighbours kept per page (30: a ten-item list still fills after pages a reader may not see
        are filtered out).
    title_weight : float in [0, 1]
        ``w`` in ``[w·h, (1−w)·b]`` (module docstring). 0.4 is a starting point: evaluation chooses it.
    chunk : int
        Pages scored at a time (memory, not results: the output does not depend on it).
    probe_postings, candidates : int
        The scale settings. Scoring every pair costs ``Σ_t df_t²`` over the terms t, quadratic in the
        number of pages (one word on 10% of a million pages makes 10¹⁰ pairs). So each page looks for
        candidates through its rarest terms (rare words are what related pages share), as many as
        have at most ``probe_postings`` pages in all, keeps the ``candidates`` best by that partial
        score and ranks them by their exact cosine. When every page's terms fit (small wikis), every
        pair with a shared word is scored and the lists are exact (``exact=True``). The defaults
        (5,000 and 60) were measured on the benchmark corpus; 2,000 and 45 found 91% (Notes).
    min_df, max_df, max_features : int, float, int
        scikit-learn's vocabulary bounds, per field: a word on fewer than ``min_df`` pages or on more
        than ``max_df`` of them is dropped, and each field keeps its ``max_features`` most frequent.
    progress : callable, optional
        ``progress("text neighbours", done, pages)`` after each chunk.

    Notes
    -----
    Peak memory, per stored entry (a page's distinct kept word; about 150 for 300 words of text):
    scikit-learn's count matrix and its pruned copy while it vectorises the text, about 18 to 24
    bytes (measured), the peak; then the page vectors (8 bytes: float32 value, int32 term) and the
    postings of the terms on at most ``probe_postings`` pages (8 bytes, for about 70% of the entries
    by default); then, per chunk, 16 bytes per page and 4 per term of work buffers and the chunk's
    lists. Scoring keeps no chunk × pages matrix: a page's partial scores live in one accumulator
    over pages. Measured with tests/bench/bench_text.py (synthetic topical text, one core): 100,000
    pages in 31 s; 1,000,000 pages (1.5·10⁸ entries) in 450 s and 3.6 GiB above the caller's 2.1 GiB
    of text, most of both in the vectoriser. With the defaults, 99.8% of the exact top-30 lists of a
    300-page sample at 100,000 pages were found. Deterministic: no random choice, ties go to the
    lower page number, and the lists do not depend on ``chunk``.

    Examples
    --------
    >>> found = text_neighbours(
    ...     ["Printer setup", "Printer drivers", "Holiday calendar", "Holiday requests"],
    ...     ["install the printer driver", "printer driver downloads", "public holidays", "leave requests"],
    ...     top=2,
    ... )
    >>> found.similar[[0]].indices.tolist(), found.exact
    ([1], True)
    >>> bool(found.similar[0, 1] > 0.5)
    True
    """
    _check_settings(top, title_weight, chunk, probe_postings, candidates, min_df, max_df, max_features)
    if len(headings) != len(bodies):
        raise ValueError(
            f"headings and bodies must have one entry per page; got {len(headings)} and {len(bodies)}"
        )
    started = time.perf_counter()
    n = len(headings)
    bounds = {"min_df": min_df, "max_df": max_df, "max_features": max_features}
    heading_rows = _field(headings, **bounds)
    body_rows = _field(bodies, **bounds)
    heading_terms, body_terms = heading_rows.shape[1], body_rows.shape[1]
    vectors = _combine(heading_rows, body_rows, title_weight)
    del heading_rows, body_rows

    document_frequency = np.bincount(vectors.indices, minlength=vectors.shape[1])
    exact = _most_postings(vectors, document_frequency, chunk) <= probe_postings
    probing = (document_frequency <= probe_postings).astype(np.float32)
    postings = sp.csr_array(vectors @ sp.diags_array(probing)).T.tocsr()  # term × page, probing terms
    keep = top if exact else candidates
    counts, columns, values = [np.zeros(1, dtype=np.int64)], [], []
    arrays = [
        getattr(matrix, name) for matrix in (vectors, postings) for name in ("indptr", "indices", "data")
    ]
    for first in range(0, n, chunk):
        last = min(first + chunk, n)
        found, where, how = _score_rows(first, last, *arrays, document_frequency, probe_postings, keep, top)
        filled = (np.arange(top) < found[:, None]).ravel()
        counts.append(found)
        columns.append(where[filled])
        values.append(how[filled])
        report(progress, "text neighbours", last, n)
    indptr = np.cumsum(np.concatenate(counts))
    data = np.concatenate(values) if values else np.zeros(0, dtype=np.float32)
    indices = np.concatenate(columns) if columns else np.zeros(0, dtype=np.int32)
    similar = sp.csr_array((data, indices, indptr), shape=(n, n))
    similar.sort_indices()
    return TextNeighbours(
        similar=similar,
        top=top,
        title_weight=float(title_weight),
        heading_terms=heading_terms,
        body_terms=body_terms,
        exact=exact,
        seconds=time.perf_counter() - started,
    )


def similarity_of(neighbours: TextNeighbours, page: int, candidates) -> np.ndarray:
    """The text similarity of ``page`` to each of ``candidates`` (float32; 0 where not a neighbour).

    >>> found = text_neighbours(["Printer setup", "Printer drivers", "Holidays", "Leave"], ["", "", "", ""])
    >>> similarity_of(found, 0, [1, 2, 3]).round(2).tolist()
    [1.0, 0.0, 0.0]
    """
    similar = neighbours.similar
    n = similar.shape[0]
    if isinstance(page, bool) or not isinstance(page, int | np.integer) or not 0 <= page < n:
        raise ValueError(f"page must be a page number in [0, {n}); got {page!r}")
    wanted = np.asarray(candidates, dtype=np.int64).ravel()
    if wanted.size and (wanted.min() < 0 or wanted.max() >= n):
        raise ValueError(f"candidates must be page numbers in [0, {n})")
    start, end = int(similar.indptr[page]), int(similar.indptr[page + 1])
    columns = np.asarray(similar.indices[start:end])
    values = np.asarray(similar.data[start:end], dtype=np.float32)
    found = np.zeros(wanted.size, dtype=np.float32)
    if columns.size:
        position = np.minimum(np.searchsorted(columns, wanted), columns.size - 1)
        hit = columns[position] == wanted
        found[hit] = values[position[hit]]
    return found


def save_text_neighbours(neighbours: TextNeighbours, folder: str | Path) -> Path:
    """Write ``text_neighbours.{indptr,indices,data}.npy`` and ``text_neighbours.json`` into ``folder``.

    The folder is created if missing and other files in it are left alone (it may be an index's
    staging folder, published as a whole by its owner).
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    similar = neighbours.similar
    index = np.int32 if max(similar.nnz, similar.shape[0]) < 2**31 else np.int64  # one dtype: no copy
    np.save(folder / f"{_FILES}.indptr.npy", np.asarray(similar.indptr, dtype=index))
    np.save(folder / f"{_FILES}.indices.npy", np.asarray(similar.indices, dtype=index))
    np.save(folder / f"{_FILES}.data.npy", np.asarray(similar.data, dtype=np.float32))
    fields = asdict(neighbours)
    del fields["similar"]
    meta = {"format_version": FORMAT_VERSION, "pages": neighbours.pages, **fields}
    (folder / f"{_FILES}.json").write_text(json.dumps(meta, indent=2) + "\n")
    return folder


def load_text_neighbours(folder: str | Path) -> TextNeighbours:
    """Memory-map the neighbours saved in ``folder`` (the arrays are views of the files, not copies)."""
    folder = Path(folder)
    try:
        meta = json.loads((folder / f"{_FILES}.json").read_text())
        parts = [
            np.asarray(np.load(folder / f"{_FILES}.{part}.npy", mmap_mode="r"))
            for part in ("data", "indices", "indptr")
        ]
        version, n = meta.pop("format_version"), meta.pop("pages")
    except (OSError, ValueError, KeyError) as error:
        raise InputError(str(folder), None, f"not readable text neighbours: {error}") from None
    if version != FORMAT_VERSION:
        raise InputError(str(folder), None, f"text neighbours format {version}, expected {FORMAT_VERSION}")
    data, indices, indptr = parts
    if indptr.shape != (n + 1,) or data.shape != indices.shape or int(indptr[-1]) != data.size:
        raise InputError(str(folder), None, "text neighbour files disagree with each other")
    similar = sp.csr_array((data, indices, indptr), shape=(n, n), copy=False)
    return TextNeighbours(similar=similar, **meta)

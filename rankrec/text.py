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
import queue
import time
from collections.abc import Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np
import scipy.sparse as sp
from numba import njit

from ._memory import release_memory
from ._text_vectors import TOKEN_PATTERN, page_vectors
from ._validation import check_count, check_fraction
from .errors import InputError
from .progress import Progress, report

__all__ = ["TOKEN_PATTERN", "TextNeighbours", "load_text_neighbours", "save_text_neighbours"]
__all__ += ["similarity_of", "text_neighbours"]

_FILES = "text_neighbours"
FORMAT_VERSION = 1
# Raise when the same text would give other neighbours (tokens, weights, settings): a build then recounts
# instead of reusing the neighbours of the index it replaces (rankrec.evidence.Evidence.text_digest).
METHOD_VERSION = 1


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
def _top(values, columns, k):  # pragma: no cover
    """``_best`` of many ``values`` in [0, 1] (partial cosines): a histogram finds a bound that at least
    ``k`` values reach, and ``_best`` picks among those alone (the same choice, ties included)."""
    m = values.size
    if m <= 4 * k:
        return _best(values, columns, k)
    bins = 1024
    histogram = np.zeros(bins + 1, dtype=np.int64)
    for x in range(m):
        histogram[min(int(values[x] * bins), bins)] += 1
    reached, edge = 0, bins
    while edge > 0:
        reached += histogram[edge]
        if reached >= k:
            break
        edge -= 1
    low = np.float32(edge / bins)  # every value in bin ``edge`` or above is at least this
    pick = np.empty(m, dtype=np.int64)
    count = 0
    for x in range(m):
        pick[count] = x
        count += values[x] >= low
    pick = pick[:count]
    return pick[_best(values[pick], columns[pick], k)]


@njit(cache=True, boundscheck=False, nogil=True)
def _score_rows(  # pragma: no cover
    order, indptr, indices, data, p_indptr, p_indices, p_data, frequency, budget, keep, top, work, found
):
    """Pages ``order``: each one's ``top`` best other pages, into ``found`` (counts, columns, values:
    page i's at ``i * top``). ``work`` is an accumulator over pages (zeros, left zero), a buffer of
    pages and one of terms (zeros, left zero).

    ``indptr, indices, data`` are the page vectors (CSR, unit rows, sorted terms), ``p_*`` the
    postings (term × page) of the terms on at most ``budget`` pages, ``frequency`` each term's page
    count. A page walks the postings of its rarest terms (ties: lower term) while their page counts
    add up to at most ``budget``, into the accumulator (a page's entry is 0 until touched: every
    product is positive); its ``keep`` best by that partial score are, when ``keep > top``, rescored
    by their exact dot product and cut to ``top``.
    """
    accumulator, touched, dense = work
    counts, columns, values = found
    for page in order:
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
                touched[m] = other  # kept (m moves on) only if first touched: no branch to mispredict
                m += (accumulator[other] == 0.0) & (other != page)
                accumulator[other] += weight * p_data[p]
        near = touched[:m].copy()
        scores = np.empty(m, dtype=np.float32)
        for x in range(m):
            scores[x] = accumulator[near[x]]
            accumulator[near[x]] = 0.0
        accumulator[page] = 0.0
        chosen = _top(scores, near, keep)
        near, scores = near[chosen], scores[chosen]
        if keep > top:
            for k in range(start, end):
                dense[indices[k]] = data[k]
            for x in range(near.size):
                other = near[x]
                total = 0.0
                for k in range(indptr[other], indptr[other + 1]):
                    total += dense[indices[k]] * data[k]
                scores[x] = total
            for k in range(start, end):
                dense[indices[k]] = 0.0
            chosen = _best(scores, near, top)
            near, scores = near[chosen], scores[chosen]
        kept = 0
        for x in range(near.size):
            if scores[x] > 0:
                columns[page * top + kept] = near[x]
                values[page * top + kept] = scores[x]
                kept += 1
        counts[page] = kept


@njit(cache=True, boundscheck=False)
def _postings(indptr, indices, data, probing):  # pragma: no cover
    """The probing terms' postings: term × page CSR (pages ascending), of the page vectors' CSR."""
    starts = np.zeros(probing.size + 1, dtype=np.int64)
    for k in range(indices.size):
        if probing[indices[k]]:
            starts[indices[k] + 1] += 1
    starts = np.cumsum(starts)
    fill = starts[:-1].copy()
    pages = np.empty(starts[-1], dtype=np.int32)
    values = np.empty(starts[-1], dtype=np.float32)
    for page in range(indptr.size - 1):
        for k in range(indptr[page], indptr[page + 1]):
            term = indices[k]
            if probing[term]:
                pages[fill[term]] = page
                values[fill[term]] = data[k]
                fill[term] += 1
    return starts, pages, values


def _scan(vectors: sp.csr_array, document_frequency: np.ndarray, chunk: int) -> tuple[int, np.ndarray]:
    """The most postings any page's terms have in all, and the order to score the pages in: by their
    rarest term (ties: the lower term, then the lower page), pages without terms last. Pages on one
    subject share rare words, so in that order consecutive pages read the same postings and candidate
    rows, which are then still in the processor's caches (the lists do not depend on the order)."""
    most = 0
    first_terms = np.full(vectors.shape[0], np.iinfo(np.int64).max, dtype=np.int64)
    for first in range(0, vectors.shape[0], chunk):
        block = vectors[first : first + chunk]
        frequency = document_frequency[block.indices].astype(np.int64)
        spent = np.concatenate([[0], np.cumsum(frequency)])
        most = max(most, int(np.diff(spent[block.indptr]).max(initial=0)))
        filled = np.flatnonzero(np.diff(block.indptr))
        if filled.size:
            key = (frequency << 32) | block.indices
            first_terms[first + filled] = np.minimum.reduceat(key, block.indptr[filled])
    return most, np.argsort(first_terms, kind="stable")


def _score(vectors, document_frequency, order, probe_postings, keep, top, chunk, workers, progress):
    """:func:`_score_rows` of every page, a chunk of ``order`` at a time in ``workers`` threads: each
    page's count of neighbours, and ``top`` places a page of their columns and values."""
    n = vectors.shape[0]
    probing = document_frequency <= probe_postings
    postings = _postings(vectors.indptr, vectors.indices, vectors.data, probing)  # term × page
    arrays = [vectors.indptr, vectors.indices, vectors.data, *postings]
    found = (np.zeros(n, np.int64), np.empty(n * top, np.int32), np.empty(n * top, np.float32))
    buffers: queue.SimpleQueue = queue.SimpleQueue()  # work buffers, one set a thread
    for _ in range(min(workers, -(-n // chunk)) or 1):
        buffers.put((np.zeros(n, np.float32), np.empty(n, np.int32), np.zeros(vectors.shape[1], np.float32)))

    def score(first: int) -> None:  # each chunk writes its own pages' places of ``found``
        work = buffers.get()
        chosen = order[first : first + chunk]
        _score_rows(chosen, *arrays, document_frequency, probe_postings, keep, top, work, found)
        buffers.put(work)

    with ThreadPoolExecutor(max_workers=workers) as pool:  # the kernel releases the GIL
        for done, _ in enumerate(pool.map(score, range(0, n, chunk)), start=1):
            report(progress, "text neighbours", min(done * chunk, n), n)
    return found


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
    workers: int = 1,
    progress: Progress | None = None,
) -> TextNeighbours:
    """Each page's ``top`` most similar other pages by TF-IDF cosine of its title/headings and text.

    Parameters
    ----------
    headings, bodies : sequences of str, one per page (the same length; empty strings allowed)
        A page's title and headings, and its main text. Each is iterated once, side by side, a batch
        of pages at a time, so a lazy sequence (:class:`rankrec.evidence.StoredText`, decompressing
        page by page from the store) never has all the text in memory.
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
    workers : int
        Processes that count the text's words (this one reads the text and merges their counts) and
        threads that score the pages; the result does not depend on it. 1 (the default) does all here.
    progress : callable, optional
        ``progress("page text", read, pages)`` after each batch of text read and counted, then
        ``progress("text neighbours", done, pages)`` after each chunk scored.

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
    check_count("workers", workers)
    if len(headings) != len(bodies):
        raise ValueError(
            f"headings and bodies must have one entry per page; got {len(headings)} and {len(bodies)}"
        )
    started = time.perf_counter()
    n = len(headings)
    vectors, heading_terms, body_terms = page_vectors(
        headings,
        bodies,
        n,
        title_weight=title_weight,
        min_df=min_df,
        max_df=max_df,
        max_features=max_features,
        workers=workers,
        progress=progress,
    )
    document_frequency = np.bincount(vectors.indices, minlength=vectors.shape[1])
    most, order = _scan(vectors, document_frequency, chunk)
    exact = most <= probe_postings
    keep = top if exact else candidates
    found = _score(vectors, document_frequency, order, probe_postings, keep, top, chunk, workers, progress)
    del vectors, order  # the lists alone from here on
    release_memory()
    filled = (np.arange(top) < found[0][:, None]).ravel()
    # the columns' int32 for the row starts too when they fit (scipy copies int32 columns to int64 to
    # match int64 row starts)
    indptr = np.r_[0, np.cumsum(found[0])].astype(np.int32 if n * top < 2**31 else np.int64)
    similar = sp.csr_array((found[2][filled], found[1][filled], indptr), shape=(n, n))
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

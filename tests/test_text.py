"""Text neighbours: TF-IDF cosine against scikit-learn, chunks, self and empty pages, title weight, files."""

from __future__ import annotations

import mmap
import re
import string
from pathlib import Path

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.feature_extraction.text import TfidfVectorizer
from sklearn.metrics.pairwise import cosine_similarity
from sklearn.preprocessing import normalize

from rankrec._text_vectors import RUNS, page_vectors, runs
from rankrec.errors import InputError
from rankrec.text import (
    TOKEN_PATTERN,
    load_text_neighbours,
    save_text_neighbours,
    similarity_of,
    text_neighbours,
)

HEADINGS = [
    "Printer setup: drivers and queues",
    "Printer drivers for Linux",
    "Network printer queues",
    "VPN access from home",
    "VPN client configuration",
    "Holiday calendar 2024",
    "Holiday requests and approvals",
    "Drucker einrichten: Treiber",
    "Drucker Warteschlangen",
    "",
    "Onboarding checklist",
    "Onboarding for engineers",
]
BODIES = [
    "Install the printer driver, then add the queue. The queue name is on the printer label.",
    "Download the driver package for your distribution; the driver supports duplex printing.",
    "Each floor has a network queue. Send jobs to the queue nearest to you; the printer shows status.",
    "Connect with the VPN client. Your token expires every day; request a new token at the desk.",
    "The VPN client needs the configuration file and your token. Split tunnelling is off.",
    "Public holidays for every office, with the regional holidays marked.",
    "Request leave in the portal; your manager approves requests within two days.",
    "Den Treiber installieren, dann die Warteschlange hinzufügen. Größe des Papiers: A4.",
    "Jede Etage hat eine Warteschlange für den Drucker. Größe und Farbe wählen.",
    "",
    "Your first week: accounts, laptop, VPN token, printer access and the onboarding buddy.",
    "Engineers get repository access, the onboarding buddy and a laptop in the first week.",
]


def _reference(headings, bodies, title_weight, **bounds):
    """The combined matrix built with scikit-learn directly, and its cosine similarities (diagonal 0)."""
    settings = {"token_pattern": TOKEN_PATTERN, "sublinear_tf": True, "min_df": 2, "max_df": 0.5}
    settings.update(bounds)
    fields = [TfidfVectorizer(**settings).fit_transform(texts) for texts in (headings, bodies)]
    combined = normalize(sp.hstack([title_weight * fields[0], (1 - title_weight) * fields[1]]).tocsr())
    scores = cosine_similarity(combined)
    np.fill_diagonal(scores, 0.0)
    return scores


def _assert_top_lists(found, scores, top):
    """Each row holds a top-``top`` list of ``scores`` (ties aside) with the same values."""
    similar = found.similar
    for page in range(scores.shape[0]):
        row = similar[[page]]
        wanted = np.sort(scores[page][scores[page] > 1e-9])[::-1][:top]
        np.testing.assert_allclose(np.sort(row.data)[::-1], wanted, rtol=1e-5, atol=1e-7)
        np.testing.assert_allclose(row.data, scores[page, row.indices], rtol=1e-5, atol=1e-7)


def _random_corpus(pages: int, seed: int = 3):
    """Seeded pages of words from a 400-word Zipf law (enough terms per page to cut long rows)."""
    rng = np.random.default_rng(seed)
    words = np.array([f"w{chr(97 + i % 26)}{chr(97 + i // 26 % 26)}" for i in range(400)])
    weights = 1.0 / np.arange(1, 401)
    weights /= weights.sum()
    headings = [" ".join(rng.choice(words, size=rng.integers(1, 5), p=weights)) for _ in range(pages)]
    bodies = [" ".join(rng.choice(words, size=rng.integers(0, 60), p=weights)) for _ in range(pages)]
    return headings, bodies


@pytest.mark.parametrize("title_weight", [0.4, 0.0, 1.0])
@pytest.mark.parametrize("top", [1, 3])
def test_similarities_equal_scikit_learn_cosine(title_weight, top):
    # reference: scikit-learn's TfidfVectorizer and cosine_similarity on the same two fields
    found = text_neighbours(HEADINGS, BODIES, top=top, title_weight=title_weight)
    assert found.exact and found.pages == len(HEADINGS)
    assert found.similar.dtype == np.float32 and found.similar.has_sorted_indices
    _assert_top_lists(found, _reference(HEADINGS, BODIES, title_weight), top)


def test_longer_corpus_equals_scikit_learn_with_cut_rows():
    # reference: scikit-learn, on pages with many shared words so that most rows are cut to top
    headings, bodies = _random_corpus(150)
    found = text_neighbours(headings, bodies, top=5)
    assert found.exact
    assert (np.diff(found.similar.indptr) == 5).mean() > 0.9
    _assert_top_lists(found, _reference(headings, bodies, 0.4), 5)


def test_scale_settings_keep_exact_cosines_and_recall_grows_with_them():
    # reference: scikit-learn's cosine. With a postings budget the lists are found approximately, but
    # every value is still the exact cosine, and more budget or candidates find more of the true lists
    headings, bodies = _random_corpus(150)
    scores = _reference(headings, bodies, 0.4)
    true_top = np.argsort(-scores, axis=1, kind="stable")[:, :5]
    recall = []
    for budget, candidates in [(40, 10), (200, 10), (400, 20)]:
        found = text_neighbours(headings, bodies, top=5, probe_postings=budget, candidates=candidates)
        assert not found.exact
        similar = found.similar
        rows = np.repeat(np.arange(150), np.diff(similar.indptr))
        np.testing.assert_allclose(similar.data, scores[rows, similar.indices], rtol=1e-5, atol=1e-7)
        held = [len(set(true_top[page]) & set(similar[[page]].indices)) for page in range(150)]
        recall.append(np.mean(held) / 5)
    assert recall[0] < recall[1] < recall[2] and recall[2] > 0.95


@pytest.mark.parametrize("settings", [{}, {"probe_postings": 40, "candidates": 8}], ids=["exact", "cut"])
def test_chunk_size_does_not_change_the_result(settings):
    # common practice: chunking is a memory choice, the lists must be bit for bit the same
    headings, bodies = _random_corpus(60)
    results = [text_neighbours(headings, bodies, top=4, chunk=chunk, **settings) for chunk in (1, 3, 60)]
    for other in results[1:]:
        for part in ("indptr", "indices", "data"):
            np.testing.assert_array_equal(getattr(other.similar, part), getattr(results[0].similar, part))


def test_no_page_lists_itself_and_empty_pages_have_empty_rows():
    headings = HEADINGS + ["", "   ", "x 2024"]  # no text, blanks, no word of two letters
    bodies = BODIES + ["", "\n", "3 4 5"]
    found = text_neighbours(headings, bodies, top=20)
    similar = found.similar
    assert similar.diagonal().max() == 0
    assert (similar.data > 0).all()
    empty = [9, 12, 13, 14]
    assert (np.diff(similar.indptr)[empty] == 0).all()
    assert not np.isin(similar.indices, empty).any()  # and nobody lists them


def test_ties_go_to_the_lower_page_number():
    # a worked example: pages 1 to 4 are copies, so page 0 is equally similar to each of them
    headings = ["alpha", "alpha", "alpha", "alpha", "alpha", "beta", "beta", "gamma", "gamma", "delta"] + [
        ""
    ] * 2
    bodies = [""] * 12
    found = text_neighbours(headings, bodies, top=2, max_df=0.5)
    assert found.similar[[0]].indices.tolist() == [1, 2]
    assert found.similar[[3]].indices.tolist() == [0, 1]


@pytest.mark.parametrize("title_weight", [0.8, 0.1])
def test_pages_sharing_only_title_words_weigh_by_title_weight(title_weight):
    # worked example: pages 0 and 1 have the same headings and no common body word, so both their
    # fields are unit vectors with h0·h1 = 1 and b0·b1 = 0, and their cosine is w² / (w² + (1 − w)²):
    # 0.64 / 0.68 = 0.941 at w = 0.8, 0.01 / 0.82 = 0.0122 at w = 0.1
    headings = ["alpha beta", "alpha beta", "gamma delta", "gamma delta", "epsilon", "epsilon"]
    bodies = ["red green", "blue yellow", "red green", "blue yellow", "black white", "black white"]
    found = text_neighbours(headings, bodies, top=5, title_weight=title_weight)
    w = title_weight
    assert found.similar[0, 1] == pytest.approx(w**2 / (w**2 + (1 - w) ** 2), rel=1e-6)


def test_title_weight_moves_title_sharing_pages_closer():
    headings = ["alpha beta", "alpha beta", "gamma delta", "gamma delta", "epsilon", "epsilon"]
    bodies = ["red green", "blue yellow", "red green", "blue yellow", "black white", "black white"]
    heavy = text_neighbours(headings, bodies, title_weight=0.8)
    light = text_neighbours(headings, bodies, title_weight=0.1)
    assert heavy.similar[0, 1] > 0.9 > 0.1 > light.similar[0, 1] > 0
    assert light.similar[0, 2] > heavy.similar[0, 2]  # pages 0 and 2 share only body words


def test_tokens_are_words_of_two_letters_in_any_script():
    # Python's re module: \w and [^\W\d_] follow Unicode letters and digits for str patterns
    text = "Naïve café Größe ipv6 k8s 2024 x 3d snake_case Ωmega-ray"
    assert re.findall(TOKEN_PATTERN, text.lower()) == [
        "naïve",
        "café",
        "größe",
        "ipv6",
        "k8s",
        "snake",
        "case",
        "ωmega",
        "ray",
    ]


def test_similarity_of_reads_a_row():
    found = text_neighbours(HEADINGS, BODIES, top=3)
    dense = found.similar.toarray()
    candidates = np.array([11, 9, 0, *found.similar[[0]].indices[::-1], 5])
    values = similarity_of(found, 0, candidates)
    assert values.dtype == np.float32
    np.testing.assert_array_equal(values, dense[0, candidates])
    assert (values > 0).sum() == 3 and values[2] == 0  # its three neighbours; itself is none
    assert similarity_of(found, 9, [0, 1]).tolist() == [0.0, 0.0]
    assert similarity_of(found, 0, []).size == 0
    with pytest.raises(ValueError, match="page must be a page number"):
        similarity_of(found, len(HEADINGS), [0])
    with pytest.raises(ValueError, match="candidates must be page numbers"):
        similarity_of(found, 0, [-1])


def _mapped(array: np.ndarray) -> bool:
    base = array
    while base is not None:
        if isinstance(base, mmap.mmap):
            return True
        base = getattr(base, "base", None)
    return False


def test_save_and_load_round_trip_memory_mapped(tmp_path):
    found = text_neighbours(HEADINGS, BODIES, top=3)
    (tmp_path / "index").mkdir()
    (tmp_path / "index" / "other.npy").write_bytes(b"kept")
    save_text_neighbours(found, tmp_path / "index")
    loaded = load_text_neighbours(tmp_path / "index")
    assert (tmp_path / "index" / "other.npy").read_bytes() == b"kept"
    for part in ("indptr", "indices", "data"):
        np.testing.assert_array_equal(getattr(loaded.similar, part), getattr(found.similar, part))
        assert _mapped(getattr(loaded.similar, part))
    assert loaded.similar.shape == found.similar.shape
    assert (loaded.top, loaded.title_weight, loaded.exact) == (3, 0.4, True)
    assert (loaded.heading_terms, loaded.body_terms) == (found.heading_terms, found.body_terms)
    np.testing.assert_array_equal(similarity_of(loaded, 0, range(12)), similarity_of(found, 0, range(12)))


def test_load_refuses_broken_folders(tmp_path):
    with pytest.raises(InputError, match="not readable text neighbours"):
        load_text_neighbours(tmp_path)
    save_text_neighbours(text_neighbours(HEADINGS, BODIES, top=2), tmp_path)
    np.save(tmp_path / "text_neighbours.indptr.npy", np.zeros(3, dtype=np.int64))
    with pytest.raises(InputError, match="disagree"):
        load_text_neighbours(tmp_path)
    meta = (tmp_path / "text_neighbours.json").read_text()
    (tmp_path / "text_neighbours.json").write_text(meta.replace('"format_version": 1', '"format_version": 9'))
    with pytest.raises(InputError, match="format 9, expected 1"):
        load_text_neighbours(tmp_path)


@pytest.mark.parametrize("pages", [0, 1, 3])
def test_tiny_wikis_have_no_neighbours(pages):
    # three pages cannot hold a word on two pages but at most half of them
    found = text_neighbours(["printer"] * pages, ["driver"] * pages)
    assert found.similar.shape == (pages, pages) and found.pairs == 0
    assert (found.heading_terms, found.body_terms) == (0, 0)


def test_progress_reports_the_text_read_then_every_chunk():
    calls = []
    text_neighbours(HEADINGS, BODIES, chunk=5, progress=lambda *args: calls.append(args))
    assert calls == [
        ("page text", 12, 12),
        ("text neighbours", 5, 12),
        ("text neighbours", 10, 12),
        ("text neighbours", 12, 12),
    ]


def test_inputs_are_unchanged():
    headings, bodies = list(HEADINGS), list(BODIES)
    text_neighbours(headings, bodies)
    assert headings == HEADINGS and bodies == BODIES


@pytest.mark.parametrize(
    ("settings", "error", "message"),
    [
        ({"top": 0}, ValueError, "top must be at least 1; got 0"),
        ({"top": 2.0}, TypeError, "top must be an integer"),
        ({"title_weight": 1.5}, ValueError, r"title_weight must lie in \[0, 1\]; got 1.5"),
        ({"max_df": 0.0}, ValueError, r"max_df must lie in \(0, 1\]"),
        ({"candidates": 5, "top": 10}, ValueError, r"candidates must be at least top \(10\); got 5"),
        ({"chunk": 0}, ValueError, "chunk must be at least 1"),
        ({"workers": 0}, ValueError, "workers must be at least 1"),
    ],
)
def test_bad_settings_are_refused(settings, error, message):
    with pytest.raises(error, match=message):
        text_neighbours(HEADINGS, BODIES, **settings)


def test_headings_and_bodies_must_pair_up():
    with pytest.raises(ValueError, match="one entry per page; got 12 and 11"):
        text_neighbours(HEADINGS, BODIES[:-1])


class _OnePass:
    """A field read once: ``len`` and a single pass of ``iter``, as text streamed from a store."""

    def __init__(self, items) -> None:
        self.items, self.used = list(items), False

    def __len__(self) -> int:
        return len(self.items)

    def __iter__(self):
        assert not self.used, "read twice"
        self.used = True
        return iter(self.items)


@pytest.mark.parametrize("settings", [{}, {"probe_postings": 40, "candidates": 8}], ids=["exact", "cut"])
def test_workers_do_not_change_the_result(settings):
    # common practice: parallelism is a speed choice, the lists must be bit for bit the same
    headings, bodies = _random_corpus(150)
    alone = text_neighbours(headings, bodies, top=4, chunk=7, **settings)
    shared = text_neighbours(_OnePass(headings), _OnePass(bodies), top=4, chunk=7, workers=2, **settings)
    for part in ("indptr", "indices", "data"):
        np.testing.assert_array_equal(getattr(shared.similar, part), getattr(alone.similar, part))
    assert (shared.heading_terms, shared.body_terms) == (alone.heading_terms, alone.body_terms)


def test_text_read_once_in_one_pass_gives_the_lists_result():
    headings, bodies = _random_corpus(120)
    expected = text_neighbours(headings, bodies, top=5)
    found = text_neighbours(_OnePass(headings), _OnePass(bodies), top=5)
    for part in ("indptr", "indices", "data"):
        np.testing.assert_array_equal(getattr(found.similar, part), getattr(expected.similar, part))


@pytest.mark.parametrize("bounds", [{}, {"max_features": 25}, {"min_df": 3, "max_df": 0.2}], ids=str)
@pytest.mark.parametrize("batch", [1, 7, 1000])
def test_page_vectors_equal_scikit_learn_in_any_batch_size(bounds, batch):
    # reference: scikit-learn's TfidfVectorizer on all the pages at once (vocabulary bounds included,
    # max_features keeping the most frequent words), each field weighed and the rows normalised
    headings, bodies = _random_corpus(90)
    headings[3] = "x 7 ab_c Ünïcode—words 2024"  # runs of under two letters are no words
    vocabulary = {"min_df": 2, "max_df": 0.5, "max_features": 2**18} | bounds
    vectors, heading_terms, body_terms = page_vectors(
        _OnePass(headings), _OnePass(bodies), 90, title_weight=0.3, batch=batch, **vocabulary
    )
    reference = [
        TfidfVectorizer(token_pattern=TOKEN_PATTERN, sublinear_tf=True, dtype=np.float32, **vocabulary).fit(
            texts
        )
        for texts in (headings, bodies)
    ]
    assert (heading_terms, body_terms) == tuple(len(model.vocabulary_) for model in reference)
    fields = [model.transform(texts) for model, texts in zip(reference, (headings, bodies), strict=True)]
    expected = normalize(sp.hstack([0.3 * fields[0], 0.7 * fields[1]]).tocsr())
    assert vectors.dtype == np.float32 and vectors.has_sorted_indices
    # 8 bytes an entry, as the memory notes count them: no int64 copy of the columns
    assert vectors.indices.dtype == vectors.indptr.dtype == np.int32
    np.testing.assert_allclose(vectors.toarray(), expected.toarray(), rtol=1e-5, atol=1e-7)


def test_page_vectors_counted_in_processes_are_the_same():
    headings, bodies = _random_corpus(90)
    bounds = {"title_weight": 0.3, "min_df": 2, "max_df": 0.5, "max_features": 2**18, "batch": 7}
    here = page_vectors(headings, bodies, 90, **bounds)
    there = page_vectors(_OnePass(headings), _OnePass(bodies), 90, workers=2, **bounds)
    assert here[1:] == there[1:]
    for part in ("indptr", "indices", "data"):
        np.testing.assert_array_equal(getattr(there[0], part), getattr(here[0], part))


def test_page_vectors_spilled_to_files_are_the_same_and_leave_no_file(monkeypatch, tmp_path):
    # common practice: where the counts wait (memory or a temporary file) is a memory choice only
    import rankrec._text_vectors as text_vectors

    headings, bodies = _random_corpus(90)
    bounds = {"title_weight": 0.3, "min_df": 2, "max_df": 0.5, "max_features": 2**18, "batch": 7}
    here = page_vectors(headings, bodies, 90, **bounds)
    monkeypatch.setattr(text_vectors, "SPILL_ENTRIES", 50)
    monkeypatch.setenv("TMPDIR", str(tmp_path))
    monkeypatch.setattr(text_vectors.tempfile, "tempdir", None)  # TMPDIR is read again
    written = []
    save = np.savez
    monkeypatch.setattr(
        text_vectors.np, "savez", lambda path, **arrays: (written.append(path), save(path, **arrays))
    )
    spilled = page_vectors(_OnePass(headings), _OnePass(bodies), 90, **bounds)
    assert len(written) >= 13 and all(Path(path).is_relative_to(tmp_path) for path in written)
    assert here[1:] == spilled[1:]
    for part in ("indptr", "indices", "data"):
        np.testing.assert_array_equal(getattr(spilled[0], part), getattr(here[0], part))
    assert list(tmp_path.iterdir()) == []


def test_page_vectors_refuse_a_short_field():
    with pytest.raises(ValueError, match="must have 5 entries each; read 4"):
        page_vectors(["a"] * 4, ["b"] * 4, 5, title_weight=0.4, min_df=2, max_df=0.5, max_features=10)


@settings(max_examples=200, deadline=None)
@given(st.text(alphabet=st.characters(codec="utf-8"), max_size=60) | st.text(alphabet=string.printable))
def test_runs_are_the_plain_patterns_runs(text):
    # reference: Python's re module with the RUNS pattern (ASCII text takes a faster path)
    assert runs(text) == re.findall(RUNS, text)


def _counted_pages(result) -> list[dict[str, float]]:
    words, columns, counts = result
    word_of = np.empty(len(words), dtype=object)
    word_of[columns] = words
    counts = sp.csr_array(counts)
    return [
        dict(zip(word_of[counts.indices[start:end]].tolist(), counts.data[start:end].tolist(), strict=True))
        for start, end in zip(counts.indptr[:-1], counts.indptr[1:], strict=True)
    ]


_PIECES = [
    "Disk",
    "disk",
    "QUOTA",
    "ipv6",
    "k8s_net",
    "2024",
    "a",
    "—",
    "Größe",
    "café",
    "x-y",
    "\n",
    "  ",
    "İstanbul",
]


@pytest.mark.parametrize("seed", range(4))
def test_batch_counts_equal_count_vectorizer_on_ascii_and_mixed_pages(seed):
    # reference: scikit-learn's CountVectorizer (lower-cased, the runs tokenizer) on the same pages:
    # the ASCII pages take the compiled path, the others CountVectorizer's, and the two are joined
    from sklearn.feature_extraction.text import CountVectorizer

    from rankrec._text_vectors import count

    rng = np.random.default_rng(seed)
    pages = ["".join(rng.choice(_PIECES, size=rng.integers(0, 30))) + " " for _ in range(60)]
    if seed % 2:
        pages = [page.encode("ascii", "ignore").decode() for page in pages]  # all ASCII
    model = CountVectorizer(tokenizer=runs, token_pattern=None)
    expected = model.fit_transform(pages)
    reference = (list(model.vocabulary_), np.array(list(model.vocabulary_.values())), expected)
    assert _counted_pages(count(pages)) == _counted_pages(reference)


def test_batch_counts_fall_back_when_two_runs_share_a_hash(monkeypatch):
    # common practice: a hash is checked, never trusted; forced here to report a clash
    import rankrec._ascii_counts as ascii_counts
    from rankrec._text_vectors import count

    pages = ["disk quota disk", "quota printer", ""]
    expected = _counted_pages(count(pages))
    monkeypatch.setattr(ascii_counts, "_one_run_per_hash", lambda *arrays: False)
    assert ascii_counts.count_ascii(pages) is None
    assert (
        _counted_pages(count(pages))
        == expected
        == [{"disk": 2.0, "quota": 1.0}, {"quota": 1.0, "printer": 1.0}, {}]
    )

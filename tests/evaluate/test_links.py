"""The held-out-links task: hidden links reach no input, chrome is never hidden, baselines and the
validation split follow the same rule.

Outside sources: the leakage rule is the usual one of offline evaluation (common practice: nothing of a
test target may reach training); the link matrices are checked against scipy.sparse set operations and
the random graphs are networkx's ``gnp_random_graph`` (Erdős–Rényi G(n, p)).
"""

from __future__ import annotations

import networkx as nx
import numpy as np
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st

from rankrec.errors import NothingToEvaluate
from rankrec.evaluate.baselines import OutLinks, TextSimilarity
from rankrec.evaluate.links import held_out_links_split
from rankrec.evaluate.method import training_evidence
from rankrec.evaluate.sweeps import validation_split
from rankrec.evaluate.tasks import excluded_pages
from rankrec.evidence import Evidence


def _graph(size: int, p: float, seed: int) -> sp.csr_array:
    graph = nx.gnp_random_graph(size, p, seed=seed, directed=True)
    return sp.csr_array(nx.to_scipy_sparse_array(graph, nodelist=range(size), dtype=np.float64))


def _chrome(size: int, seed: int) -> sp.csr_array:
    """Every page links to page 0 and to its successor ("home" and "next"): chrome-like links."""
    rows = np.concatenate([np.arange(1, size), np.arange(size - 1)])
    columns = np.concatenate([np.zeros(size - 1, dtype=np.int64), np.arange(1, size)])
    return sp.csr_array((np.ones(rows.size), (rows, columns)), shape=(size, size))


def _pairs(matrix) -> set[tuple[int, int]]:
    coo = sp.coo_array(matrix)
    return {(int(i), int(j)) for i, j, value in zip(coo.row, coo.col, coo.data, strict=True) if value > 0}


def _hidden(split) -> set[tuple[int, int]]:
    relevant = sp.coo_array(split.relevant)
    query_pages = split.queries.pages[:, 0]
    pairs = zip(relevant.row, relevant.col, strict=True)
    return {(int(query_pages[row]), int(column)) for row, column in pairs}


@settings(max_examples=25, deadline=None)
@given(
    size=st.integers(min_value=8, max_value=40),
    p=st.floats(min_value=0.1, max_value=0.6),
    share=st.floats(min_value=0.05, max_value=0.9),
    seed=st.integers(min_value=0, max_value=10_000),
)
def test_hidden_links_reach_no_input_and_chrome_is_never_hidden(size, p, share, seed):
    content = _graph(size, p, seed)
    chrome = _chrome(size, seed)
    links = sp.csr_array(((content + chrome) > 0).astype(np.float64))
    split = held_out_links_split(links, chrome=chrome, share=share, seed=seed)
    hidden = _hidden(split)
    all_links, left, chrome_pairs = _pairs(links), _pairs(split.links), _pairs(chrome)
    assert hidden <= all_links
    assert hidden.isdisjoint(left)  # the link matrix every method gets lacks every hidden link
    assert left | hidden == all_links  # and lacks nothing else
    assert hidden.isdisjoint(chrome_pairs)  # chrome is never a target
    assert len(set(split.queries.users.tolist())) == len(split.queries)  # one bootstrap unit per query
    for page in split.queries.pages[:, 0].tolist():  # never every content link of a query page
        kept = {target for source, target in left - chrome_pairs if source == page}
        assert kept, page
    evidence = training_evidence(Evidence.from_links(links), split)
    assert _pairs(evidence.graph.adjacency) == left  # rankrec's build reads the same links
    try:
        validation = validation_split(split)
    except NothingToEvaluate:  # too few links left to hide again
        pass
    else:
        assert _hidden(validation).isdisjoint(_pairs(validation.links))
        assert _hidden(validation).isdisjoint(chrome_pairs)  # the validation split keeps chrome too
        assert _pairs(validation.links) | _hidden(validation) == left
        assert hidden.isdisjoint(_pairs(validation.links))


def test_link_baselines_answer_each_split_from_its_own_links():
    # Out-links can only list links it is given: on the validation split its lists must miss every link
    # the validation split hid, though the baseline was made with the test split's links. The links a
    # query page keeps are excluded from every list, so on its own split's links it lists nothing.
    links = _graph(60, 0.2, seed=3)
    split = held_out_links_split(links, share=0.3, seed=1)
    validation = validation_split(split)
    kept = excluded_pages(validation)
    pages = validation.queries.pages[:, 0]
    assert _pairs_of_rows(kept, pages) == {
        (s, t) for s, t in _pairs(validation.links) if s in set(pages.tolist())
    }
    method = OutLinks(split.links)
    lists = method.recommend(validation, 10)
    assert (lists < 0).all()  # reading the test split's links, it would list what validation hid
    # text similarity is not a link matrix: it keeps its own neighbours whatever links the split hides
    similar = sp.csr_array(sp.eye_array(60, k=1, format="csr"))
    text = TextSimilarity(similar).recommend(validation, 1)
    expected = pages + 1
    free = np.array(
        [page + 1 < 60 and (page, page + 1) not in _pairs(validation.links) for page in pages.tolist()]
    )
    assert free.any()
    assert np.array_equal(text[free, 0], expected[free])


def _pairs_of_rows(matrix, pages) -> set[tuple[int, int]]:
    """(page, column) of each entry of ``matrix``, its row ``r`` standing for ``pages[r]``."""
    coo = sp.coo_array(matrix)
    return {(int(pages[row]), int(column)) for row, column in zip(coo.row, coo.col, strict=True)} - {
        (int(page), int(page)) for page in pages
    }


@settings(max_examples=20, deadline=None)
@given(seed=st.integers(min_value=0, max_value=10_000), p=st.floats(min_value=0.05, max_value=0.4))
def test_editorial_blocks_are_hidden_from_every_input_of_their_own_split(seed, p):
    # Curated blocks: a random third of the links sit at a "see also" place; they are the targets.
    from rankrec.evaluate.links import editorial_pairs, editorial_split, editorial_validation
    from rankrec.graph import LinkPlaces

    links = _graph(30, p, seed)
    coo = sp.coo_array(links)
    rng = np.random.default_rng(seed)
    codes = (rng.random(coo.nnz) < 0.33).astype(np.int64)  # 1: "div.seealso>p", 0: "div.body>p"
    places = LinkPlaces(
        coo.row, coo.col, codes, np.ones(coo.nnz, dtype=np.int64), ["div.body>p", "div.seealso>p"]
    )
    pairs = editorial_pairs(places, 30, "*seealso*")
    assert _pairs(pairs) == {(int(i), int(j)) for i, j, c in zip(coo.row, coo.col, codes, strict=True) if c}
    split = editorial_split(links, pairs, pattern="*seealso*", seed=seed)
    test_pages = set(split.queries.pages[:, 0].tolist())
    hidden = _hidden(split)
    assert hidden == {(i, j) for i, j in _pairs(pairs) if i in test_pages}  # every curated link, no other
    assert hidden.isdisjoint(_pairs(split.links)) and _pairs(split.links) | hidden == _pairs(links)
    if split.reserve is None:
        return
    validation = editorial_validation(split)
    validation_pages = set(validation.queries.pages[:, 0].tolist())
    assert validation_pages and validation_pages.isdisjoint(test_pages)
    assert _hidden(validation) == {(i, j) for i, j in _pairs(pairs) if i in validation_pages}
    assert _hidden(validation).isdisjoint(_pairs(validation.links))
    assert hidden.isdisjoint(_pairs(validation.links))  # the test targets reach no validation input either

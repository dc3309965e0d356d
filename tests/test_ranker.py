"""The learnt related-list ranker: features against reference computations, leak-free labels, determinism,
explanations from attributions, and access rules through every candidate source.

Outside sources: co-citation (Small 1973) and bibliographic coupling (Kessler 1963) counted with
networkx's predecessor/successor sets; two-step transition probabilities, and the click walk's (a Markov
chain whose row-stochastic matrix is built densely with numpy: each row's reachable pages weighted by their
click-through), with a dense numpy matrix power;
random graphs from networkx's ``gnp_random_graph``; the occlusion attribution of a linear model is
exactly its own terms (a worked identity).
"""

from __future__ import annotations

from dataclasses import replace

import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st

from rankrec.build import build_from_evidence
from rankrec.configuration import Configuration
from rankrec.evaluate.links import held_out_links_split
from rankrec.evaluate.tasks import excluded_pages
from rankrec.evidence import Evidence
from rankrec.index import load_index
from rankrec.pagerank import personalised_pagerank, prepare
from rankrec.profiles import ViewLog
from rankrec.ranker.features import (
    CLICK_WALK,
    FEATURES,
    POOL,
    Signals,
    candidate_pool,
    click_walk,
    pair_features,
)
from rankrec.ranker.model import Ranker
from rankrec.ranker.training import SESSION_WINDOWS, _session_windows, examples, fit_lightgbm
from rankrec.recommend import Reader, related
from rankrec.recommend.candidates import ranked_block, ranked_candidates
from rankrec.recommend.explain import READ_ON, SIMILAR_TEXT


def _adjacency(size: int, p: float, seed: int) -> sp.csr_array:
    graph = nx.gnp_random_graph(size, p, seed=seed, directed=True)
    return sp.csr_array(nx.to_scipy_sparse_array(graph, nodelist=range(size), dtype=np.float64)), graph


def _signals(adjacency, similar=None) -> tuple[Signals, object]:
    transition = prepare(adjacency)
    overall = personalised_pagerank(transition, damping=0.85, tol=1e-10).vectors
    size = adjacency.shape[0]
    signals = Signals(
        forward=transition.forward,
        backward=transition.backward,
        global_vector=overall,
        space=np.zeros(size, dtype=np.int32),
        views=np.zeros(size),
        archived=np.zeros(size, dtype=bool),
        chrome_in_share=np.zeros(size),
        similar=similar,
    )
    return signals, transition


def _vector(transition, seed: int) -> tuple[np.ndarray, np.ndarray]:
    restart = np.zeros(transition.n)
    restart[seed] = 1.0
    vector = personalised_pagerank(transition, restart, damping=0.85, tol=1e-10).vectors
    return np.arange(transition.n), np.asarray(vector).ravel()


def test_link_features_match_networkx_counts_and_a_dense_matrix_power():
    adjacency, graph = _adjacency(40, 0.12, seed=5)
    signals, transition = _signals(adjacency)
    dense = transition.forward.toarray()
    two_step = dense @ dense
    for seed in (0, 7, 19):
        indices, values = _vector(transition, seed)
        pool = candidate_pool(signals, seed, indices, values, pool=40)
        features = pair_features(signals, seed, pool, indices, values)
        column = {name: features[:, position] for position, name in enumerate(FEATURES)}
        for row, page in enumerate(pool.tolist()):
            cocited = len(set(graph.predecessors(seed)) & set(graph.predecessors(page)))
            coupled = len(set(graph.successors(seed)) & set(graph.successors(page)))
            assert column["cocitation_log"][row] == pytest.approx(np.log1p(cocited))
            assert column["coupling_log"][row] == pytest.approx(np.log1p(coupled))
            assert column["out_link"][row] == pytest.approx(dense[seed, page])
            assert column["in_link"][row] == pytest.approx(dense[page, seed])
            assert np.exp(column["two_step_log"][row]) == pytest.approx(
                two_step[seed, page] + 1e-12, rel=1e-4
            )


def test_shared_tags_is_the_ochiai_coefficient_of_the_two_tag_sets():
    # Reference: the Ochiai (1957) coefficient |A ∩ B| / sqrt(|A| |B|) of binary sets, the cosine of their
    # incidence vectors, counted here with Python sets; 0 when either page has no tag.
    adjacency, _ = _adjacency(40, 0.12, seed=5)
    signals, transition = _signals(adjacency)
    rng = np.random.default_rng(8)
    tag_sets = [set(rng.choice(6, rng.integers(0, 4), replace=False).tolist()) for _ in range(40)]
    rows = [page for page, tags in enumerate(tag_sets) for _ in tags]
    columns = [tag for tags in tag_sets for tag in tags]
    incidence = sp.csr_array((np.ones(len(rows), dtype=np.int8), (rows, columns)), shape=(40, 6))
    tagged = replace(signals, tags=incidence)
    position = FEATURES.index("shared_tags")
    for seed in range(40):
        indices, values = _vector(transition, seed)
        pool = candidate_pool(tagged, seed, indices, values, pool=40)
        found = pair_features(tagged, seed, pool, indices, values)[:, position]
        for row, page in enumerate(pool.tolist()):
            a, b = tag_sets[seed], tag_sets[page]
            expected = len(a & b) / np.sqrt(len(a) * len(b)) if a and b else 0.0
            assert found[row] == pytest.approx(expected, rel=1e-6)
        assert not pair_features(signals, seed, pool, indices, values)[:, position].any()  # no tags: 0


@pytest.mark.parametrize("with_history", [True, False], ids=["click-through", "no-history"])
def test_click_walk_features_are_the_rows_of_a_dense_click_matrix_and_its_square(with_history):
    # reference: the click walk written as a dense row-stochastic numpy matrix, squared by numpy
    adjacency, _ = _adjacency(40, 0.12, seed=11)
    signals, transition = _signals(adjacency)
    click = np.random.default_rng(3).uniform(0.01, 1.0, 40) if with_history else None
    signals = replace(signals, click_through=click)
    reach = (transition.forward.toarray() > 0) * (np.ones(40) if click is None else click)[None, :]
    totals = reach.sum(axis=1, keepdims=True)
    walk = np.divide(reach, totals, out=np.zeros_like(reach), where=totals > 0)
    square = walk @ walk
    for seed in (0, 9, 33):
        indices, values = _vector(transition, seed)
        pool = candidate_pool(signals, seed, indices, values, pool=5)
        likeliest = np.argsort(-square[seed])[: min(CLICK_WALK, np.count_nonzero(square[seed]))]
        assert set(likeliest.tolist()) - {seed} <= set(pool.tolist())
        features = pair_features(signals, seed, pool, indices, values)
        column = {name: features[:, position] for position, name in enumerate(FEATURES)}
        np.testing.assert_allclose(column["click_share"], walk[seed, pool], rtol=1e-5, atol=1e-7)
        two_steps = np.exp(column["click_two_step_log"])
        np.testing.assert_allclose(two_steps, square[seed, pool] + 1e-12, rtol=1e-4)
        found = click_walk(signals, seed)
        assert found.two.sum() == pytest.approx(square[seed].sum())  # a probability distribution (or 0)


def test_session_windows_are_successive_periods_whose_labels_never_reach_their_features():
    # three hundred readers' sessions of three pages over a year: every window's features read only
    # views before its own period, and each period ends where the later window's begins
    rng = np.random.default_rng(8)
    sessions = 3000
    starts = np.sort(rng.uniform(0, 365 * 86400.0, sessions))
    users = np.repeat(rng.integers(0, 300, sessions), 3)
    times = np.repeat(starts, 3) + np.tile([0.0, 60.0, 120.0], sessions)
    pages = rng.integers(0, 50, times.size)
    adjacency, _ = _adjacency(50, 0.1, seed=1)
    evidence = Evidence.from_links(adjacency, ViewLog(users, pages, times))
    windows = _session_windows(evidence, 10_000, 0, 1800.0)
    assert len(windows) == SESSION_WINDOWS
    later_start = np.inf
    for split, features_evidence, summary in windows:
        cutoff = summary["cutoff"]
        query_times = split.queries.times
        assert query_times.min() >= cutoff and query_times.max() < later_start
        assert features_evidence.views.times.max() < cutoff  # no view of the labels' period or after
        later_start = cutoff


def test_pool_holds_vector_text_and_link_neighbours_never_the_seed_or_archived():
    adjacency, graph = _adjacency(30, 0.1, seed=2)
    similar = sp.csr_array(sp.eye_array(30, k=5, format="csr"), dtype=np.float32)
    signals, transition = _signals(adjacency, similar)
    archived = np.zeros(30, dtype=bool)
    archived[[3, 4]] = True
    signals = replace(signals, archived=archived)
    indices, values = _vector(transition, 1)
    pool = set(candidate_pool(signals, 1, indices, values, pool=5).tolist())
    assert 6 in pool or archived[6]  # the text neighbour of page 1
    assert set(graph.successors(1)) - {3, 4} <= pool and set(graph.predecessors(1)) - {3, 4} <= pool
    assert 1 not in pool and not pool & {3, 4}


def test_the_pages_read_in_most_sessions_are_candidates_of_every_seed_and_their_features_read_them():
    # reading history: pages 20..29 read in many sessions, archived page 3 the most
    adjacency, _ = _adjacency(30, 0.05, seed=4)
    signals, transition = _signals(adjacency)
    sessions = np.zeros(30, dtype=np.float32)
    sessions[20:30] = np.arange(10, 20)
    sessions[3] = 100
    click = np.full(30, 0.02, dtype=np.float32)
    click[25] = 0.5
    archived = np.zeros(30, dtype=bool)
    archived[3] = True
    views = np.zeros(30)
    views[29] = 9
    signals = replace(signals, sessions=sessions, click_through=click, archived=archived, views=views)
    assert signals.popular.tolist() == list(range(20, 30))  # archived page 3 never
    indices, values = _vector(transition, 1)
    pool = candidate_pool(signals, 1, indices, values, pool=2)
    assert set(range(20, 30)) <= set(pool.tolist()) and 3 not in pool
    features = pair_features(signals, 1, pool, indices, values)
    column = {name: features[:, position] for position, name in enumerate(FEATURES)}
    at = {page: row for row, page in enumerate(pool.tolist())}
    assert column["sessions_log"][at[29]] == pytest.approx(np.log1p(19))
    assert np.exp(column["click_through_log"][at[25]]) == pytest.approx(0.5, rel=1e-5)
    out_degree = np.count_nonzero(adjacency.toarray()[29])  # page 29's links, counted by numpy
    assert column["views_out_degree"][at[29]] == pytest.approx(np.log1p(9) * np.log1p(out_degree))


def _held_out_inputs(split):
    """Signals and transition of a held-out-links split's remaining links, its query pages and their
    vectors."""
    signals, transition = _signals(split.links)
    seeds = split.queries.pages[:, 0]
    return signals, transition, seeds, [_vector(transition, int(page)) for page in seeds]


@settings(max_examples=10, deadline=None)
@given(seed=st.integers(min_value=0, max_value=1000))
def test_no_hidden_link_reaches_the_features_of_its_own_query(seed):
    adjacency, _ = _adjacency(50, 0.15, seed=seed)
    split = held_out_links_split(adjacency, share=0.3, seed=seed)
    signals, transition, seeds, vectors = _held_out_inputs(split)
    features, labels, groups, _, _ = examples(signals, seeds, vectors, split.relevant)
    out_link = features[:, FEATURES.index("out_link")]
    assert labels.sum() > 0
    assert np.all(out_link[labels == 1] == 0)  # the hidden link itself is nowhere in the graph read
    # the features are exactly those of a wiki that never had the hidden links
    clean, clean_transition = _signals(sp.csr_array(split.links))
    again = examples(clean, seeds, [_vector(clean_transition, int(page)) for page in seeds], split.relevant)
    assert np.array_equal(again[0], features) and np.array_equal(again[2], groups)


def test_the_links_a_query_page_keeps_are_no_training_candidates():
    # Held-out links: the page's kept links are excluded from every evaluated list (the filtered setting
    # of link prediction); learnt as wrong answers they would teach the model to push a page's own links
    # down its served list. Each pool loses exactly its kept links, and no example has a direct link.
    adjacency, _ = _adjacency(60, 0.12, seed=5)
    split = held_out_links_split(adjacency, share=0.3, seed=2)
    signals, transition, seeds, vectors = _held_out_inputs(split)
    excluded = excluded_pages(split)
    features, labels, groups, _, _ = examples(signals, seeds, vectors, split.relevant, excluded=excluded)
    _, _, all_groups, _, _ = examples(signals, seeds, vectors, split.relevant)
    kept = sp.csr_array(split.links)
    expected = []
    for row, page in enumerate(seeds.tolist()):
        pool = candidate_pool(signals, page, *vectors[row], POOL, click_walk(signals, page))
        targets = split.relevant.indices[split.relevant.indptr[row] : split.relevant.indptr[row + 1]]
        if np.isin(pool, targets).any():
            expected.append(
                pool.size - np.isin(pool, kept.indices[kept.indptr[page] : kept.indptr[page + 1]]).sum()
            )
    assert groups.tolist() == expected and groups.sum() < all_groups.sum()
    assert np.all(features[:, FEATURES.index("out_link")] == 0)


def test_training_is_deterministic_under_a_seed_and_occlusion_matches_the_linear_terms():
    adjacency, _ = _adjacency(80, 0.08, seed=11)
    split = held_out_links_split(adjacency, share=0.3, seed=3)
    signals, transition, seeds, vectors = _held_out_inputs(split)
    features, labels, groups, _, _ = examples(signals, seeds, vectors, split.relevant)
    first = fit_lightgbm(features, labels, groups, seed=4)
    second = fit_lightgbm(features, labels, groups, seed=4)
    assert first.model_to_string() == second.model_to_string()
    assert np.array_equal(
        Ranker("lightgbm", FEATURES, {}, booster=first).score(features),
        Ranker("lightgbm", FEATURES, {}, booster=second).score(features),
    )
    # occlusion of a linear model is exactly its terms: coef · (x − absent) / scale (a worked identity)
    rng = np.random.default_rng(0)
    width = len(FEATURES)
    mean, scale, coef = rng.normal(size=width), rng.uniform(0.5, 2, size=width), rng.normal(size=width)
    linear = Ranker("linear", FEATURES, {}, mean=mean, scale=scale, coef=coef)
    absent = {FEATURES.index("out_link"): 0.0, FEATURES.index("in_link"): 0.0}
    expected = sum(coef[c] * (features[:, c] - value) / scale[c] for c, value in absent.items())
    text = FEATURES.index("text_similarity")
    found, found_text = linear.contributions(features, [absent, {text: 0.0}])
    assert np.allclose(found, expected)
    assert np.allclose(found_text, coef[text] * features[:, text] / scale[text])
    # the trees' attribution in one call equals each group's occluded copy scored apart
    trees = Ranker("lightgbm", FEATURES, {}, booster=first)
    occluded = features.astype(np.float64)
    occluded[:, list(absent)] = 0.0
    (lost,) = trees.contributions(features, [absent])
    assert np.allclose(lost, trees.score(features) - trees.score(occluded))


def _linear(coef: np.ndarray) -> Ranker:
    """A linear ranker scoring ``features @ coef`` (no centring, unit scale)."""
    return Ranker(
        "linear", FEATURES, {}, mean=np.zeros(len(FEATURES)), scale=np.ones(len(FEATURES)), coef=coef
    )


def test_the_reason_names_the_feature_group_with_the_largest_attribution():
    adjacency, _ = _adjacency(30, 0.1, seed=8)
    similar = sp.csr_array(
        (np.full(29, 0.9, dtype=np.float32), (np.zeros(29, dtype=np.int64), np.arange(1, 30))), shape=(30, 30)
    )
    signals, transition = _signals(adjacency, similar)
    indices, values = _vector(transition, 0)
    coef = np.zeros(len(FEATURES))
    coef[FEATURES.index("text_similarity")] = 5.0  # text carries nearly all of every score
    coef[FEATURES.index("ppr_log")] = 0.01
    text_ranker = _linear(coef)
    found = ranked_candidates(
        transition, signals, text_ranker, signals.space, 0, indices, values, damping=0.85, k=5
    )
    assert np.all(found["kind"] == SIMILAR_TEXT)
    coef = np.zeros(len(FEATURES))
    coef[FEATURES.index("ppr_log")] = 1.0  # now only the link walk counts: no item is "similar text"
    link_ranker = _linear(coef)
    found = ranked_candidates(
        transition, signals, link_ranker, signals.space, 0, indices, values, damping=0.85, k=5
    )
    assert not np.any(found["kind"] == SIMILAR_TEXT)
    # sessions went on from page 0 to pages 1..29, and the reading features carry the score
    successors = sp.csr_array(
        (np.linspace(0.9, 0.1, 29, dtype=np.float32), (np.zeros(29, dtype=np.int64), np.arange(1, 30))),
        shape=(30, 30),
    )
    reading_signals = replace(signals, successors=successors)
    coef = np.zeros(len(FEATURES))
    coef[FEATURES.index("goes_on")] = 5.0
    coef[FEATURES.index("text_similarity")] = 0.5
    reading_ranker = _linear(coef)
    found = ranked_candidates(
        transition, reading_signals, reading_ranker, signals.space, 0, indices, values, damping=0.85, k=5
    )
    assert np.all(found["kind"] == READ_ON)
    assert found["pages"].tolist() == [1, 2, 3, 4, 5]  # the strongest successors first


def test_a_restricted_page_never_enters_a_list_through_any_candidate_source(tmp_path):
    adjacency, _ = _adjacency(120, 0.06, seed=1)
    evidence = Evidence.from_links(adjacency)
    restricted = np.arange(0, 120, 7)  # linked to, linking, and (below) textually similar
    incidence = sp.csr_array(
        (np.ones(restricted.size, dtype=np.int8), (restricted, np.zeros(restricted.size, dtype=np.int64))),
        shape=(120, 1),
    )
    evidence = evidence.__class__(
        **{**evidence.__dict__, "group_incidence": incidence, "group_names": ["hr"]}
    )
    words = [f"topic{page % 5} shared words page{page}" for page in range(120)]
    evidence = evidence.__class__(**{**evidence.__dict__, "headings": words, "bodies": words})
    folder = build_from_evidence(evidence, tmp_path / "index", Configuration(ranker="lightgbm"))
    index = load_index(folder)
    assert index.ranker is not None
    hidden = {f"p{page}" for page in restricted.tolist()}
    member = Reader(user="m", groups=frozenset({"hr"}), restart=np.zeros(120), recent=np.zeros(0, np.int64))
    seen_by_member = set()
    for page in range(1, 120, 3):
        if page in set(restricted.tolist()):
            continue
        listed = {item.page for item in related(index, f"p{page}", k=20).items}
        assert listed and not listed & hidden, page
        seen_by_member |= {item.page for item in related(index, f"p{page}", reader=member, k=20).items}
    assert seen_by_member & hidden  # the restricted pages are real candidates: only access keeps them out


def test_a_block_of_seeds_is_ranked_and_explained_as_each_seed_alone():
    # batching the model's calls over a block must not change any list, score or reason
    adjacency, _ = _adjacency(60, 0.08, seed=21)
    split = held_out_links_split(adjacency, share=0.3, seed=2)
    signals, transition, seeds, vectors = _held_out_inputs(split)
    features, labels, groups, _, _ = examples(signals, seeds, vectors, split.relevant)
    ranker = Ranker("lightgbm", FEATURES, {}, booster=fit_lightgbm(features, labels, groups, seed=1))
    block = ranked_block(
        transition, signals, ranker, signals.space, seeds.tolist(), vectors, damping=0.85, k=7
    )
    for seed, (indices, values), found in zip(seeds.tolist(), vectors, block, strict=True):
        alone = ranked_candidates(
            transition, signals, ranker, signals.space, seed, indices, values, damping=0.85, k=7
        )
        assert alone.keys() == found.keys()
        assert all(np.array_equal(alone[name], found[name]) for name in alone)

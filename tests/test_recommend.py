"""Lists: access control, full lists, minimum team size, error bounds, explanations, diversity."""

from __future__ import annotations

import dataclasses
import itertools
import json
import tempfile
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rankrec.build import build_index
from rankrec.configuration import Configuration
from rankrec.errors import GroupTooSmall, UnknownTeam, UnknownUser
from rankrec.graph import load_graph
from rankrec.index import load_index
from rankrec.pagerank import solve_exact
from rankrec.recommend import (
    changes_since,
    landing,
    read_previous,
    reader_from_store,
    recommend,
    related,
    team_from_store,
)
from rankrec.recommend.explain import NO_LINK, VIA_PAGE, contributions
from rankrec.store import Store
from tests.test_index import make_wiki


def _allowed(index, groups) -> np.ndarray:
    """Reference visibility, page by page: no groups, or at least one shared group."""
    allowed = np.zeros(index.size, dtype=bool)
    for page in range(index.size):
        row = index.page_groups.indices[index.page_groups.indptr[page] : index.page_groups.indptr[page + 1]]
        names = {index.group_names[code] for code in row}
        allowed[page] = not names or bool(names & set(groups or ()))
    return allowed


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    seed=st.integers(0, 10_000),
    pages=st.integers(12, 50),
    density=st.floats(0.0, 0.25),
    groups=st.integers(0, 3),
    k=st.integers(1, 30),
    exclude_linked=st.booleans(),
    per_space=st.one_of(st.none(), st.integers(1, 4)),
)
def test_no_list_holds_a_page_its_audience_may_not_see_and_lists_are_full(
    seed, pages, density, groups, k, exclude_linked, per_space
):
    with tempfile.TemporaryDirectory() as scratch:
        wiki = make_wiki(
            Path(scratch) / "wiki.db",
            pages=pages,
            seed=seed,
            density=density,
            groups=groups,
            restricted=0.4,
            archived=0.15,
            users=10,
            teams=1,
            views=6,
        )
        with Store(wiki) as store:
            index = load_index(
                build_index(
                    store,
                    Path(scratch) / "index",
                    Configuration(tol=1e-8, navigation_weight=0.0),
                    hubs=3,
                    k_related=8,
                )
            )
            users = [row[0] for row in store.connection.execute("SELECT user FROM users ORDER BY user")]
            readers = [None, *(reader_from_store(store, index, user) for user in users[:3])]
            team = team_from_store(store, index, "team0", min_readers=1)
            members = [reader_from_store(store, index, user) for user in users]
        archived = np.asarray(index.archived)
        space = np.asarray(index.space)

        def check(result, allowed, excluded=()):
            numbers = [index.page_number(item.page) for item in result.items]
            assert len(set(numbers)) == len(numbers)
            assert all(allowed[n] and not archived[n] and n not in excluded for n in numbers)
            eligible = allowed & ~archived
            eligible[list(excluded)] = False
            if per_space is None:
                assert len(numbers) == min(k, int(eligible.sum()))  # full when enough are eligible
            else:
                counts = np.bincount(space[numbers] + 1, minlength=1)
                assert counts.max(initial=0) <= per_space
                capacity = sum(
                    min(per_space, int(np.sum(eligible & (space == s)))) for s in set(space.tolist())
                )
                assert len(numbers) == min(k, capacity)

        rng = np.random.default_rng(seed)
        for reader in readers:
            allowed = _allowed(index, None if reader is None else reader.groups)
            seed_page = int(rng.integers(index.size))
            excluded = {seed_page}
            if exclude_linked:
                excluded |= set(index.links_from(seed_page).tolist())
            result = related(
                index,
                index.pages[seed_page],
                reader=reader,
                k=k,
                exclude_linked=exclude_linked,
                per_space=per_space,
            )
            check(result, allowed, excluded)
            if reader is not None:
                check(
                    recommend(index, reader, k=k, per_space=per_space), allowed, set(reader.recent.tolist())
                )
                blended = related(
                    index,
                    index.pages[seed_page],
                    reader=reader,
                    k=k,
                    personal_share=0.5,
                    exclude_read=True,
                    per_space=per_space,
                )
                check(blended, allowed, {seed_page, *reader.recent.tolist()})
        every_member = np.logical_and.reduce([_allowed(index, member.groups) for member in members])
        check(landing(index, team, k=k, per_space=per_space), every_member)


@pytest.fixture(scope="module")
def wiki(tmp_path_factory):
    folder = tmp_path_factory.mktemp("recommend")
    path = make_wiki(
        folder / "wiki.db",
        pages=80,
        seed=11,
        density=0.05,
        users=14,
        teams=2,
        views=12,
        groups=2,
        restricted=0.2,
    )
    with Store(path) as store:
        build_index(
            store,
            folder / "index",
            Configuration(tol=1e-10, lift=0.5, navigation_weight=0.0),
            hubs=4,
            k_related=25,
        )
        graph = load_graph(store)
    return path, graph, load_index(folder / "index")


def test_small_teams_are_refused_without_naming_anyone(tmp_path):
    path = make_wiki(tmp_path / "wiki.db", pages=30, users=8, teams=2, views=5)  # 4 readers per team
    with Store(path) as store:
        index = load_index(build_index(store, tmp_path / "index", hubs=2))
        with pytest.raises(GroupTooSmall) as caught:
            team_from_store(store, index, "team0")
        members = [row[0] for row in store.connection.execute("SELECT user FROM users")]
        with pytest.raises(UnknownTeam):
            team_from_store(store, index, "team9")
        team = team_from_store(store, index, "team0", min_readers=4)
    assert (caught.value.readers, caught.value.minimum) == (4, 5)
    text = str(caught.value) + repr(landing(index, team, k=10))
    assert not any(member in text for member in members)


def test_unknown_reader_names_the_closest(wiki):
    path, _, index = wiki
    with Store(path) as store, pytest.raises(UnknownUser) as caught:
        reader_from_store(store, index, "usr03")
    assert "user03" in caught.value.suggestions


def test_personal_scores_lie_within_the_error_bound_of_the_exact_vector(wiki):
    # Reference: direct sparse solve (LU) of the strongly-preferential PageRank of the same restart.
    path, graph, index = wiki
    with Store(path) as store:
        users = [row[0] for row in store.connection.execute("SELECT user FROM users ORDER BY user")]
        readers = [reader_from_store(store, index, user) for user in users[:6]]
    configured = index.configuration.vector_epsilon
    assert index.vector_epsilon >= configured  # the served threshold (rankrec.recommend.calibrate)
    for reader, epsilon in itertools.product(readers, sorted({configured, index.vector_epsilon})):
        result = recommend(index, reader, k=30, lift=0.0, exclude_read=False, epsilon=epsilon)
        exact = solve_exact(graph.adjacency, reader.restart, damping=0.85).vectors
        bound = result.error_bound
        assert 0 < bound < (1e-2 if epsilon == configured else 2.0)
        numbers = np.array([index.page_number(item.page) for item in result.items])
        scores = np.array([item.pagerank for item in result.items])
        assert np.all(np.abs(scores - exact[numbers]) <= bound)
        assert np.all([item.score == item.pagerank for item in result.items])
        # the order agrees with the exact one wherever the exact scores are more than the bound apart
        eligible = _allowed(index, reader.groups) & ~np.asarray(index.archived)
        best = np.flatnonzero(eligible)[np.lexsort((np.flatnonzero(eligible), -exact[eligible]))]
        best = best[exact[best] > 0][: len(numbers)]
        separated = np.r_[np.diff(-exact[best]) > bound, True] & np.r_[True, np.diff(-exact[best]) > bound]
        assert np.array_equal(numbers[: best.size][separated], best[separated])


def _exact_vector(graph, restart):
    return solve_exact(graph.adjacency, restart, damping=0.85).vectors


def _title_page(index, title):
    return next(n for n in range(index.size) if index.titles[n] == title)


def _check_reason(index, graph, vector, item):
    """The named page (or space) really carries the largest share of the item's score (recomputed)."""
    number = index.page_number(item.page)
    matrix = graph.adjacency.tocsc()
    column = matrix[:, [number]].toarray().ravel()
    shares = 0.85 * vector * column / np.asarray(graph.adjacency.sum(axis=1)).ravel().clip(min=1e-300)
    if item.reason.startswith(("via ", "linked from ")) or item.reason.endswith(", which links here"):
        title = item.reason.removeprefix("via ").removeprefix("linked from ").removeprefix("you read ")
        title = title.removesuffix(", which links here")
        named = _title_page(index, title)
        assert shares[named] == pytest.approx(shares.max(), rel=1e-6)
        return "page"
    if item.reason.startswith("mostly reached from pages in space "):
        name = item.reason.rsplit(" ", 1)[1]
        by_space = {
            s: shares[np.asarray(index.space) == code].sum() for code, s in enumerate(index.space_names)
        }
        assert by_space[name] == pytest.approx(max(by_space.values()), rel=1e-6)
        return "space"
    return "other"


def test_explanations_name_the_largest_contributor(wiki):
    path, graph, index = wiki
    kinds = []
    for seed in range(0, graph.size, 3):
        restart = np.zeros(graph.size)
        restart[seed] = 1.0
        exact = _exact_vector(graph, restart)
        for item in related(index, index.pages[seed], k=8).items:
            kinds.append(_check_reason(index, graph, exact, item))
    with Store(path) as store:
        reader = reader_from_store(store, index, "user05")
    exact = _exact_vector(graph, reader.restart)
    kinds += [_check_reason(index, graph, exact, item) for item in recommend(index, reader, k=15).items]
    assert kinds.count("page") > 10 and kinds.count("space") > 0


def test_contributions_match_a_hand_computed_example():
    # Worked example: a star into page 3 from pages 0, 1, 2 with vector values 0.1, 0.5, 0.2;
    # pages 0 and 2 are in space 0, page 1 in space 1. Shares α·x[u]·P[u,3]: 0.085, 0.425, 0.17.
    import scipy.sparse as sp

    links = sp.csr_array(np.array([[0, 0, 0, 1.0], [0, 0, 0, 1.0], [0, 0, 0, 1.0], [0, 0, 0, 0]]))
    x = np.array([0.1, 0.5, 0.2, 0.2])
    found = contributions(
        sp.csr_array(links.T), lambda pages: x[pages], np.array([3]), np.array([0, 1, 0, 0]), damping=0.85
    )
    assert (found.via[0], found.space[0], found.kind[0]) == (1, 1, VIA_PAGE)
    x = np.array([0.3, 0.5, 0.3, 0.2])  # now space 0 (0.6) outweighs page 1 (0.5 of 1.1 < half)
    found = contributions(
        sp.csr_array(links.T), lambda pages: x[pages], np.array([3]), np.array([0, 1, 0, 0]), damping=0.85
    )
    assert (found.via[0], found.space[0], found.kind[0]) == (1, 0, 1)
    none = contributions(
        sp.csr_array(links.T), lambda pages: x[pages], np.array([0]), np.array([0, 1, 0, 0]), damping=0.85
    )
    assert none.kind[0] == NO_LINK


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 10_000), kept=st.floats(0.05, 1.0))
def test_shares_read_from_the_senders_out_links_equal_those_read_from_the_items_in_links(seed, kept):
    # the identity of the module docstring, read from either side of the link matrix: a random graph
    # with a hub every page links to, a sparse vector (a push result) and a few items
    import scipy.sparse as sp

    rng = np.random.default_rng(seed)
    size = 60
    dense = (rng.random((size, size)) < 0.08).astype(float)
    dense[:, 0] = 1.0  # page 0: a hub with every page's link
    np.fill_diagonal(dense, 0.0)
    forward = sp.csr_array(dense / np.maximum(dense.sum(axis=1, keepdims=True), 1.0))
    backward = sp.csr_array(forward.T)
    x = np.where(rng.random(size) < kept, rng.random(size), 0.0)
    items = np.unique(np.r_[0, rng.choice(size, 5, replace=False)])[::-1].copy()
    space = rng.integers(-1, 4, size)
    support = (forward, np.flatnonzero(x), x[x > 0])
    plain = contributions(backward, lambda pages: x[pages], items, space, damping=0.85)
    sent = contributions(backward, lambda pages: x[pages], items, space, damping=0.85, support=support)
    for name in ("via", "space", "kind"):
        assert np.array_equal(getattr(plain, name), getattr(sent, name))


def test_lift_zero_ranks_by_the_exact_personalised_pagerank(wiki):
    # lift 0 forces the full path (the index was built with 0.5): the order is the exact PPR order.
    path, graph, index = wiki
    seed = 4
    restart = np.zeros(graph.size)
    restart[seed] = 1.0
    exact = _exact_vector(graph, restart)
    result = related(index, index.pages[seed], k=6, lift=0.0)
    numbers = [index.page_number(item.page) for item in result.items]
    assert all(np.diff(exact[numbers]) <= 1e-9)
    eligible = index.public & ~np.asarray(index.archived)
    eligible[seed] = False
    assert exact[numbers[-1]] >= np.sort(exact[eligible])[::-1][5] - 1e-9


def test_lift_lowers_site_wide_hubs(wiki):
    _, _, index = wiki
    plain = related(index, index.pages[2], k=10, lift=0.0)
    lifted = related(index, index.pages[2], k=10, lift=1.0)
    global_vector = np.asarray(index.global_vector)

    def mean_global(result):
        return np.mean([global_vector[index.page_number(item.page)] for item in result.items])

    assert mean_global(lifted) < mean_global(plain)
    leaning = related(index, index.pages[2], k=10, lift=-1.0)  # below 0: towards what matters site-wide
    assert mean_global(leaning) > mean_global(plain)


def test_a_negative_lift_multiplies_by_the_global_score():
    # the definition score / global^lift, checked with numpy for lift -1 and -0.5
    from rankrec.recommend.select import lifted

    values, overall = np.array([0.5, 0.3, 0.2]), np.array([0.1, 0.4, 0.5])
    np.testing.assert_allclose(lifted(values, overall, -1.0), values * overall)
    np.testing.assert_allclose(lifted(values, overall, -0.5), values * np.sqrt(overall))


def test_blend_one_follows_the_reader(wiki):
    path, graph, index = wiki
    with Store(path) as store:
        reader = reader_from_store(store, index, "user02")
    blended = related(index, index.pages[7], reader=reader, k=5, personal_share=1.0, lift=0.0)
    personal = recommend(index, reader, k=6, lift=0.0, exclude_read=False)
    expected = [item.page for item in personal.items if item.page != index.pages[7]][:5]
    assert [item.page for item in blended.items] == expected


def test_changes_since_an_earlier_export(tmp_path, wiki):
    path, _, index = wiki
    with Store(path) as store:
        team = team_from_store(store, index, "team0")
    result = landing(index, team, k=5)
    pages = [item.page for item in result.items]
    previous = tmp_path / "previous.json"
    rows = [{"page": pages[1]}, {"page": "gone/page"}, {"page": "x", "change": "left"}]
    previous.write_text(json.dumps(rows))
    entered, left = changes_since(result, read_previous(previous))
    assert entered == frozenset(pages) - {pages[1]} and left == ("gone/page",)


def test_team_vectors_stored_at_build_match_the_exact_solve(wiki, tmp_path):
    # Reference: direct sparse solve (LU) of the team's restart distribution (mean of members' profiles).
    path, graph, index = wiki
    with Store(path) as store:
        team = team_from_store(store, index, "team1")
        fresh = load_index(
            build_index(
                store,
                tmp_path / "no-teams",
                Configuration(team_min_readers=100, navigation_weight=0.0),
                hubs=4,
            )
        )
    exact = solve_exact(graph.adjacency, team.restart, damping=0.85).vectors
    stored = index.team_vector("team1")
    assert index.manifest.counts["teams"] == 2 and fresh.manifest.counts["teams"] == 0
    assert np.abs(stored - exact).sum() <= index.team_error_bound
    solved_now = landing(fresh, team, k=10, lift=0.0)  # not in that index: solved from the profile now
    assert solved_now.error_bound > 0
    numbers = [fresh.page_number(item.page) for item in solved_now.items]
    assert np.all(
        np.abs([item.pagerank for item in solved_now.items] - exact[numbers]) <= solved_now.error_bound
    )
    assert [item.page for item in landing(index, team, k=10, lift=0.0).items][:3] == [
        item.page for item in solved_now.items
    ][:3]


def test_landing_reasons_never_give_exact_or_whole_team_counts(wiki):
    # k-anonymity in outputs (common practice): counts banded to multiples of 5, shown only from the
    # team minimum up, and a page every active reader read is only "widely read".
    import re

    from rankrec.recommend.lists import team_readers

    path, _, index = wiki
    with Store(path) as store:
        team = team_from_store(store, index, "team0", min_readers=1)
    result = landing(index, team, k=40)
    for item in result.items:
        count = int(team.read_by[index.page_number(item.page)])
        found = re.fullmatch(r"read by (\d+) or more of your team", item.reason)
        if found:
            shown = int(found.group(1))
            assert shown % 5 == 0 and 5 <= shown <= count < team.readers
        assert not re.search(rf"\b{team.readers}\b of your team", item.reason)
    assert team_readers(4, 9, 5) is None and team_readers(9, 9, 5) == "widely read in your team"
    assert team_readers(7, 9, 5) == "read by 5 or more of your team"
    assert str(GroupTooSmall("ops", 3, 5)).count("3") == 0


def test_site_hubs_move_below_the_first_places_of_a_related_list(tmp_path):
    # a page linked from every other page is a site hub (rankrec.derive.site_hubs); with lift 0 and no text,
    # a related list is the exact personalised PageRank order (checked against solve_exact above), so
    # with hub_free_top 3 it must be that order with the hub moved to the fourth place
    path = make_wiki(tmp_path / "wiki.db", pages=40, seed=3, density=0.08, groups=0, archived=0.0)
    with Store(path) as store:
        ids = [f"s{number % 3}/page-{number}" for number in range(40)]  # make_wiki's page ids
        hub = ids[0]
        with store.transaction():
            store.put_links((page, hub, 3.0) for page in ids[1:])
        lists = {}
        for top in (0, 3):
            settings = Configuration(tol=1e-10, lift=0.0, navigation_weight=0.0, ranker="none")
            build_index(store, tmp_path / f"index{top}", settings.with_values(hub_free_top=top), k_related=25)
            index = load_index(tmp_path / f"index{top}")
            assert bool(index.hubs[index.page_number(hub)])
            lists[top] = [
                [item.page for item in related(index, page, k=8).items] for page in ids[1:] if page != hub
            ]
    moved = 0
    for plain, served in zip(lists[0], lists[3], strict=True):
        assert hub not in served[:3]
        if hub in plain[:3]:
            moved += 1
            others = [page for page in plain if page != hub]
            assert served == [*others[:3], hub, *others[3:7]]
        else:
            assert served == plain
    assert moved >= 10  # the hub led most plain lists: the rule was exercised


def test_index_pages_are_site_hubs_but_small_wikis_keep_their_hub_pages():
    # reference: a generated site's general index (Sphinx's genindex, DocBook's bookindex) links to most
    # pages; networkx's out_degree_centrality gives the share of pages each page links to
    import networkx as nx
    import scipy.sparse as sp

    from rankrec.derive import INDEX_MIN_LINKS, site_hubs

    rng = np.random.default_rng(4)
    size = 200
    dense = (rng.random((size, size)) < 0.02).astype(float)
    np.fill_diagonal(dense, 0)
    dense[0, 1:] = 1.0  # page 0: the general index, linking to every page
    dense[1, 2:30] = 1.0  # page 1: a chapter page, linking to 14% of the pages
    graph = nx.from_numpy_array(dense, create_using=nx.DiGraph)
    share = nx.out_degree_centrality(graph)  # out-degree / (n - 1)
    hubs = site_hubs(sp.csr_matrix(dense), np.zeros(size))
    listing = np.array([share[page] * (size - 1) >= max(INDEX_MIN_LINKS, 0.2 * size) for page in range(size)])
    in_share = nx.in_degree_centrality(graph)
    wide = np.array([in_share[page] * (size - 1) >= 0.2 * size for page in range(size)])
    assert hubs[0] and not hubs[1]
    np.testing.assert_array_equal(hubs, listing | wide)
    small = np.zeros((12, 12))
    small[0, 1:] = 1.0  # a small wiki's home page linking to its 11 others: under INDEX_MIN_LINKS
    assert not site_hubs(sp.csr_matrix(small), np.zeros(12))[0]


@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 10_000), support=st.integers(0, 30), asked=st.integers(0, 60))
def test_sparse_lookup_through_a_workspace_equals_the_search_and_leaves_it_clean(seed, support, asked):
    # A related list's explanation reads the seed's sparse vector at many in-link sources. Spreading the
    # vector into a borrowed push workspace must give exactly what a binary search gives (reference:
    # a dense numpy array holding the vector), and hand the workspace back all zeros for the next push.
    import scipy.sparse as sp

    from rankrec.pagerank import prepare
    from rankrec.recommend.candidates import _lookup

    rng = np.random.default_rng(seed)
    n = 40
    transition = prepare(sp.csr_array(sp.random(n, n, density=0.1, random_state=seed, format="csr")))
    indices = np.sort(rng.choice(n, support, replace=False))
    values = rng.random(support)
    wanted = rng.integers(0, n, asked)
    dense = np.zeros(n)
    dense[indices] = values
    assert _lookup(indices, values, n, transition)(wanted).tolist() == dense[wanted].tolist()
    assert _lookup(indices, values, n)(wanted).tolist() == dense[wanted].tolist()
    workspace = transition.borrow_workspace()
    assert not any(np.any(array) for array in workspace)
    transition.return_workspace(workspace)


def test_warm_up_asks_for_one_list_of_each_kind(wiki, monkeypatch):
    from rankrec.recommend import warm

    _, _, index = wiki
    asked = []
    for name in ("related", "recommend", "landing"):
        original = getattr(warm, name)
        monkeypatch.setattr(warm, name, lambda *a, _o=original, _n=name, **k: asked.append(_n) or _o(*a, **k))
    assert warm.warm_up(index) > 0 and asked == ["related", "recommend", "landing"] and index.team_names
    asked.clear()
    warm.warm_up(dataclasses.replace(index, team_names=()))  # no stored team vector: no landing
    assert asked == ["related", "recommend"]

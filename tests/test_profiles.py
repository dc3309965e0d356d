"""Reading profiles: time decay, repeat damping, no leakage past the cutoff, team averages, store."""

from __future__ import annotations

import math
import pickle
from types import SimpleNamespace

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st

from rankrec.errors import GroupTooSmall, UnknownTeam, UnknownUser
from rankrec.graph import load_graph
from rankrec.profiles import (
    Profiles,
    load_profiles,
    profile_matrix,
    team_members,
    team_restart,
    user_groups,
)
from rankrec.sources.records import Origin, PageRecord
from rankrec.store import Store

DAY = 86_400.0
NOW = 1_700_000_000.0  # 2023-11-14T22:13:20Z, any fixed cutoff


def _random_views(seed: int, count: int, users: int, pages: int):
    rng = np.random.default_rng(seed)
    return (
        rng.integers(0, users, count),
        rng.integers(-1, pages, count),
        NOW - rng.uniform(-20 * DAY, 200 * DAY, count),  # some views lie after the cutoff
    )


# -- time decay ----------------------------------------------------------------------------------
def test_a_view_one_half_life_old_weighs_half_a_fresh_one():
    # Definition of half-life (exponential decay N(t) = N0 * 2**(-t / t_half); IUPAC Gold Book,
    # "half life"): after one half-life the weight is exactly half.
    for half_life in (1.0, 30.0, 7.5):
        m = profile_matrix([0, 0], [0, 1], [NOW, NOW - half_life * DAY], 2, now=NOW,
                           half_life_days=half_life, repeat="none")  # fmt: skip
        np.testing.assert_allclose(m.toarray(), [[2 / 3, 1 / 3]], rtol=1e-12)


def test_decay_matches_the_closed_form_for_arbitrary_ages():
    # Closed form 0.5 ** (age / half_life), normalised; each page read once, so no repeat damping.
    rng = np.random.default_rng(7)
    ages = rng.uniform(0, 400, 12) * DAY
    m = profile_matrix(np.zeros(12, dtype=int), np.arange(12), NOW - ages, 12, now=NOW,
                       half_life_days=45.0, repeat="none")  # fmt: skip
    expected = 0.5 ** (ages / (45.0 * DAY))
    np.testing.assert_allclose(m.toarray()[0], expected / expected.sum(), rtol=1e-12)


def test_window_drops_views_older_than_it():
    m = profile_matrix([0, 0, 0], [0, 1, 2], [NOW, NOW - 10 * DAY, NOW - 11 * DAY], 3, now=NOW,
                       window_days=10.5, repeat="none")  # fmt: skip
    assert m[0, 2] == 0 and m[0, 1] > 0
    np.testing.assert_allclose(m.sum(), 1.0)


# -- normalisation -------------------------------------------------------------------------------
@pytest.mark.parametrize("repeat", ["log", "cap", "none"])
def test_rows_sum_to_one_or_are_empty(repeat):
    users, pages, times = _random_views(3, 5_000, 300, 80)
    m = profile_matrix(users, pages, times, 80, now=NOW, repeat=repeat, user_count=320)
    sums = np.asarray(m.sum(axis=1)).ravel()
    eligible = (pages >= 0) & (times <= NOW)
    readers = np.zeros(320, dtype=bool)
    readers[users[eligible]] = True
    np.testing.assert_allclose(sums[readers], 1.0, rtol=1e-12)
    assert np.all(sums[~readers] == 0) and np.all(m.data > 0)
    assert m.shape == (320, 80) and not readers[300:].any()


def test_matches_a_plain_python_recomputation():
    # An independent per-view loop (dict of sums, then log1p, then divide) as reference.
    users, pages, times = _random_views(11, 400, 12, 9)
    m = profile_matrix(users, pages, times, 9, now=NOW, half_life_days=20.0)
    sums: dict[tuple[int, int], float] = {}
    for user, page, time in zip(users.tolist(), pages.tolist(), times.tolist(), strict=True):
        if page >= 0 and time <= NOW:
            sums[user, page] = sums.get((user, page), 0.0) + 0.5 ** ((NOW - time) / (20.0 * DAY))
    expected = np.zeros((12, 9))
    for (user, page), weight in sums.items():
        expected[user, page] = math.log1p(weight)
    expected /= np.where(expected.sum(axis=1, keepdims=True) > 0, expected.sum(axis=1, keepdims=True), 1)
    np.testing.assert_allclose(m.toarray(), expected, rtol=1e-12, atol=1e-15)


# -- repeat damping ------------------------------------------------------------------------------
def _heavy_and_light(repeat: str, **options):
    # One page read 200 times (one second apart, so decay is negligible) and one read once.
    times = np.concatenate([NOW - np.arange(200.0), [NOW]])
    pages = np.concatenate([np.zeros(200, dtype=int), [1]])
    m = profile_matrix(np.zeros(201, dtype=int), pages, times, 2, now=NOW, half_life_days=1e9,
                       repeat=repeat, **options)  # fmt: skip
    return m.toarray()[0]


def test_repeat_damping_log_cap_and_none():
    log = _heavy_and_light("log")
    np.testing.assert_allclose(log[0], math.log1p(200) / (math.log1p(200) + math.log1p(1)), rtol=1e-9)
    assert log[0] < 0.9 < 200 / 201  # far below the undamped share
    np.testing.assert_allclose(_heavy_and_light("none")[0], 200 / 201, rtol=1e-9)
    np.testing.assert_allclose(_heavy_and_light("cap", cap=3)[0], 3 / 4, rtol=1e-9)


def test_cap_keeps_the_most_recent_views():
    # Page 0: fresh views at ages 0, 1, 2 half-lives and one at 10; with cap=2 only ages 0 and 1 count.
    ages = np.array([10.0, 0.0, 2.0, 1.0]) * DAY
    m = profile_matrix([0, 0, 0, 0, 0], [0, 0, 0, 0, 1], np.concatenate([NOW - ages, [NOW]]), 2,
                       now=NOW, half_life_days=1.0, repeat="cap", cap=2)  # fmt: skip
    np.testing.assert_allclose(m.toarray()[0], np.array([1.5, 1.0]) / 2.5, rtol=1e-12)


def test_dwell_weighting_caps_at_ten_minutes_and_treats_unknown_as_neutral():
    # Dwell capped at 600 s (common practice); a missing dwell counts as one minute (factor 1).
    dwell = np.array([60.0, 3_600.0, np.nan, 30.0])
    m = profile_matrix([0, 0, 0, 0], [0, 1, 2, 3], np.full(4, NOW), 4, now=NOW, repeat="none",
                       dwell=dwell, dwell_weighting=True)  # fmt: skip
    expected = np.array([1.0, 10.0, 1.0, 0.5])
    np.testing.assert_allclose(m.toarray()[0], expected / expected.sum(), rtol=1e-12)
    plain = profile_matrix([0, 0, 0, 0], [0, 1, 2, 3], np.full(4, NOW), 4, now=NOW, dwell=dwell)
    np.testing.assert_allclose(plain.toarray()[0], 0.25)  # dwell given but weighting off: ignored


# -- no leakage ----------------------------------------------------------------------------------
_future = st.lists(
    st.tuples(
        st.integers(0, 7),
        st.integers(-1, 5),
        st.floats(min_value=1e-3, max_value=1e8, allow_nan=False),  # seconds after the cutoff
        st.one_of(st.none(), st.floats(min_value=0, max_value=1e5)),
    ),
    max_size=40,
)


@settings(max_examples=80, deadline=None)
@given(future=_future, repeat=st.sampled_from(["log", "cap", "none"]), seed=st.integers(0, 2**32 - 1))
def test_views_after_now_never_change_the_profiles(future, repeat, seed):
    # The no-leakage rule of temporal evaluation: a profile for cutoff `now` uses nothing later.
    users, pages, times = _random_views(5, 60, 8, 6)
    times = np.minimum(times, NOW)
    dwell = np.random.default_rng(5).uniform(0, 900, 60)
    options = {"repeat": repeat, "dwell_weighting": True, "user_count": 8}
    before = profile_matrix(users, pages, times, 6, now=NOW, dwell=dwell, **options)
    extra_users = np.array([view[0] for view in future], dtype=np.int64)
    extra_pages = np.array([view[1] for view in future], dtype=np.int64)
    extra_times = NOW + np.array([view[2] for view in future], dtype=float)
    extra_dwell = np.array([np.nan if view[3] is None else view[3] for view in future], dtype=float)
    order = np.random.default_rng(seed).permutation(60 + len(future))  # future views anywhere
    after = profile_matrix(
        np.concatenate([users, extra_users])[order],
        np.concatenate([pages, extra_pages])[order],
        np.concatenate([times, extra_times])[order],
        6,
        now=NOW,
        dwell=np.concatenate([dwell, extra_dwell])[order],
        **options,
    )
    np.testing.assert_allclose(after.toarray(), before.toarray(), rtol=1e-14, atol=0)


# -- teams ---------------------------------------------------------------------------------------
def test_team_restart_is_the_mean_of_normalised_member_rows():
    rng = np.random.default_rng(2)
    raw = sp.random(30, 15, density=0.3, format="csr", random_state=rng) * 10
    members = [3, 7, 7, 12, 20, 25, 29]  # 7 twice: counted once
    dense = raw.toarray()[sorted(set(members))]
    active = dense[dense.sum(axis=1) > 0]
    expected = (active / active.sum(axis=1, keepdims=True)).mean(axis=0)
    result = team_restart(raw, members, min_readers=3)
    np.testing.assert_allclose(result, expected, rtol=1e-12)
    np.testing.assert_allclose(result.sum(), 1.0)


def test_a_heavy_reader_gets_one_share_per_member():
    users = np.concatenate([np.zeros(1_000, dtype=int), np.arange(1, 5)])
    pages = np.concatenate([np.zeros(1_000, dtype=int), np.arange(1, 5)])
    times = NOW - np.arange(users.size, dtype=float)
    profiles = profile_matrix(users, pages, times, 5, now=NOW, repeat="none")
    restart = team_restart(profiles, range(5), min_readers=5)
    np.testing.assert_allclose(restart, 0.2, rtol=1e-9)  # 1/5 each, not 1000/1004 for page 0


def test_too_few_active_readers_is_refused_without_naming_anyone():
    profiles = Profiles(
        matrix=sp.csr_matrix(np.array([[1.0, 0], [0, 1], [0, 0], [0, 0]])),
        users=("ida.halvard", "ove.brandt", "mira.lund", "sten.okafor"),
        now=NOW,
    )
    with pytest.raises(GroupTooSmall) as caught:
        team_restart(profiles, list(profiles.users), min_readers=3, team="calibration")
    error = caught.value
    assert (error.team, error.readers, error.minimum) == ("calibration", 2, 3)  # empty rows not counted
    assert "calibration" in str(error) and not any(user in str(error) for user in profiles.users)
    assert str(pickle.loads(pickle.dumps(error))) == str(error)
    np.testing.assert_allclose(team_restart(profiles, ["ida.halvard", "ove.brandt"], min_readers=2), 0.5)


# -- validation ----------------------------------------------------------------------------------
@pytest.mark.parametrize(
    ("change", "error", "name"),
    [
        ({"half_life_days": 0}, ValueError, "half_life_days"),
        ({"repeat": "sqrt"}, ValueError, "repeat"),
        ({"cap": 0}, ValueError, "cap"),
        ({"window_days": -1.0}, ValueError, "window_days"),
        ({"now": "tomorrow"}, TypeError, "now"),
        ({"pages": [0, 2]}, ValueError, "pages"),
        ({"users": [0.0, 1.0]}, TypeError, "users"),
        ({"times": [1.0]}, ValueError, "times"),
        ({"dwell_weighting": True}, ValueError, "dwell"),
        ({"dwell_weighting": True, "dwell": [-1.0, 5.0]}, ValueError, "dwell"),
        ({"user_count": 1}, ValueError, "user_count"),
    ],
)
def test_bad_arguments_name_the_parameter(change, error, name):
    arguments = {"users": [0, 1], "pages": [0, 1], "times": [NOW, NOW], "size": 2, "now": NOW} | change
    with pytest.raises(error, match=name):
        profile_matrix(**arguments)


def test_team_restart_rejects_rows_outside_the_matrix():
    with pytest.raises(ValueError, match="members"):
        team_restart(sp.identity(3, format="csr"), [0, 3], min_readers=1)


# -- from the store ------------------------------------------------------------------------------
@pytest.fixture
def store(tmp_path):
    store = Store(tmp_path / "wiki.db")
    with store.transaction():
        for page in ("ops/backup", "ops/restore", "lab/oscilloscope"):
            store.put_page(PageRecord(page=page, title=page, origin=Origin("t")))
        store.put_views(
            [
                ("ida.halvard", "ops/backup", NOW - 30 * DAY, 600.0),
                ("ida.halvard", "ops/restore", NOW, 60.0),
                ("ida.halvard", "ops/ghost", NOW, None),  # a page outside the graph
                ("ove.brandt", "lab/oscilloscope", NOW - DAY, None),
            ]
        )
        store.user_id("mira.lund")  # a known user without views
        store.put_memberships(
            [("team", "calibration", "ida.halvard"), ("team", "calibration", "ove.brandt")]
            + [("group", "lab-staff", "ove.brandt"), ("group", "security", "ove.brandt")]
        )
    yield store
    store.close()


def test_load_profiles_from_a_store(store):
    graph = load_graph(store)
    profiles = load_profiles(store, graph, repeat="none")
    assert profiles.now == NOW  # the latest view
    assert profiles.users == ("ida.halvard", "ove.brandt", "mira.lund")
    assert profiles.matrix.shape == (3, graph.size)
    ida = profiles.restart("ida.halvard")
    backup, restore = graph.page_number("ops/backup"), graph.page_number("ops/restore")
    np.testing.assert_allclose([ida[backup], ida[restore]], [1 / 3, 2 / 3], rtol=1e-12)  # one half-life
    assert profiles.restart("mira.lund").sum() == 0
    with pytest.raises(UnknownUser) as caught:
        profiles.row_of("ida.halvrd")
    assert caught.value.suggestions[0] == "ida.halvard"


def test_load_profiles_with_dwell_and_an_earlier_cutoff(store):
    graph = load_graph(store)
    weighted = load_profiles(store, graph, repeat="none", dwell_weighting=True, half_life_days=1e9)
    ida = weighted.restart("ida.halvard")
    np.testing.assert_allclose(ida[graph.page_number("ops/backup")], 10 / 11, rtol=1e-6)  # 10 min vs 1 min
    earlier = load_profiles(store, graph, now=NOW - 2 * DAY)
    np.testing.assert_allclose(earlier.restart("ida.halvard")[graph.page_number("ops/backup")], 1.0)
    assert earlier.restart("ove.brandt").sum() == 0 and earlier.now == NOW - 2 * DAY


def test_team_members_and_user_groups(store):
    assert team_members(store, "calibration") == ("ida.halvard", "ove.brandt")
    with pytest.raises(UnknownTeam) as caught:
        team_members(store, "calibratoin")
    assert caught.value.suggestions == ("calibration",)
    assert user_groups(store, "ove.brandt") == frozenset({"lab-staff", "security"})
    assert user_groups(store, "ida.halvard") == frozenset()
    assert user_groups(store, "nobody") == frozenset()
    profiles = load_profiles(store, load_graph(store))
    restart = team_restart(profiles, team_members(store, "calibration"), min_readers=2)
    np.testing.assert_allclose(restart.sum(), 1.0)
    with pytest.raises(GroupTooSmall):
        team_restart(profiles, team_members(store, "calibration"), team="calibration")


def test_a_user_arriving_during_load_profiles_waits_for_the_next_call(tmp_path):
    # Regression: users and views were read in two queries, so a user whose first view was
    # stored between them had a view but no row ("users must be dense numbers >= 0; got -1").
    path = tmp_path / "wiki.db"

    class Racing(Store):
        def users(self):
            found = super().users()
            with Store(path) as writer:  # another connection commits between the two reads
                writer.append_views([SimpleNamespace(user="new.reader", page="ops/backup", timestamp=NOW)])
            return found

    with Store(path) as setup, setup.transaction():
        setup.put_page(PageRecord(page="ops/backup", title="Backup", origin=Origin("t")))
        setup.put_views([("ida.halvard", "ops/backup", NOW - DAY, None)])
    with Racing(path) as store:
        graph = load_graph(store)
        profiles = load_profiles(store, graph)
        assert profiles.users == ("ida.halvard",) and profiles.now == NOW - DAY
        assert load_profiles(store, graph).users == ("ida.halvard", "new.reader")  # seen next time

"""Splits: hand examples, a plain-Python reference of the 30-minute session rule, no-leakage properties."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st

from rankrec.evaluate.baselines import covisitation, team_counts, training_counts
from rankrec.evaluate.splits import (
    assert_no_leakage,
    excluded_pages,
    last_n_split,
    session_numbers,
    session_split,
    temporal_split,
    training_pages,
)

HOUR = 3600.0


def _sets(matrix) -> list[set[int]]:
    matrix = sp.csr_array(matrix)
    bounds = zip(matrix.indptr[:-1], matrix.indptr[1:], strict=True)
    return [set(matrix.indices[a:b].tolist()) for a, b in bounds]


# ------------------------------------------------------------------------------------------- temporal


def test_temporal_hand_example_new_only_and_graded():
    # user 0 reads 0, 1 before the cutoff and 1, 2, 2 after; user 1 only after; user 2 only before
    users = [0, 0, 0, 0, 0, 1, 2]
    pages = [0, 1, 1, 2, 2, 3, 3]
    times = [1.0, 2, 11, 12, 13, 14, 3]
    split = temporal_split(users, pages, times, 4, cutoff=10.0, gains="graded")
    assert split.cutoff == split.train_until == 10.0
    assert split.queries.users.tolist() == [0]
    assert split.relevant.toarray().tolist() == [[0, 0, 2, 0]]  # page 1 is a re-read: not new
    assert split.counts["dropped_without_history"] == 1  # user 1 has no training view
    assert sorted(split.train.pages.tolist()) == [0, 1, 3]
    assert excluded_pages(split).toarray().tolist() == [[1, 1, 0, 0]]
    everything = temporal_split(users, pages, times, 4, cutoff=10.0, new_only=False)
    assert everything.relevant.toarray().tolist() == [[0, 1, 1, 0]]
    assert excluded_pages(everything).nnz == 0  # re-reads are relevant, so nothing is excluded
    assert_no_leakage(split)
    assert_no_leakage(everything)


def test_temporal_default_cutoff_is_last_fifth_of_the_span():
    split = temporal_split([0, 0, 0], [0, 1, 2], [100.0, 150, 200], 3)
    assert split.cutoff == pytest.approx(180.0)  # 100 + 0.8 * 100
    assert split.queries.users.tolist() == [0] and split.relevant.toarray().tolist() == [[0, 0, 1]]


def test_split_arrays_are_read_only():
    split = temporal_split([0, 0], [0, 1], [0.0, 9], 2, cutoff=5.0)
    for array in (split.train.pages, split.queries.users, split.relevant.data, split.held_out.times):
        with pytest.raises(ValueError):
            array[...] = 0


@pytest.mark.parametrize(
    ("arguments", "error"),
    [
        (([0], [5], [0.0], 3), ValueError),  # page outside the catalogue
        (([0, 1], [0], [0.0], 3), ValueError),  # lengths differ
        (([0.5], [0], [0.0], 3), TypeError),  # user codes must be integers
        (([-1], [0], [0.0], 3), ValueError),
        (([0], [0], [np.nan], 3), ValueError),
    ],
)
def test_bad_views_are_refused(arguments, error):
    with pytest.raises(error):
        temporal_split(*arguments, cutoff=1.0)


def test_bad_settings_are_refused():
    with pytest.raises(ValueError, match="test_share"):
        temporal_split([0], [0], [0.0], 1, test_share=1.5)
    with pytest.raises(ValueError, match="gains"):
        session_split([0], [0], [0.0], 1, gains="log")
    with pytest.raises(ValueError, match="n must"):
        last_n_split([0], [0], [0.0], 1, n=0)


# --------------------------------------------------------------------------------------------- last n


def test_last_n_global_cap_keeps_everyone_before_the_earliest_held_out_view():
    # user 0: views at 0, 1, 8, 9 (holds out 9); user 1: views at 2, 7 (holds out 7)
    users = [0, 0, 0, 0, 1, 1]
    pages = [0, 1, 2, 3, 0, 4]
    times = [0.0, 1, 8, 9, 2, 7]
    split = last_n_split(users, pages, times, 5, n=1, test_share=None)
    assert split.cutoff == 7.0  # user 1's held-out view is the earliest
    assert split.queries.users.tolist() == [0, 1]
    assert _sets(split.relevant) == [{3}, {4}]
    # user 0's view at t=8 precedes their own hold-out but follows user 1's query: nobody trains on it
    assert sorted(split.train.times.tolist()) == [0.0, 1.0, 2.0]
    assert split.counts["unused_views"] == 1
    assert_no_leakage(split)
    two = last_n_split(users, pages, times, 5, n=2, test_share=None)
    # user 1 has only two views, so with n = 2 nothing of theirs would train: not a test user
    assert two.queries.users.tolist() == [0] and two.cutoff == 8.0 and _sets(two.relevant) == [{2, 3}]


def test_last_n_without_cap_is_classic_leave_last_out_and_says_so():
    users = [0, 0, 0, 1, 1]
    pages = [0, 1, 2, 3, 4]
    times = [0.0, 1, 2, 5, 9]
    split = last_n_split(users, pages, times, 5, n=1, test_share=None, global_cap=False)
    assert split.cutoff is None and split.train_until == np.inf
    assert split.queries.times.tolist() == [2.0, 9.0]  # each user's own first held-out view
    # user 1's view at t=5 trains although it follows user 0's query at t=2: the documented leak
    assert 5.0 in split.train.times.tolist()
    assert_no_leakage(split)  # the per-user rule still holds


def test_last_n_test_share_picks_recent_users_and_unused_views_are_counted():
    users = [0, 0, 1, 1, 1]
    pages = [0, 1, 0, 1, 2]
    times = [0.0, 1, 2, 9, 10]
    split = last_n_split(users, pages, times, 3, n=1, test_share=0.5)
    # user 0's last view (t=1) is not in the last half of [0, 10]: only user 1 is a test user
    assert split.queries.users.tolist() == [1] and split.cutoff == 10.0
    assert split.counts["unused_views"] == 0 and len(split.train) == 4
    capped = last_n_split(users, pages, times, 3, n=1, test_share=None)
    # every user is a test user: the cap is user 0's held-out view at t=1; user 1's views at 2 and 9 are
    # before their own hold-out but after the cap, so nobody uses them; user 1 has no training view left
    assert capped.cutoff == 1.0 and capped.counts["unused_views"] == 2
    assert capped.queries.users.tolist() == [0] and capped.counts["dropped_without_history"] == 1


# ------------------------------------------------------------------------------------------- sessions


def test_session_hand_example():
    # user 0: a session at 0..1800 (a pause of exactly 30 minutes stays inside), then one at 10 h
    # user 1: one session after the cutoff whose continuation only repeats its prefix page (dropped)
    users = [0, 0, 0, 0, 0, 0, 1, 1]
    pages = [0, 1, 2, 3, 4, 3, 5, 5]
    times = [0.0, 1800, 3601, 10 * HOUR, 10 * HOUR + 60, 10 * HOUR + 120, 11 * HOUR, 11 * HOUR + 5]
    assert session_numbers(np.array(users), np.array(times)).tolist() == [0, 0, 1, 2, 2, 2, 3, 3]
    split = session_split(users, pages, times, 6, cutoff=5 * HOUR, gains="graded")
    assert split.cutoff is None and split.train_until == 5 * HOUR
    assert split.queries.pages.tolist() == [[3]]
    assert split.queries.users.tolist() == [0] and split.queries.times.tolist() == [10 * HOUR]
    assert split.relevant.toarray().tolist() == [[0, 0, 0, 0, 1, 0]]  # page 3 again is the prefix page
    assert split.counts["dropped_without_relevant"] == 1
    assert sorted(split.train.pages.tolist()) == [0, 1, 2]
    assert excluded_pages(split).toarray().tolist() == [[0, 0, 0, 1, 0, 0]]
    two = session_split(users, pages, times, 6, cutoff=5 * HOUR, prefix=2)
    # user 0's continuation after [3, 4] is only page 3 again; user 1's session has just two views
    assert len(two.queries) == 0 and two.queries.pages.shape == (0, 2) and two.relevant.shape == (0, 6)
    assert two.counts["dropped_without_relevant"] == 1 and two.counts["dropped_too_short"] == 1


def _reference_sessions(users, times, gap=1800.0):
    """The 30-minute rule in plain Python: sort each reader's views by time, cut where a pause exceeds gap."""
    order = sorted(range(len(users)), key=lambda i: (users[i], times[i], i))
    numbers, number, previous = {}, -1, None
    for i in order:
        if previous is None or users[i] != users[previous] or times[i] - times[previous] > gap:
            number += 1
        numbers[i] = number
        previous = i
    return order, numbers


@settings(max_examples=60, deadline=None)
@given(
    st.lists(st.tuples(st.integers(0, 4), st.integers(0, 7), st.integers(0, 40)), min_size=1, max_size=80),
    st.integers(1, 3),
    st.integers(0, 40),
)
def test_session_split_matches_plain_python_reference(rows, prefix, cutoff_step):
    users = [row[0] for row in rows]
    pages = [row[1] for row in rows]
    times = [row[2] * 600.0 for row in rows]  # steps of 10 minutes: pauses of 30 minutes and more occur
    cutoff = cutoff_step * 600.0
    order, numbers = _reference_sessions(users, times)
    expected_numbers = [numbers[i] for i in order]
    assert session_numbers(np.array(users)[order], np.array(times)[order]).tolist() == expected_numbers
    sessions: dict[int, list[int]] = {}
    for i in order:
        sessions.setdefault(numbers[i], []).append(i)
    expected = {}
    for members in sessions.values():
        if times[members[0]] < cutoff or len(members) <= prefix:
            continue
        head = [pages[i] for i in members[:prefix]]
        rest = {pages[i] for i in members[prefix:]} - set(head)
        if rest:
            expected[(users[members[0]], times[members[0]])] = (head, rest)
    split = session_split(users, pages, times, 8, cutoff=cutoff, prefix=prefix)
    found = {
        (int(user), float(time)): ([int(p) for p in row if p >= 0], relevant)
        for user, time, row, relevant in zip(
            split.queries.users, split.queries.times, split.queries.pages, _sets(split.relevant), strict=True
        )
    }
    assert found == expected
    assert sorted(split.train.times.tolist()) == sorted(t for t in times if t < cutoff)
    assert_no_leakage(split)


# ------------------------------------------------------------------------------------------- leakage


@st.composite
def _views_with_distinctive_test_pages(draw):
    """Random views where pages 10..14 are only ever viewed at or after the cutoff."""
    cutoff = draw(st.floats(100.0, 900.0))
    count = draw(st.integers(5, 80))
    users = draw(st.lists(st.integers(0, 5), min_size=count, max_size=count))
    times = draw(st.lists(st.floats(0.0, 1000.0), min_size=count, max_size=count))
    pages = draw(st.lists(st.integers(0, 9), min_size=count, max_size=count))
    late = draw(
        st.lists(
            st.tuples(st.integers(0, 5), st.integers(10, 14), st.floats(0.0, 1.0)), min_size=1, max_size=20
        )
    )
    for user, page, share in late:
        users.append(user)
        pages.append(page)
        times.append(cutoff + share * (1000.0 - cutoff))
    return np.array(users), np.array(pages), np.array(times), cutoff


DISTINCTIVE = np.arange(10, 15)


def _assert_nothing_distinctive_trains(split):
    assert not np.isin(split.train.pages, DISTINCTIVE).any()
    assert not training_counts(split.train)[DISTINCTIVE].any()
    cosine = covisitation(split.train, gap=60.0)
    assert cosine[DISTINCTIVE].nnz == 0 and cosine[:, DISTINCTIVE].nnz == 0
    assert team_counts(split.train, np.arange(6) % 2)[:, DISTINCTIVE].nnz == 0
    assert training_pages(split)[:, DISTINCTIVE].nnz == 0


@settings(max_examples=60, deadline=None)
@given(_views_with_distinctive_test_pages(), st.booleans())
def test_no_test_period_page_reaches_training(views, new_only):
    users, pages, times, cutoff = views
    temporal = temporal_split(users, pages, times, 15, cutoff=cutoff, new_only=new_only)
    sessions = session_split(users, pages, times, 15, cutoff=cutoff, gap=60.0)
    for split in (temporal, sessions):
        assert_no_leakage(split)
        assert split.train_until == cutoff
        _assert_nothing_distinctive_trains(split)
    # every held-out view is at or after the cutoff, and every distinctive view is held out or unused
    assert (temporal.held_out.times >= cutoff).all()


@settings(max_examples=60, deadline=None)
@given(_views_with_distinctive_test_pages(), st.integers(1, 3))
def test_last_n_with_cap_trains_on_nothing_at_or_after_any_held_out_view(views, n):
    users, pages, times, _ = views
    split = last_n_split(users, pages, times, 15, n=n, test_share=None)
    assert_no_leakage(split)
    if len(split.held_out):
        assert split.train.times.max(initial=-np.inf) < split.held_out.times.min()
    # pages viewed only at or after the cap never count for any model
    late_only = np.setdiff1d(pages[times >= split.train_until], pages[times < split.train_until])
    assert not training_counts(split.train)[late_only].any()


def test_assert_no_leakage_catches_a_leaky_split():
    split = temporal_split([0, 0, 0], [0, 1, 2], [0.0, 1, 9], 3, cutoff=5.0)
    leaky = dataclasses.replace(split, train=dataclasses.replace(split.train, times=np.array([0.0, 7.0])))
    with pytest.raises(ValueError, match="leaks"):
        assert_no_leakage(leaky)
    wrong = dataclasses.replace(split, relevant=sp.csr_array(np.array([[1.0, 0.0, 0.0]])))
    with pytest.raises(ValueError, match="excluded"):
        assert_no_leakage(wrong)  # page 0 was read in training, so with new_only it cannot be relevant

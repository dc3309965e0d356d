"""The serving fast paths give the lists of the plain rule: list filling from a head of the global
order (checked against Python's sorted()), related lists asked for by page number, string tables
read through memoryviews (checked against Python's own UTF-8 decoding)."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rankrec._arrays import save_strings
from rankrec.index import StringTable, load_index
from rankrec.recommend import related
from rankrec.recommend.select import select_pages
from tests.evaluate.test_method import _reference_selection
from tests.test_recommend import wiki  # noqa: F401 (module fixture: an 80-page built index)


@settings(max_examples=60, deadline=None)
@given(st.integers(0, 2**32 - 1), st.integers(1, 40), st.sampled_from([0.0, 0.5, 1.0]), st.booleans())
def test_select_pages_on_long_vectors_follows_its_rule(seed, k, lift, given_order):
    """Few scored pages among hundreds, so most places are filled by global PageRank; ties everywhere.
    Reference: the documented rule written with Python's sorted() (tests/evaluate/test_method.py)."""
    rng = np.random.default_rng(seed)
    n, columns = int(rng.integers(50, 1500)), int(rng.integers(1, 4))
    vectors = np.where(rng.random((n, columns)) < 0.02, rng.integers(1, 4, size=(n, columns)) / 4.0, 0.0)
    overall = rng.integers(1, 5, size=n) / 8.0
    # eligibility low at times, so the first head of the global order does not hold enough pages
    eligible = rng.random((n, columns)) < rng.choice([0.02, 0.3, 0.9])
    order = np.lexsort((np.arange(n), -overall)) if given_order else None
    found = select_pages(vectors, overall, eligible, k, lift=lift, order=order)
    for column in range(columns):
        expected = _reference_selection(vectors[:, column], overall, eligible[:, column], k, lift)
        assert found[column].tolist() == expected
        one = select_pages(vectors[:, column], overall, eligible[:, column], k, lift=lift, order=order)
        assert one.tolist() == expected


def test_select_pages_refuses_an_order_of_the_wrong_shape():
    with pytest.raises(ValueError, match="order"):
        select_pages(np.ones(3), np.ones(3), np.ones(3, bool), 2, lift=0.0, order=np.arange(4))


def test_global_order_is_descending_pagerank_ties_to_the_lower_page(wiki):  # noqa: F811
    _, _, index = wiki
    values = np.asarray(index.global_vector).tolist()
    expected = sorted(range(index.size), key=lambda page: (-values[page], page))  # Python's sorted()
    assert index.global_order.tolist() == expected


def test_related_by_page_number_equals_related_by_page_id(wiki):  # noqa: F811
    _, _, index = wiki
    for number in range(0, index.size, 7):
        page = index.pages[number]
        for options in ({"k": 10}, {"k": 40, "exclude_linked": True}, {"k": 5, "per_space": 1}):
            by_id, by_number = related(index, page, **options), related(index, number, **options)
            assert by_number.subject == page
            assert by_number.items == by_id.items and by_number.eligible == by_id.eligible


@pytest.mark.parametrize(
    ("page", "error", "match"),
    [
        (-1, ValueError, "page number"),
        (10_000, ValueError, "page number"),
        (True, TypeError, "page"),
        (2.0, TypeError, "page"),
    ],
)
def test_related_refuses_a_bad_page_number(wiki, page, error, match):  # noqa: F811
    _, _, index = wiki
    with pytest.raises(error, match=match):
        related(index, page)


def test_string_table_decodes_like_python(tmp_path):
    # Python's own str.encode/bytes.decode are the reference; empty, accented and non-BMP strings
    values = ["", "ops/patching", "réseau/übergabe", "a" * 300, "\U0001f4d8 handbook", "x/y/z"]
    save_strings(tmp_path, "names", values)
    table = StringTable(
        np.load(tmp_path / "names.bytes.npy", mmap_mode="r"),
        np.load(tmp_path / "names.offsets.npy", mmap_mode="r"),
    )
    assert len(table) == len(values)
    assert [table[position] for position in range(len(values))] == values


def test_loaded_arrays_are_plain_views_of_the_mapping(wiki):  # noqa: F811
    _, _, index = wiki
    again = load_index(index.folder)
    for array in (again.archived, again.page_order, again.global_vector, again.related["pages"]):
        assert type(array) is np.ndarray and not array.flags.owndata

"""The basis: exact linear combination, push for the rest, persistence and staleness."""

from __future__ import annotations

import json

import numpy as np
import pytest
import scipy.sparse as sp

from rankrec.basis import build_basis, load_basis, save_basis
from rankrec.errors import InputError, StaleBasis
from rankrec.graph import WikiGraph
from rankrec.pagerank import prepare, solve_exact


def _graph(n=60, density=0.06, dangling=6, seed=3, fingerprint="g1"):
    rng = np.random.default_rng(seed)
    dense = (rng.random((n, n)) < density) * rng.integers(1, 4, (n, n))
    np.fill_diagonal(dense, 0)
    dense[rng.choice(n, dangling, replace=False)] = 0  # pages without out-links
    adjacency = sp.csr_matrix(dense.astype(float))
    pages = np.array([f"space{i % 4}/page-{i}" for i in range(n)], dtype=object)
    return WikiGraph(pages=pages, adjacency=adjacency, row_ids=np.arange(n), fingerprint=fingerprint)


def _topics(graph):
    return {f"space:{s}": np.flatnonzero([p.startswith(f"space{s}/") for p in graph.pages]) for s in range(4)}


@pytest.fixture(scope="module")
def built():
    graph = _graph()
    transition = prepare(graph.adjacency)
    basis = build_basis(graph, transition, _topics(graph), np.array([0, 5, 7]), tol=1e-9, block=3)
    return graph, transition, basis


def _exact(graph, restart, damping=0.85):
    # Reference: a direct sparse solve of the strongly-preferential PageRank equations.
    return solve_exact(graph.adjacency, restart, damping=damping, dangling="restart").vectors


def test_any_mix_of_basis_restarts_combines_exactly(built):
    # Linearity of personalised PageRank (Jeh & Widom 2003), exact with leaky vectors.
    graph, _, basis = built
    rng = np.random.default_rng(0)
    topics = list(_topics(graph).values())
    for _ in range(5):
        weights = rng.random(len(basis.names)) * (rng.random(len(basis.names)) < 0.7)
        weights[0] += 0.1
        restart = np.zeros(graph.size)
        for column, weight in enumerate(weights):
            if column < len(topics):
                restart[topics[column]] += weight / topics[column].size
            else:
                restart[basis.hubs[column]] += weight
        combined = basis.combine(weights)
        # float32 storage: L1 within 1e-5 (the benchmark target for float32 vectors)
        assert np.abs(combined - _exact(graph, restart)).sum() < 1e-5


def test_combine_by_name_equals_combine_by_array(built):
    _, _, basis = built
    by_name = basis.combine({"space:1": 2.0, "hub:space0/page-0": 1.0})
    weights = np.zeros(len(basis.names))
    weights[basis.column("space:1")], weights[basis.column("hub:space0/page-0")] = 2.0, 1.0
    np.testing.assert_allclose(by_name, basis.combine(weights))
    with pytest.raises(KeyError, match="no basis vector"):
        basis.combine({"space:9": 1.0})
    with pytest.raises(ValueError, match="non-negative"):
        basis.combine(-weights)


def test_restart_outside_the_span_is_within_the_reported_bound(built):
    graph, transition, basis = built
    rng = np.random.default_rng(1)
    for trial in range(6):
        restart = np.zeros(graph.size)
        restart[rng.choice(graph.size, 4, replace=False)] = rng.random(4)
        if trial % 2:
            restart[[0, 5]] += 0.5  # partly on hub pages
        result = basis.personalised(transition, restart, epsilon=1e-6)
        error = np.abs(result.vector - _exact(graph, restart)).sum()
        assert error <= result.error_bound
        assert result.error_bound < 1e-2
        assert result.vector.sum() == pytest.approx(1.0)


def test_restart_on_hubs_only_needs_no_push(built):
    graph, transition, basis = built
    restart = np.zeros(graph.size)
    restart[[0, 7]] = [0.25, 0.75]
    result = basis.personalised(transition, restart)
    assert result.pushes == 0 and result.from_basis == pytest.approx(1.0)
    assert np.abs(result.vector - _exact(graph, restart)).sum() < 1e-5


def test_saved_basis_loads_memory_mapped_and_refuses_another_graph(tmp_path, built):
    graph, _, basis = built
    save_basis(basis, tmp_path / "basis")
    loaded = load_basis(tmp_path / "basis", graph)
    assert isinstance(loaded.vectors, np.memmap)
    np.testing.assert_array_equal(np.asarray(loaded.vectors), basis.vectors)
    assert loaded.manifest == basis.manifest
    manifest = json.loads((tmp_path / "basis" / "manifest.json").read_text())
    for key in ("fingerprint", "damping", "tol", "dangling", "created", "versions"):
        assert key in manifest
    with pytest.raises(StaleBasis) as caught:
        load_basis(tmp_path / "basis", _graph(fingerprint="g2"))
    assert (caught.value.expected, caught.value.found) == ("g2", "g1")
    assert "g1" in str(caught.value) and "g2" in str(caught.value)


def test_saved_basis_is_column_major_and_an_older_row_major_one_combines_the_same(tmp_path, built):
    # A combination reads each chosen column once when the file holds the vectors column by column
    # (np.save keeps Fortran order; reference: numpy's .npy format, fortran_order header). A basis saved
    # row by row, as earlier versions wrote it, must still load and give the same vectors, checked
    # against a plain numpy product in float64.
    import dataclasses

    graph, transition, basis = built
    save_basis(basis, tmp_path / "columns")
    loaded = load_basis(tmp_path / "columns", graph)
    assert loaded.vectors.flags["F_CONTIGUOUS"] and not loaded.vectors.flags["C_CONTIGUOUS"]
    older = dataclasses.replace(basis, vectors=np.ascontiguousarray(basis.vectors))
    rng = np.random.default_rng(5)
    weights = rng.random(len(basis.names)) * (rng.random(len(basis.names)) < 0.6)
    weights[1] += 0.2
    used = np.flatnonzero(weights)
    plain = basis.vectors[:, used].astype(np.float64) @ weights[used]
    for each in (loaded, older):
        np.testing.assert_allclose(each.combine(weights), plain / plain.sum(), rtol=1e-12, atol=0)
    restart = np.zeros(graph.size)
    restart[[0, 9, 13]] = [0.5, 0.3, 0.2]  # a hub page and two pages outside the basis
    first = loaded.personalised(transition, restart, epsilon=1e-7)
    second = older.personalised(transition, restart, epsilon=1e-7)
    np.testing.assert_allclose(first.vector, second.vector, rtol=1e-12, atol=0)
    assert first.from_basis == pytest.approx(0.5)


def test_hub_columns_name_the_column_of_each_hub_page(built):
    _, _, basis = built
    pages = np.array([7, 1, 0, 5, 59])
    expected = [
        basis.column("hub:space3/page-7"),
        -1,
        basis.column("hub:space0/page-0"),
        basis.column("hub:space1/page-5"),
        -1,
    ]
    assert basis.hub_columns(pages).tolist() == expected


def test_personalised_refuses_a_bad_restart(built):
    graph, transition, basis = built
    for restart in (np.zeros(graph.size), -np.ones(graph.size), np.full(graph.size, np.nan), np.ones(3)):
        with pytest.raises(ValueError, match="non-negative vector"):
            basis.personalised(transition, restart)


def test_a_failed_save_keeps_the_old_basis(tmp_path, built, monkeypatch):
    graph, _, basis = built
    save_basis(basis, tmp_path / "basis")

    def crash(*args, **kwargs):
        raise OSError("disk full")

    monkeypatch.setattr("rankrec.basis.json.dumps", crash)  # fails after vectors.npy is written
    with pytest.raises(OSError, match="disk full"):
        save_basis(basis, tmp_path / "basis")
    monkeypatch.undo()
    assert load_basis(tmp_path / "basis", graph).manifest == basis.manifest
    assert [p.name for p in tmp_path.iterdir() if not p.name.startswith(".")] == ["basis"]
    assert len(list(tmp_path.iterdir())) == 2  # the link and the one folder behind it


def test_damaged_basis_is_an_input_error(tmp_path, built):
    _, _, basis = built
    save_basis(basis, tmp_path / "basis")
    (tmp_path / "basis" / "manifest.json").write_text("{not json")
    with pytest.raises(InputError, match="not a readable basis"):
        load_basis(tmp_path / "basis")

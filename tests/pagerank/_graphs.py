"""Graphs shared by the pagerank tests: seeded random graphs and the Wikispeedia link graph."""

from __future__ import annotations

import csv
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import scipy.sparse as sp


def random_graph(n: int, links: int, seed: int, dangling_share: float = 0.2) -> sp.csr_array:
    """Seeded random directed graph with positive weights; about ``dangling_share`` of pages dangle."""
    rng = np.random.default_rng(seed)
    sources = rng.integers(0, n, links)
    targets = rng.integers(0, n, links)
    dangling = rng.random(n) < dangling_share
    keep = ~dangling[sources]
    weights = rng.uniform(0.5, 2.0, int(keep.sum()))
    matrix = sp.csr_array((weights, (sources[keep], targets[keep])), shape=(n, n))
    matrix.sum_duplicates()
    return matrix


@dataclass(frozen=True)
class LinkGraph:
    names: list[str]
    adjacency: sp.csr_array
    edges: list[tuple[int, int]]


def read_wikispeedia(folder: Path) -> LinkGraph:
    """Pages (articles.tsv plus every link end) and deduplicated links of the Wikispeedia data."""
    names: dict[str, int] = {}
    articles = folder / "articles.tsv"
    if articles.exists():
        for row in _rows(articles):
            names.setdefault(row[0], len(names))
    pairs = set()
    for source, target in (row[:2] for row in _rows(folder / "links.tsv")):
        pairs.add((names.setdefault(source, len(names)), names.setdefault(target, len(names))))
    edges = sorted(pairs)
    n = len(names)
    rows, cols = np.array(edges).T
    adjacency = sp.csr_array((np.ones(len(edges)), (rows, cols)), shape=(n, n))
    return LinkGraph(list(names), adjacency, edges)


def topic_restart(folder: Path, graph: LinkGraph, prefix: str) -> np.ndarray:
    """Uniform restart over the pages of one ``subject.*`` category (and its subcategories)."""
    index = {name: i for i, name in enumerate(graph.names)}
    restart = np.zeros(len(graph.names))
    for article, category in (row[:2] for row in _rows(folder / "categories.tsv")):
        if (category == prefix or category.startswith(prefix + ".")) and article in index:
            restart[index[article]] = 1.0
    return restart / restart.sum()


def _rows(path: Path):
    with path.open(newline="", encoding="utf-8") as handle:
        reader = csv.reader(handle, delimiter="\t")
        next(reader)  # header row
        yield from (row for row in reader if row)

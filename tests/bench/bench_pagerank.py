"""PageRank benchmark: rankrec's block iteration and push against networkx, igraph and scikit-network.

Run: ``python -m tests.bench.bench_pagerank [--pages N] [--links M] [--repeats R]``. Prints, per graph
(Wikispeedia when ../shared/data has it, then a heavy-tailed random graph built here with numpy), the
median wall time of ``R`` runs, the ratio of each peer's time to rankrec's, the largest per-column L1
distance to a tight float64 reference, push latency and top-20 overlap, and peak traced memory.
"""

from __future__ import annotations

import argparse
import time
import tracemalloc
import warnings
from pathlib import Path

import numpy as np
import scipy.sparse as sp

from rankrec.pagerank import personalized_pagerank, prepare, push

WORKERS = 2
TOPICS = 16
SHARED = Path(__file__).resolve().parents[2].parent / "shared" / "data" / "wikispeedia"


def heavy_tailed_graph(pages: int, links: int, seed: int = 0) -> sp.csr_array:
    """Random directed graph: Pareto out-degrees (5% dangling pages), Pareto target popularity."""
    rng = np.random.default_rng(seed)
    activity = rng.pareto(1.8, pages) + 1.0
    activity[rng.random(pages) < 0.05] = 0.0
    counts = rng.multinomial(links, activity / activity.sum())
    sources = np.repeat(np.arange(pages, dtype=np.int32), counts)
    popularity = np.cumsum(rng.pareto(1.6, pages) + 1.0)
    targets = np.searchsorted(popularity / popularity[-1], rng.random(sources.size))
    targets = rng.permutation(pages).astype(np.int32)[np.minimum(targets, pages - 1)]
    graph = sp.csr_array((np.ones(sources.size), (sources, targets)), shape=(pages, pages))
    graph.sum_duplicates()
    graph.data[:] = 1.0
    return graph


def _median_time(run, repeats):
    times, value = [], None
    for _ in range(repeats):
        start = time.perf_counter()
        value = run()
        times.append(time.perf_counter() - start)
    return float(np.median(times)), value


def _l1(result, reference):
    result = np.asarray(result, dtype=np.float64).reshape(reference.shape)
    return float(np.abs(result - reference).sum(axis=0).max())


def _peers(adjacency, edges, restarts, pages):
    """Callables (global, topic j) for each available peer library."""
    peers = {}
    try:
        import igraph

        directed = igraph.Graph(n=pages, edges=edges, directed=True)
        peers["igraph (PRPACK)"] = (
            lambda: directed.pagerank(damping=0.85, directed=True),
            lambda j: directed.personalized_pagerank(damping=0.85, reset=restarts[:, j].tolist()),
        )
    except ImportError:
        print("  igraph not installed: skipped")
    try:
        from sknetwork.ranking import PageRank

        matrix = sp.csr_matrix(adjacency)
        solver = PageRank(damping_factor=0.85, solver="piteration", n_iter=1000, tol=1e-6)
        peers["scikit-network"] = (
            lambda: solver.fit_predict(matrix),
            lambda j: solver.fit_predict(matrix, weights=restarts[:, j]),
        )
    except ImportError:
        print("  scikit-network not installed: skipped")
    if pages <= 200_000:
        import networkx as nx

        digraph = nx.DiGraph()
        digraph.add_nodes_from(range(pages))
        digraph.add_edges_from(edges)

        def networkx_topic(j):
            weights = {int(i): float(restarts[i, j]) for i in np.flatnonzero(restarts[:, j])}
            found = nx.pagerank(digraph, alpha=0.85, personalization=weights, tol=1e-6 / pages)
            return [found[i] for i in range(pages)]

        peers["networkx"] = (
            lambda: list(nx.pagerank(digraph, alpha=0.85, tol=1e-6 / pages).values()),
            networkx_topic,
        )
    else:
        print(f"  networkx skipped on {pages:,} pages: building its graph alone takes minutes and GBs")
    return peers


def bench_graph(name, adjacency, restarts, args):
    pages = adjacency.shape[0]
    print(f"\n== {name}: {pages:,} pages, {adjacency.nnz:,} links ==")
    start = time.perf_counter()
    transition = prepare(adjacency)
    print(f"  prepare: {time.perf_counter() - start:.2f} s, {transition.dangling.sum():,} dangling pages")
    start = time.perf_counter()
    reference = personalized_pagerank(transition, restarts, tol=1e-10, workers=WORKERS).vectors
    reference_global = personalized_pagerank(transition, tol=1e-10, workers=WORKERS).vectors[:, None]
    print(f"  float64 reference (tol 1e-10): {time.perf_counter() - start:.1f} s")

    def ours(dtype, restart):
        return personalized_pagerank(transition, restart, tol=1e-6, dtype=dtype, workers=WORKERS)

    rows = []
    ours_topics, result = _median_time(lambda: ours(np.float32, restarts), args.repeats)
    rows.append(("rankrec block float32, 16 together", ours_topics, _l1(result.vectors, reference),
                 result.iterations))
    seconds, result = _median_time(lambda: ours(np.float64, restarts), args.repeats)
    rows.append(("rankrec block float64, 16 together", seconds, _l1(result.vectors, reference),
                 result.iterations))
    ours_global, result = _median_time(lambda: ours(np.float32, None), args.repeats)
    rows.append(("rankrec global float32", ours_global, _l1(result.vectors, reference_global),
                 result.iterations))
    edges = np.column_stack(adjacency.nonzero()).tolist()
    for peer, (global_run, topic_run) in _peers(adjacency, edges, restarts, pages).items():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            seconds, value = _median_time(global_run, args.repeats)
            rows.append((f"{peer} global", seconds, _l1(value, reference_global), ours_global))
            seconds, value = _median_time(lambda run=topic_run: [run(j) for j in range(TOPICS)], args.repeats)
            rows.append((f"{peer} 16 topics looped", seconds, _l1(np.column_stack(value), reference),
                         ours_topics))
    print(f"  {'method':<40} {'median s':>9} {'peer/rankrec':>12} {'max L1 to ref':>14}")
    for label, seconds, distance, extra in rows:
        ratio = f"{seconds / extra:10.1f}x" if label[:7] != "rankrec" else f"{extra:>6} iter"
        print(f"  {label:<40} {seconds:9.3f} {ratio:>12} {distance:14.2e}")

    tracemalloc.start()
    ours(np.float32, restarts)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    backward = transition.backward
    csr = backward.data.nbytes + backward.indices.nbytes + backward.indptr.nbytes
    basis = pages * TOPICS * 8
    print(f"  peak traced memory of the float32 16-topic solve: {peak / 2**20:.0f} MiB "
          f"(CSR {csr / 2**20:.0f} MiB + float64 basis {basis / 2**20:.0f} MiB; target < 2x = "
          f"{2 * (csr + basis) / 2**20:.0f} MiB)")
    bench_push(transition, adjacency, edges, args)


def bench_push(transition, adjacency, edges, args):
    rng = np.random.default_rng(args.seed)
    seeds = rng.choice(np.flatnonzero(~transition.dangling), args.seeds, replace=False)
    start = time.perf_counter()
    reference = []
    for batch in np.array_split(seeds, max(1, int(np.ceil(seeds.size / 50)))):
        restart = np.zeros((transition.n, batch.size), dtype=np.float32)
        restart[batch, np.arange(batch.size)] = 1.0
        result = personalized_pagerank(transition, restart, tol=1e-7, dtype=np.float32, workers=WORKERS)
        order = np.argsort(-result.vectors, axis=0, kind="stable")[:20]
        reference.extend(set(order[:, j].tolist()) for j in range(batch.size))
    seconds = time.perf_counter() - start
    print(f"  push reference: block float32 at tol 1e-7 for {seeds.size} seeds, {seconds:.0f} s")
    push(transition, int(seeds[0]))  # compile outside the timing
    times, overlaps, bounds = [], [], []
    for seed, best in zip(seeds, reference, strict=True):
        result = push(transition, int(seed))
        times.append(result.seconds)
        bounds.append(result.residual_mass)
        overlaps.append(len(best & set(result.top(20)[0].tolist())) / 20)
    times_ms = np.array(times) * 1e3
    print(f"  rankrec push (epsilon 1e-6), {seeds.size} seeds: median {np.median(times_ms):.1f} ms, "
          f"p95 {np.percentile(times_ms, 95):.1f} ms, mean top-20 overlap {np.mean(overlaps):.3f}, "
          f"median residual bound {np.median(bounds):.3f}")
    try:
        import igraph
    except ImportError:
        return
    directed = igraph.Graph(n=transition.n, edges=edges, directed=True)
    count = seeds.size if transition.n <= 200_000 else min(seeds.size, args.igraph_seeds)
    times, overlaps = [], []
    for seed, best in zip(seeds[:count], reference[:count], strict=True):
        start = time.perf_counter()
        scores = np.array(directed.personalized_pagerank(damping=0.85, reset_vertices=[int(seed)]))
        times.append(time.perf_counter() - start)
        overlaps.append(len(best & set(np.argsort(-scores, kind="stable")[:20].tolist())) / 20)
    times_ms = np.array(times) * 1e3
    print(f"  igraph per seed, {count} seeds: median {np.median(times_ms):.1f} ms, "
          f"p95 {np.percentile(times_ms, 95):.1f} ms, mean top-20 overlap {np.mean(overlaps):.3f}")


def _wikispeedia():
    from tests.pagerank._graphs import read_wikispeedia, topic_restart

    graph = read_wikispeedia(SHARED)
    categories = {}
    with (SHARED / "categories.tsv").open(encoding="utf-8") as handle:
        next(handle)
        for line in handle:
            parts = line.rstrip("\n").split("\t")
            if len(parts) == 2:
                categories[parts[1]] = categories.get(parts[1], 0) + 1
    largest = sorted(categories, key=lambda c: (-categories[c], c))[:TOPICS]
    restarts = np.column_stack([topic_restart(SHARED, graph, topic) for topic in largest])
    return graph.adjacency, restarts


def _random_topics(pages, seed):
    rng = np.random.default_rng(seed)
    size = max(1, pages // 500)
    restarts = np.zeros((pages, TOPICS))
    for column in range(TOPICS):
        restarts[rng.choice(pages, size, replace=False), column] = 1.0 / size
    return restarts


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--pages", type=int, default=1_000_000)
    parser.add_argument("--links", type=int, default=None, help="default: 10 per page")
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--seeds", type=int, default=200)
    parser.add_argument("--igraph-seeds", type=int, default=10, help="igraph per-seed runs on large graphs")
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--skip-wikispeedia", action="store_true")
    args = parser.parse_args(argv)
    if not args.skip_wikispeedia and (SHARED / "links.tsv").exists():
        bench_graph("Wikispeedia", *_wikispeedia(), args)
    links = args.links if args.links is not None else 10 * args.pages
    start = time.perf_counter()
    graph = heavy_tailed_graph(args.pages, links, seed=args.seed)
    print(f"\n(heavy-tailed random graph built in {time.perf_counter() - start:.1f} s)")
    bench_graph("heavy-tailed random graph", graph, _random_topics(args.pages, args.seed), args)


if __name__ == "__main__":
    main()

"""PageRank benchmark: rankrec's block iteration and push against networkx, igraph and scikit-network.

Run: ``python -m tests.bench.bench_pagerank [--pages N] [--repeats R]``. Prints, per graph (Wikispeedia
when ../shared/data has it, then the invented wiki that ``rankrec synth`` draws, built in memory), the
median wall time of ``R`` runs, the ratio of each peer's time to rankrec's, the largest per-column L1
distance to a tight float64 reference, push latency, top-20 overlap and certified share, peak memory, and
the machine's load average before and after.
"""

from __future__ import annotations

import argparse
import resource
import time
import tracemalloc
import warnings
from pathlib import Path

import numpy as np
import scipy.sparse as sp

from rankrec.pagerank import personalised_pagerank, prepare, push
from rankrec.pagerank.push import REFINE

WORKERS = 2
TOPICS = 16
SHARED = Path(__file__).resolve().parents[2].parent / "shared" / "data" / "wikispeedia"


def synth_wiki(pages: int, seed: int = 0):
    """The links and spaces of the invented wiki ``rankrec synth`` draws, without writing files."""
    from rankrec.synth._wiki import build_wiki

    wiki = build_wiki(pages, np.random.default_rng(seed))
    adjacency = sp.csr_array(
        (np.ones(wiki.targets.size), wiki.targets, wiki.indptr), shape=(wiki.size, wiki.size)
    )
    return adjacency, np.asarray(wiki.space, dtype=np.int64)


def space_topics(space: np.ndarray) -> np.ndarray:
    """16 restart columns, uniform over a space's pages; the largest spaces are halved until there are 16."""
    groups = [np.flatnonzero(space == code) for code in np.unique(space)]
    while len(groups) < TOPICS:
        groups.sort(key=len)
        largest = groups.pop()
        groups += [largest[: largest.size // 2], largest[largest.size // 2 :]]
    restarts = np.zeros((space.size, TOPICS))
    for column, members in enumerate(sorted(groups, key=lambda g: int(g[0]))[:TOPICS]):
        restarts[members, column] = 1.0 / members.size
    return restarts


def _load() -> str:
    try:
        return Path("/proc/loadavg").read_text().split(" ")[:3].__repr__()
    except OSError:
        return "unknown"


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
    reference = personalised_pagerank(transition, restarts, tol=1e-10, workers=WORKERS).vectors
    reference_global = personalised_pagerank(transition, tol=1e-10, workers=WORKERS).vectors[:, None]
    print(f"  float64 reference (tol 1e-10): {time.perf_counter() - start:.1f} s")

    def ours(dtype, restart):
        return personalised_pagerank(transition, restart, tol=1e-6, dtype=dtype, workers=WORKERS)

    rows = []
    ours_topics, result = _median_time(lambda: ours(np.float32, restarts), args.repeats)
    rows.append(
        ("rankrec block float32, 16 together", ours_topics, _l1(result.vectors, reference), result.iterations)
    )
    seconds, result = _median_time(lambda: ours(np.float64, restarts), args.repeats)
    rows.append(
        ("rankrec block float64, 16 together", seconds, _l1(result.vectors, reference), result.iterations)
    )
    ours_global, result = _median_time(lambda: ours(np.float32, None), args.repeats)
    rows.append(
        ("rankrec global float32", ours_global, _l1(result.vectors, reference_global), result.iterations)
    )
    edges = np.column_stack(adjacency.nonzero()).tolist()
    for peer, (global_run, topic_run) in _peers(adjacency, edges, restarts, pages).items():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            seconds, value = _median_time(global_run, args.peer_repeats)
            rows.append((f"{peer} global", seconds, _l1(value, reference_global), ours_global))
            seconds, value = _median_time(
                lambda run=topic_run: [run(j) for j in range(TOPICS)], args.peer_repeats
            )
            rows.append(
                (f"{peer} 16 topics looped", seconds, _l1(np.column_stack(value), reference), ours_topics)
            )
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
    basis = pages * TOPICS * 4
    print(
        f"  memory of the float32 16-topic solve: CSR (held before the call) {csr / 2**20:.0f} MiB + "
        f"peak traced allocations {peak / 2**20:.0f} MiB = {(csr + peak) / 2**20:.0f} MiB; "
        f"target < 2 x (CSR + float32 basis {basis / 2**20:.0f} MiB) = "
        f"{2 * (csr + basis) / 2**20:.0f} MiB; "
        f"process peak RSS so far {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**10:.0f} MiB"
    )
    bench_push(transition, adjacency, edges, args)


def bench_push(transition, adjacency, edges, args):
    rng = np.random.default_rng(args.seed)
    seeds = rng.choice(np.flatnonzero(~transition.dangling), args.seeds, replace=False)
    start = time.perf_counter()
    reference, exact = [], []
    for batch in np.array_split(seeds, max(1, int(np.ceil(seeds.size / 48)))):
        restart = np.zeros((transition.n, batch.size))
        restart[batch, np.arange(batch.size)] = 1.0
        result = personalised_pagerank(transition, restart, tol=1e-10, max_iter=500, workers=WORKERS)
        order = np.argsort(-result.vectors, axis=0, kind="stable")[:20]
        reference.extend(set(order[:, j].tolist()) for j in range(batch.size))
        exact.extend(result.vectors[order[:, j], j] for j in range(batch.size))
    seconds = time.perf_counter() - start
    print(f"  push reference: block float64 at tol 1e-10 for {seeds.size} seeds, {seconds:.0f} s")
    push(transition, int(seeds[0]))  # compile outside the timing
    # the plain push (no refinement of the leading scores) once, to show what the refinement buys
    for epsilon, refine in [(e, REFINE) for e in args.epsilons] + [(args.epsilons[0], 0)]:
        times, overlaps, bounds, certified = [], [], [], []
        for seed, best in zip(seeds, reference, strict=True):
            result = push(transition, int(seed), epsilon=epsilon, refine=refine)
            times.append(result.seconds)
            bounds.append(result.residual_mass)
            pages, scores = result.top(21)
            overlaps.append(len(best & set(pages[:20].tolist())) / 20)
            # the push never overestimates and misses at most the residual mass per page
            certified.append(pages.size == 21 and scores[19] > scores[20] + result.residual_mass)
        times_ms = np.array(times) * 1e3
        print(
            f"  rankrec push (epsilon {epsilon:g}, refine {refine}), {seeds.size} seeds: "
            f"median {np.median(times_ms):.1f} ms, "
            f"p95 {np.percentile(times_ms, 95):.1f} ms, mean top-20 overlap {np.mean(overlaps):.3f}, "
            f"median residual bound {np.median(bounds):.3f}, top-20 certified {np.mean(certified):.0%}"
        )
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
    print(
        f"  igraph per seed, {count} seeds: median {np.median(times_ms):.1f} ms, "
        f"p95 {np.percentile(times_ms, 95):.1f} ms, mean top-20 overlap {np.mean(overlaps):.3f}"
    )


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


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--pages", type=int, default=1_000_000)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--peer-repeats", type=int, default=3)
    parser.add_argument("--epsilons", type=float, nargs="+", default=[1e-5, 5e-6, 2e-6, 1e-6])
    parser.add_argument("--seeds", type=int, default=200)
    parser.add_argument("--igraph-seeds", type=int, default=10, help="igraph per-seed runs on large graphs")
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--skip-wikispeedia", action="store_true")
    args = parser.parse_args(argv)
    if not args.skip_wikispeedia and (SHARED / "links.tsv").exists():
        bench_graph("Wikispeedia", *_wikispeedia(), args)
    print(f"load average at start: {_load()}")
    start = time.perf_counter()
    adjacency, space = synth_wiki(args.pages, seed=args.seed)
    print(f"\n(invented wiki built in {time.perf_counter() - start:.1f} s)")
    bench_graph("invented wiki (rankrec synth)", adjacency, space_topics(space), args)
    print(f"load average at end: {_load()}")


if __name__ == "__main__":
    main()

"""Text neighbours at scale: time and peak memory of ``text_neighbours`` on a synthetic corpus.

Run: ``python -m tests.bench.bench_text [--pages N] [--words W] [--recall-sample S]`` (``make bench``
runs the default, 100,000 pages; ``--pages 1000000`` is the build-time target). Each page has about
``W`` words of text (Poisson) and 2 to 11 heading words: invented words drawn from Zipf laws (exponent
1.1) over a 200,000-word vocabulary and over its topic's own words (see ``corpus``). Prints the time
to make the corpus, then the neighbours' seconds (wall and CPU), pairs and the process's peak resident
memory before and after (the corpus itself is part of both). With ``--recall-sample S`` it also scores
S random pages against every page exactly (the same vectors, every term) and prints the share of
their exact top lists that the neighbours hold.
"""

from __future__ import annotations

import argparse
import json
import resource
import sys
import time
from pathlib import Path

import numpy as np

LETTERS = np.array(list("abcdefghijklmnopqrstuvwxyz"))


def _peak_mib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def vocabulary(size: int, rng: np.random.Generator) -> np.ndarray:
    """``size`` distinct invented words of 3 to 9 letters, in a random order."""
    words: dict[str, None] = {}
    while len(words) < size:
        for length in rng.integers(3, 10, size=size):
            words["".join(rng.choice(LETTERS, size=int(length)))] = None
    return np.array(list(words)[:size])


def corpus(pages: int, words: int, seed: int = 0, size: int = 200_000, exponent: float = 1.1):
    """Headings and bodies of ``pages`` pages on ``pages // 100`` topics, words from Zipf laws.

    Each topic owns 300 words drawn from the vocabulary (Zipf-weighted within the topic); a page's
    text takes 30% of its words from its topic and the rest from the whole vocabulary's Zipf law,
    its headings 70% from its topic. 1% of the pages are empty.
    """
    rng = np.random.default_rng(seed)
    names = vocabulary(size, rng)
    topics = max(1, pages // 100)

    def law(count: int) -> np.ndarray:
        weights = 1.0 / np.arange(1, count + 1) ** exponent
        return np.cumsum(weights / weights.sum())

    overall, within = law(size), law(300)
    topic_words = rng.integers(0, size, size=(topics, 300))

    def draw(counts: np.ndarray, topic: np.ndarray, share: float) -> list[str]:
        total = int(counts.sum())
        chosen = np.minimum(np.searchsorted(overall, rng.random(total)), size - 1)
        own = rng.random(total) < share
        rank = np.minimum(np.searchsorted(within, rng.random(int(own.sum()))), 299)
        chosen[own] = topic_words[np.repeat(topic, counts)[own], rank]
        return [" ".join(part) for part in np.split(names[chosen], np.cumsum(counts)[:-1])]

    headings, bodies = [], []
    for first in range(0, pages, 10_000):
        block = min(10_000, pages - first)
        empty = rng.random(block) < 0.01
        topic = rng.integers(0, topics, size=block)
        headings += draw(np.where(empty, 0, rng.integers(2, 12, size=block)), topic, 0.7)
        bodies += draw(np.where(empty, 0, rng.poisson(words, size=block)), topic, 0.3)
    return headings, bodies


def _recall(found, headings, bodies, sample: int, seed: int = 1) -> float:
    """Share of the exact top lists (all terms scored) of ``sample`` random pages that ``found`` holds."""
    from rankrec import text

    rng = np.random.default_rng(seed)
    bounds = {"min_df": 2, "max_df": 0.5, "max_features": 2**18}
    vectors = text._combine(
        text._field(headings, **bounds), text._field(bodies, **bounds), found.title_weight
    )
    pages = np.sort(rng.choice(vectors.shape[0], size=sample, replace=False))
    scores = (vectors[pages] @ vectors.T).toarray()
    scores[np.arange(sample), pages] = 0
    hits = wanted = 0
    for line, page in enumerate(pages):
        best = np.argsort(-scores[line], kind="stable")[: found.top]
        best = best[scores[line, best] > 0]
        got = set(found.similar[[page]].indices.tolist())
        hits += len(got & set(best.tolist()))
        wanted += best.size
    return hits / max(wanted, 1)


def main(argv: list[str]) -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--pages", type=int, default=100_000, help="pages in the synthetic corpus")
    parser.add_argument("--words", type=int, default=300, help="mean words of text per page")
    parser.add_argument("--chunk", type=int, default=2000, help="pages scored at a time")
    parser.add_argument("--probe-postings", type=int, default=5000, help="postings a page may walk")
    parser.add_argument("--candidates", type=int, default=60, help="candidates rescored per page")
    parser.add_argument("--recall-sample", type=int, default=0, help="pages checked against an exact scoring")
    args = parser.parse_args(argv)
    from rankrec.text import text_neighbours

    started = time.perf_counter()
    headings, bodies = corpus(args.pages, args.words)
    text_mib = sum(len(page) for page in bodies + headings) / 2**20
    print(
        f"corpus: {args.pages:,} pages, {text_mib:,.0f} MiB of text, made in "
        f"{time.perf_counter() - started:.1f} s; peak RSS so far {_peak_mib():,.0f} MiB",
        flush=True,
    )
    before = _peak_mib()
    cpu = time.process_time()
    found = text_neighbours(
        headings, bodies, chunk=args.chunk, probe_postings=args.probe_postings, candidates=args.candidates
    )
    cpu = time.process_time() - cpu
    row = {
        "pages": found.pages,
        "pairs": found.pairs,
        "heading_terms": found.heading_terms,
        "body_terms": found.body_terms,
        "exact": found.exact,
        "seconds": round(found.seconds, 1),
        "cpu_seconds": round(cpu, 1),
        "peak_rss_before_mib": round(before),
        "peak_rss_mib": round(_peak_mib()),
    }
    print(json.dumps(row), flush=True)
    print(f"load average: {Path('/proc/loadavg').read_text().split()[:3]}", flush=True)
    if args.recall_sample:
        print(
            json.dumps(
                {
                    "recall_sample": args.recall_sample,
                    "recall": round(_recall(found, headings, bodies, args.recall_sample), 3),
                }
            )
        )


if __name__ == "__main__":
    main(sys.argv[1:])

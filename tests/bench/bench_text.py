"""Text neighbours at scale: time and peak memory of ``text_neighbours`` on a synthetic corpus.

Run: ``python -m tests.bench.bench_text [--pages N] [--words W] [--recall-sample S]`` (``make bench``
runs the default, 100,000 pages; ``--pages 1000000`` is the build-time target). Each page has about
``W`` words of text (Poisson) and 2 to 11 heading words: invented words drawn from Zipf laws (exponent
1.1) over a 200,000-word vocabulary and over its topic's own words (:func:`rankrec.synth.text_corpus`,
the generator ``rankrec synth`` writes page text with). The corpus is generated while
``text_neighbours`` reads it, a batch at a time, as a build streams text from the store: no page's
text is held longer than its batch. Prints the neighbours' seconds (wall and CPU, the corpus's own
making included; its time alone is printed first), pairs and the process's peak resident memory.
With ``--recall-sample S`` it also scores S random pages against every page exactly (the same
vectors, every term) and prints the share of their exact top lists that the neighbours hold.
"""

from __future__ import annotations

import argparse
import itertools
import json
import resource
import sys
import time
from operator import itemgetter
from pathlib import Path

import numpy as np


def _peak_mib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


class _Stream:
    """A field of the corpus, read once in step with the other (``len`` and one pass of ``iter``)."""

    def __init__(self, pages: int, items) -> None:
        self.pages, self.items = pages, items

    def __len__(self) -> int:
        return self.pages

    def __iter__(self):
        return self.items


def streamed(pages: int, words: float, seed: int = 0) -> tuple[_Stream, _Stream]:
    """Headings and bodies of :func:`rankrec.synth.text_corpus`, made while they are read."""
    from rankrec.synth import text_corpus

    pairs = (
        pair
        for headings, bodies in text_corpus(pages, words, seed=seed)
        for pair in zip(headings, bodies, strict=True)
    )
    first, second = itertools.tee(pairs)
    return _Stream(pages, map(itemgetter(0), first)), _Stream(pages, map(itemgetter(1), second))


def _recall(found, pages: int, words: float, sample: int, seed: int = 1) -> float:
    """Share of the exact top lists (all terms scored) of ``sample`` random pages that ``found`` holds."""
    from rankrec._text_vectors import page_vectors

    rng = np.random.default_rng(seed)
    bounds = {"min_df": 2, "max_df": 0.5, "max_features": 2**18}
    vectors = page_vectors(*streamed(pages, words), pages, title_weight=found.title_weight, **bounds)[0]
    chosen = np.sort(rng.choice(vectors.shape[0], size=sample, replace=False))
    scores = (vectors[chosen] @ vectors.T).toarray()
    scores[np.arange(sample), chosen] = 0
    hits = wanted = 0
    for line, page in enumerate(chosen):
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
    text_mib = sum(len(page) for page in itertools.chain.from_iterable(streamed(args.pages, args.words)[1]))
    print(
        f"corpus: {args.pages:,} pages, {text_mib / 2**20:,.0f} MiB of text, made (and dropped) in "
        f"{time.perf_counter() - started:.1f} s; peak RSS so far {_peak_mib():,.0f} MiB",
        flush=True,
    )
    before = _peak_mib()
    cpu = time.process_time()
    headings, bodies = streamed(args.pages, args.words)
    steps: dict[str, list[float]] = {}
    begun = time.perf_counter()

    def progress(step: str, done: int, total: int) -> None:
        steps.setdefault(step, []).append(time.perf_counter() - begun)

    found = text_neighbours(
        headings,
        bodies,
        chunk=args.chunk,
        probe_postings=args.probe_postings,
        candidates=args.candidates,
        progress=progress,
    )
    cpu = time.process_time() - cpu
    read, scored = steps.get("page text", [0.0]), steps.get("text neighbours", [0.0])
    per_chunk = (scored[-1] - scored[0]) / max(len(scored) - 1, 1)
    phases = {  # from the progress reports: text read and counted, weighed and postings, scored
        "read_and_count_seconds": round(read[-1], 1),
        "weigh_and_postings_seconds": round(scored[0] - per_chunk - read[-1], 1),
        "score_seconds": round(scored[-1] - scored[0] + per_chunk, 1),
    }
    row = {
        "pages": found.pages,
        "pairs": found.pairs,
        "heading_terms": found.heading_terms,
        "body_terms": found.body_terms,
        "exact": found.exact,
        "seconds": round(found.seconds, 1),
        "cpu_seconds": round(cpu, 1),
        **phases,
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
                    "recall": round(_recall(found, args.pages, args.words, args.recall_sample), 3),
                }
            )
        )


if __name__ == "__main__":
    main(sys.argv[1:])

"""A rebuild after a day's edits against a full build of the same store.

Run: `python -m tests.bench.bench_rebuild [--pages N] [--share S] [--runs R] [--workers W]`
(`make bench`: 20,000 pages, 1% edited, 3 runs of each build).

It writes a wiki with `rankrec synth` (tables, with text), imports it and builds it in full (a child
process each build: wall time and peak memory). Then :func:`rankrec.synth.edits.edit_wiki` gives
``--share`` of the pages a sentence and a new link; the edits are imported and the index is rebuilt
twice: the way `rankrec build` rebuilds (taking over what the edits cannot have moved; the index is
restored to the first build before each run) and with `--full` (the ranker trained again, every list
computed). Printed: each build's median seconds, the ratio, what the rebuild took over, and how far its
lists are from the full build's: the share of top-10 lists that are identical and their mean overlap,
against the full build (its ranker retrained) and, on a sample of the lists the rebuild took over, against
the same seeds computed afresh from the rebuilt index (same ranker).
"""

from __future__ import annotations

import argparse
import json
import shutil
import statistics
import sys
import tempfile
from pathlib import Path

import numpy as np

from .bench_recommend import _build, _make_store


def _renumbered(index, other) -> np.ndarray:
    """Per page of ``other``, its number in ``index`` (-1: absent)."""
    numbers = {index.pages[number]: number for number in range(index.size)}
    return np.array([numbers.get(other.pages[number], -1) for number in range(other.size)], dtype=np.int64)


def _top(index, seeds: np.ndarray) -> np.ndarray:
    return np.asarray(index.related["pages"])[np.asarray(index.related["row"])[seeds]][:, :10]


def _agreement(first: np.ndarray, second: np.ndarray) -> dict:
    overlap = [
        np.intersect1d(a[a >= 0], b[b >= 0]).size / max(1, (a >= 0).sum())
        for a, b in zip(first, second, strict=True)
    ]
    same = [np.array_equal(a, b) for a, b in zip(first, second, strict=True)]
    return {
        "lists": len(same),
        "identical_top10": round(float(np.mean(same)), 4),
        "top10_overlap": round(float(np.mean(overlap)), 4),
    }


def taken_over(rebuilt, earlier) -> np.ndarray:
    """Seeds of ``rebuilt`` whose list is ``earlier``'s (same combined scores): the lists taken over."""
    to_earlier = _renumbered(earlier, rebuilt)
    rows = np.asarray(rebuilt.related["row"])
    seeds = np.flatnonzero((rows >= 0) & (to_earlier >= 0))
    old_rows = np.asarray(earlier.related["row"])[to_earlier[seeds]]
    seeds, old_rows = seeds[old_rows >= 0], old_rows[old_rows >= 0]
    mine = np.asarray(rebuilt.related["combined"])[rows[seeds]]
    return seeds[(mine == np.asarray(earlier.related["combined"])[old_rows]).all(axis=1)]


def compare(rebuilt, full, earlier, sample: int = 1_000) -> dict:
    """How the rebuilt index's lists agree with the full build's, and the lists it took over from
    ``earlier`` with the same seeds' lists computed afresh from the rebuilt index (same ranker)."""
    from rankrec.recommend.candidates import _block, _index_arrays

    to_full = _renumbered(full, rebuilt)
    seeds = np.flatnonzero(np.asarray(rebuilt.related["row"]) >= 0)
    seeds = seeds[
        (to_full[seeds] >= 0) & (np.asarray(full.related["row"])[np.maximum(to_full[seeds], 0)] >= 0)
    ]
    back = _renumbered(rebuilt, full)
    theirs = _top(full, to_full[seeds])
    theirs = np.where(theirs >= 0, back[np.maximum(theirs, 0)], -1)
    found = {"against_full_build": _agreement(theirs, _top(rebuilt, seeds))}
    taken = taken_over(rebuilt, earlier)
    if taken.size:
        chosen = np.sort(np.random.default_rng(0).choice(taken, min(sample, taken.size), replace=False))
        method = rebuilt.manifest.precompute["method"]
        fresh = _block(
            _index_arrays(rebuilt), chosen, method, rebuilt.configuration, rebuilt.manifest.k_related
        )
        found["taken_over_against_fresh_same_ranker"] = _agreement(
            fresh["pages"][:, :10], _top(rebuilt, chosen)
        )
    return found


def main(argv: list[str]) -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--pages", type=int, default=20_000, help="pages of the synthetic wiki")
    parser.add_argument("--share", type=float, default=0.01, help="share of the pages edited")
    parser.add_argument("--runs", type=int, default=3, help="builds of each kind (median printed)")
    parser.add_argument("--workers", type=int, default=2, help="build processes")
    args = parser.parse_args(argv)
    from rankrec.importer import import_sources
    from rankrec.index import load_index
    from rankrec.store import Store
    from rankrec.synth.edits import edit_wiki

    with tempfile.TemporaryDirectory(prefix="rankrec-bench-") as scratch:
        workdir = Path(scratch)
        wiki = _make_store(args.pages, workdir)
        settings = {"workers": args.workers, "topics": "spaces", "method": "push"}
        first = _build(wiki, workdir / "index", settings, {})
        print(json.dumps({"first_build": first}), flush=True)
        kept = workdir / "first" / (workdir / "index").resolve().name  # the first build, as before the edits
        shutil.copytree((workdir / "index").resolve(), kept)
        edited = edit_wiki(workdir / "wiki", share=args.share, seed=3)
        with Store(wiki) as store:
            import_sources(
                store,
                [
                    (workdir / "wiki" / "edits" / "pages.csv", "pages"),
                    (workdir / "wiki" / "edits" / "links.csv", "edges"),
                ],
            )
        print(f"edited {len(edited):,} pages ({args.share:.1%})", flush=True)
        rebuilds, fulls = [], []
        for run in range(args.runs):
            (workdir / "index").unlink()
            # a copy of the first build each run: a rebuild removes the folder it replaces
            shutil.copytree(kept, workdir / f"run{run}" / kept.name)
            (workdir / "index").symlink_to(workdir / f"run{run}" / kept.name)
            rebuilds.append(_build(wiki, workdir / "index", settings, {}))
            print(json.dumps({"rebuild": rebuilds[-1]}), flush=True)
            fulls.append(_build(wiki, workdir / "full", {**settings, "reuse": False}, {}))
            print(json.dumps({"full_build": fulls[-1]}), flush=True)
        rebuilt, full = load_index(workdir / "index"), load_index(workdir / "full")
        seconds = statistics.median(run["build_seconds"] for run in rebuilds)
        whole = statistics.median(run["build_seconds"] for run in fulls)
        print(
            json.dumps(
                {
                    "reuse": rebuilt.manifest.reuse,
                    "ranker_taken_over": "taken_over_from" in rebuilt.manifest.ranker,
                    # the full build trains its own: the kind chosen can differ (linear or LightGBM)
                    "rankers": {
                        name: {key: index.manifest.ranker.get(key) for key in ("kind", "validation_ndcg@10")}
                        for name, index in (("rebuild", rebuilt), ("full_build", full))
                    },
                }
            ),
            flush=True,
        )
        print(
            json.dumps(
                {
                    "rebuild_seconds": seconds,
                    "full_build_seconds": whole,
                    "ratio": round(seconds / whole, 3),
                    "target": "under 0.2 of the full build",
                }
            ),
            flush=True,
        )
        earlier = load_index(kept)
        print(json.dumps(compare(rebuilt, full, earlier)), flush=True)


if __name__ == "__main__":
    main(sys.argv[1:])

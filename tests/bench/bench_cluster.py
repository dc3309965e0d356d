"""A build whose related lists run in local worker processes against the same build on Dask ``local:2``.

Run: `python -m tests.bench.bench_cluster [--pages N] [--wiki WIKI.db] [--runs R] [--workers W]`

Both builds run in child processes (`rankrec.build.build_index`, every page precomputed by push), in
alternation, ``--runs`` times each; printed: the median wall time and related-step seconds of each, their
ratio, peak memory of the building process (Dask's workers are processes of their own and are not in
it), and whether the two indexes' related lists are identical (they must be).
"""

from __future__ import annotations

import argparse
import json
import shutil
import sys
import tempfile
from pathlib import Path

import numpy as np

from .bench_recommend import _build, _make_store


def _same_lists(first: Path, second: Path) -> bool:
    from rankrec.index import RELATED_ARRAYS

    return all(
        np.array_equal(np.load(first / f"related_{name}.npy"), np.load(second / f"related_{name}.npy"))
        for name in RELATED_ARRAYS
    )


def main(argv: list[str]) -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--pages", type=int, default=20_000, help="pages of the synthetic wiki")
    parser.add_argument("--wiki", type=Path, help="reuse this store instead of synthesising one")
    parser.add_argument("--runs", type=int, default=3, help="builds of each kind")
    parser.add_argument("--workers", type=int, default=2, help="local processes, and Dask local:N workers")
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory(prefix="rankrec-bench-") as scratch:
        workdir = Path(scratch)
        wiki = args.wiki or _make_store(args.pages, workdir)
        kinds = {
            "local processes": {"workers": args.workers},
            f"dask local:{args.workers}": {"workers": args.workers, "cluster": f"local:{args.workers}"},
        }
        found: dict[str, list[dict]] = {name: [] for name in kinds}
        for run in range(args.runs):
            for name, extra in kinds.items():
                target = workdir / f"index-{len(found[name])}-{name.split()[0].replace(':', '')}"
                settings = {"hubs": 32, "view_share": None, "topics": "spaces", "method": "push", **extra}
                build = _build(wiki, target, settings, {})
                found[name].append({**build, "folder": target.resolve()})
                print(
                    json.dumps(
                        {
                            "run": run,
                            "kind": name,
                            **{k: build[k] for k in ("build_seconds",)},
                            "related_seconds": build["build_steps"]["related"],
                            "peak_mib": build["build_peak_mib"],
                        }
                    ),
                    flush=True,
                )
        summary = {}
        for name, builds in found.items():
            summary[name] = {
                "build_s": float(np.median([b["build_seconds"] for b in builds])),
                "related_s": float(np.median([b["build_steps"]["related"] for b in builds])),
                "peak_mib": max(b["build_peak_mib"] for b in builds),
            }
        local, dask = (summary[name] for name in kinds)
        same = _same_lists(found["local processes"][0]["folder"], found[list(kinds)[1]][0]["folder"])
        print(json.dumps({"median_of_runs": args.runs, **summary}), flush=True)
        print(
            f"dask/local: build {dask['build_s'] / local['build_s']:.2f}x, related step "
            f"{dask['related_s'] / local['related_s']:.2f}x; identical related lists: {same}",
            flush=True,
        )
        for builds in found.values():
            for build in builds:
                shutil.rmtree(build["folder"], ignore_errors=True)


if __name__ == "__main__":
    main(sys.argv[1:])

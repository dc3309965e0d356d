"""Index build and list latency on a large invented wiki.

Run: `python -m tests.bench.bench_recommend [--pages N] [--wiki WIKI.db] [--view-share S] [--workers W]
[--ranker R] [--links-only-too]`

Without ``--wiki`` it writes a wiki of ``--pages`` pages with `rankrec synth` (layout "tables", with
page text) and imports it into a fresh store (both timed); ``--wiki`` reuses a store made earlier. Then:

- ``rankrec build`` in a child process: wall time, peak memory (ru_maxrss of the child) and the
  seconds of each step (graph, global, basis, teams, text, ranker, related); with
  ``--links-only-too`` also a build of the same store without text (``text_weight`` 0 and no ranker,
  so no text neighbours), and the text step's seconds against that build's wall time;
- the index's size on disk, the time to load it (memory-mapped) in this process and to warm it up
  (:func:`rankrec.recommend.warm.warm_up`, as the service does before serving an index);
- median and p99 time of ``related()`` (precomputed pages, pages computed on first request,
  and with a viewer), ``recommend()`` (at the push threshold the build measured: the manifest's
  ``serving``, printed) and ``landing()`` (each team's first call, then a second round), called
  in-process on seeded random choices. Building a reader or team from the store is timed apart.
"""

from __future__ import annotations

import argparse
import json
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

_BUILD = """
import json, resource, sys, time
from rankrec.build import build_index
from rankrec.configuration import Configuration
from rankrec.store import Store
wiki, target, settings, changed = sys.argv[1], sys.argv[2], json.loads(sys.argv[3]), json.loads(sys.argv[4])
if settings.get("cluster"):
    from rankrec.cluster import cluster_address
    settings["cluster"] = cluster_address(settings["cluster"])
started = time.perf_counter()
with Store(wiki, create=False) as store:
    build_index(store, target, Configuration().with_values(**changed), **settings)
print(json.dumps({"seconds": time.perf_counter() - started,
                  "peak_bytes": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024}))
"""


def _build(wiki: Path, target: Path, settings: dict, changed: dict) -> dict:
    """Build in a child process (its own peak memory); wall seconds, peak MiB and the manifest's steps."""
    from rankrec.index import load_index

    done = subprocess.run(
        [sys.executable, "-c", _BUILD, str(wiki), str(target), json.dumps(settings), json.dumps(changed)],
        capture_output=True,
        text=True,
        check=True,
    )
    build = json.loads(done.stdout)
    manifest = load_index(target).manifest
    return {
        "configuration": changed or "defaults",
        "build_seconds": round(build["seconds"], 1),
        "build_steps": manifest.seconds,
        "build_peak_mib": round(build["peak_bytes"] / 2**20),
        "pages_with_text": manifest.counts.get("pages_with_text"),
        "text_pairs": manifest.counts.get("text_pairs"),
    }


def _percentiles(samples: list[float]) -> dict:
    values = np.array(samples) * 1000.0
    return {
        "calls": len(samples),
        "median_ms": round(float(np.median(values)), 2),
        "p99_ms": round(float(np.percentile(values, 99)), 2),
    }


class _Printed(dict):
    """Prints each measurement as soon as it is stored."""

    def __setitem__(self, name, samples) -> None:
        print(json.dumps({"call": name, **_percentiles(samples)}), flush=True)
        super().__setitem__(name, samples)


def _timed(call) -> float:
    started = time.perf_counter()
    call()
    return time.perf_counter() - started


def _make_store(pages: int, workdir: Path) -> Path:
    from rankrec.importer import import_sources
    from rankrec.store import Store
    from rankrec.synth import synthesize

    started = time.perf_counter()
    summary = synthesize(workdir / "wiki", pages=pages, seed=1, layout="tables")
    print(
        f"synth: {summary.pages:,} pages, {summary.links:,} links, {summary.views:,} views "
        f"in {time.perf_counter() - started:.1f} s",
        flush=True,
    )
    wiki = workdir / "wiki.db"
    started = time.perf_counter()
    files = [
        ("pages.csv", "pages"),
        ("links.csv", "edges"),
        ("views.csv", "views"),
        ("teams.csv", "teams"),
        ("groups.csv", "groups"),
    ]
    with Store(wiki) as store:
        import_sources(store, [(workdir / "wiki" / name, format) for name, format in files])
    print(f"import: {time.perf_counter() - started:.1f} s", flush=True)
    return wiki


def main(argv: list[str]) -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--pages", type=int, default=1_000_000, help="pages of the synthetic wiki")
    parser.add_argument("--wiki", type=Path, help="reuse this store instead of synthesising one")
    parser.add_argument(
        "--view-share",
        type=float,
        help="precompute pages carrying this share of views "
        "(default: every page up to 100,000 pages, else 0.5)",
    )
    parser.add_argument("--hubs", type=int, default=32, help="hub vectors in the basis")
    parser.add_argument("--workers", type=int, default=2, help="build processes")
    parser.add_argument("--calls", type=int, default=200, help="calls per list kind")
    parser.add_argument("--ranker", help="the configuration's ranker (default: the configuration's default)")
    parser.add_argument(
        "--links-only-too", action="store_true", help="also build without text, for the text step's target"
    )
    args = parser.parse_args(argv)
    from rankrec.errors import GroupTooSmall
    from rankrec.index import load_index
    from rankrec.recommend import landing, reader_from_store, recommend, related, team_from_store
    from rankrec.recommend.warm import warm_up
    from rankrec.store import Store

    with tempfile.TemporaryDirectory(prefix="rankrec-bench-") as scratch:
        workdir = Path(scratch)
        wiki = args.wiki or _make_store(args.pages, workdir)
        with Store(wiki, create=False) as store:
            pages = store.counts()["pages"]
        share = args.view_share if args.view_share is not None else (None if pages <= 100_000 else 0.5)
        settings = {"hubs": args.hubs, "view_share": share, "workers": args.workers, "topics": "spaces"}
        changed = {} if args.ranker is None else {"ranker": args.ranker}
        if args.links_only_too:
            without_text = {"ranker": "none", "text_weight": 0.0}
            links_only = _build(wiki, workdir / "links-only", settings, without_text)
            print(json.dumps({"links_only": True, **links_only}), flush=True)
            shutil.rmtree(workdir / "links-only", ignore_errors=True)
        target = workdir / "index"
        build = _build(wiki, target, settings, changed)
        real = target.resolve()
        size = sum(path.stat().st_size for path in real.rglob("*") if path.is_file())
        started = time.perf_counter()
        index = load_index(target)
        load_seconds = time.perf_counter() - started
        warm_seconds = warm_up(index)  # as the service does before it serves an index
        manifest = index.manifest
        print(
            json.dumps(
                {
                    "pages": pages,
                    "links": manifest.counts["links"],
                    "settings": settings,
                    "precomputed": manifest.counts["precomputed"],
                    **build,
                    "index_mib": round(size / 2**20, 1),
                    "serving": manifest.serving,
                    "load_seconds": round(load_seconds, 3),
                    "warm_up_seconds": round(warm_seconds, 3),
                }
            ),
            flush=True,
        )

        if args.links_only_too:
            text, whole = build["build_steps"].get("text", 0.0), links_only["build_seconds"]
            print(f"text step {text:.1f} s against the links-only build's {whole:.1f} s", flush=True)
        print(f"load average: {Path('/proc/loadavg').read_text().split()[:3]} (2 cores, shared)", flush=True)
        rng = np.random.default_rng(5)
        row = np.asarray(index.related["row"])
        precomputed = np.flatnonzero(row >= 0)
        others = np.flatnonzero(row < 0)
        results = _Printed()
        chosen = rng.choice(precomputed, size=min(args.calls, precomputed.size), replace=False)
        results["related (precomputed page)"] = [
            _timed(lambda p=p: related(index, index.pages[int(p)])) for p in chosen
        ]
        if others.size:
            chosen = rng.choice(others, size=min(args.calls, others.size), replace=False)
            results["related (first request)"] = [
                _timed(lambda p=p: related(index, index.pages[int(p)])) for p in chosen
            ]
        with Store(wiki, create=False) as store:
            users = [row[0] for row in store.connection.execute("SELECT user FROM users ORDER BY user")]
            teams = [
                row[0]
                for row in store.connection.execute(
                    "SELECT DISTINCT name FROM memberships WHERE kind = 'team' ORDER BY name"
                )
            ]
            picked = rng.choice(len(users), size=min(args.calls, len(users)), replace=False)
            building, readers = [], []
            for position in picked:
                started = time.perf_counter()
                readers.append(reader_from_store(store, index, users[int(position)]))
                building.append(time.perf_counter() - started)
            results["reader_from_store"] = building
            results["related (with viewer)"] = [
                _timed(lambda r=r: related(index, index.pages[int(rng.choice(precomputed))], reader=r))
                for r in readers
            ]
            results["recommend"] = [_timed(lambda r=r: recommend(index, r)) for r in readers]
            building, first, again, built = [], [], [], []
            refused = 0
            for name in teams:
                started = time.perf_counter()
                try:
                    team = team_from_store(store, index, name)
                except GroupTooSmall:
                    refused += 1
                    continue
                building.append(time.perf_counter() - started)
                built.append(team)
                first.append(_timed(lambda t=team: landing(index, t)))
            for team in built:  # a service answers a team many times: its vector's pages are read by then
                again.append(_timed(lambda t=team: landing(index, t)))
            print(f"teams: {len(teams)}, refused as too small: {refused}", flush=True)
            results["team_from_store"] = building
            results["landing (first call for the team)"] = first
            results["landing (again)"] = again


if __name__ == "__main__":
    main(sys.argv[1:])

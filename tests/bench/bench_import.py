"""Import throughput: views per second from an access log and a view-event CSV, pages per second from
a Markdown folder, and links per second from an edge list against a plain sqlite3 insert of the same rows.

Run: `python -m tests.bench.bench_import [--log-views N] [--markdown-pages N] [--table-pages N] [--runs R]`
(`make bench` runs it with the defaults: an access log of at least 1,000,000 lines made by
`rankrec synth`, a Markdown folder of 5,000 pages, a page table and edge list of 100,000 pages and
their links; `--table-pages 1000000` is the million-page wiki). Each import runs in a child process so
that its peak memory (VmHWM) is its own; the median of the runs is printed.

The plain insert (the practical limit of SQLite from Python with a row per link) reads the edge list
with the csv module, numbers the pages in a dict and inserts the pages and the links with one
``executemany`` each, in one transaction, into a store's page table (made by ``Store``, same settings)
and a table of a row per link as stores kept them before link blocks (its primary key, its index by
target, foreign keys checked): no checks, no line numbers, no reports. rankrec's store keeps links in
blocks of source pages (``rankrec._store_links``), so it can beat that limit. The view events get the
same treatment (users and pages numbered in dicts, times by ``datetime.fromisoformat``, foreign keys
checked as the store checks them). The ratios printed are rankrec's median time over the plain
insert's.
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

_CHILD = """
import json, sys, time
from rankrec.importer import import_sources
from rankrec.store import Store
path, format, wiki = sys.argv[1:4]
started = time.perf_counter()
with Store(wiki) as store:
    (report,) = import_sources(store, [(path, format)])
seconds = time.perf_counter() - started
# VmHWM (peak resident set of this program image) starts afresh at exec, unlike ru_maxrss
status = open("/proc/self/status").read().split("VmHWM:")[1].split()[0]
peak = int(status) * 1024
print(json.dumps({"seconds": seconds, "records": report.records, "errors": report.error_count,
                  "dropped": report.dropped, "peak_bytes": peak}))
"""


_PLAIN = """
import csv, json, sys, time
from rankrec.store import Store
path, wiki = sys.argv[1:3]
with Store(wiki) as store:  # the schema and connection settings of a store; then plain sqlite3
    started = time.perf_counter()
    connection = store.connection
    with open(path, newline="", encoding="utf-8") as handle:
        rows = csv.reader(handle)
        next(rows)
        numbers, links = {}, []
        for source, target in rows:
            links.append((numbers.setdefault(source, len(numbers) + 1),
                          numbers.setdefault(target, len(numbers) + 1), 1.0))
    connection.execute("BEGIN IMMEDIATE")
    connection.execute("CREATE TABLE plain_links (source_id INTEGER NOT NULL REFERENCES pages(id), "
                       "target_id INTEGER NOT NULL REFERENCES pages(id), weight REAL NOT NULL, "
                       "PRIMARY KEY (source_id, target_id)) WITHOUT ROWID")
    connection.executemany("INSERT INTO pages (id, page, title, present) VALUES (?, ?, ?, 1)",
                           ((number, page, page) for page, number in numbers.items()))
    connection.executemany("INSERT INTO plain_links (source_id, target_id, weight) VALUES (?, ?, ?)", links)
    connection.execute("CREATE INDEX plain_links_by_target ON plain_links (target_id)")
    connection.execute("COMMIT")
    seconds = time.perf_counter() - started
status = open("/proc/self/status").read().split("VmHWM:")[1].split()[0]
print(json.dumps({"seconds": seconds, "records": {"pages": len(numbers), "links": len(links)},
                  "errors": 0, "dropped": {}, "peak_bytes": int(status) * 1024}))
"""


_PLAIN_VIEWS = """
import csv, json, sys, time
from datetime import datetime
from rankrec.store import Store
path, wiki = sys.argv[1:3]
with Store(wiki) as store:  # the schema and connection settings of a store (foreign keys on); plain sqlite3
    started = time.perf_counter()
    connection = store.connection
    with open(path, newline="", encoding="utf-8") as handle:
        rows = csv.DictReader(handle)
        users, pages, views = {}, {}, []
        for row in rows:
            dwell = row.get("dwell")
            views.append((users.setdefault(row["user"], len(users) + 1),
                          pages.setdefault(row["page"], len(pages) + 1),
                          datetime.fromisoformat(row["timestamp"]).timestamp(),
                          float(dwell) if dwell else None))
    connection.execute("BEGIN IMMEDIATE")
    connection.executemany("INSERT INTO users (id, user) VALUES (?, ?)", ((n, u) for u, n in users.items()))
    connection.executemany("INSERT INTO pages (id, page) VALUES (?, ?)", ((n, p) for p, n in pages.items()))
    connection.executemany("INSERT OR IGNORE INTO views VALUES (?, ?, ?, ?)", views)
    connection.execute("COMMIT")
    seconds = time.perf_counter() - started
status = open("/proc/self/status").read().split("VmHWM:")[1].split()[0]
print(json.dumps({"seconds": seconds, "records": {"views": len(views)},
                  "errors": 0, "dropped": {}, "peak_bytes": int(status) * 1024}))
"""
_PLAINS = {"plain-sqlite3": _PLAIN, "plain-sqlite3-views": _PLAIN_VIEWS}


def _import_once(path: Path, format: str, workdir: Path, run: int) -> dict:
    wiki = workdir / f"bench-{format}-{run}.db"
    plain = _PLAINS.get(format)
    child = [plain, str(path), str(wiki)] if plain else [_CHILD, str(path), format, str(wiki)]
    done = subprocess.run(
        [sys.executable, "-c", *child],
        capture_output=True,
        text=True,
        check=True,
    )
    for suffix in ("", "-wal", "-shm"):
        Path(f"{wiki}{suffix}").unlink(missing_ok=True)
    return json.loads(done.stdout)


def _measure(path: Path, format: str, workdir: Path, runs: int, unit: str) -> dict:
    results = [_import_once(path, format, workdir, run) for run in range(runs)]
    seconds = statistics.median(result["seconds"] for result in results)
    count = results[0]["records"].get(unit, 0)
    return {
        "format": format,
        unit: count,
        "median_seconds": round(seconds, 2),
        f"{unit}_per_second": round(count / seconds),
        "peak_mib": round(max(result["peak_bytes"] for result in results) / 2**20),
        "bad_records": results[0]["errors"],
        "dropped": results[0]["dropped"],
    }


def main(argv: list[str]) -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--log-views", type=int, default=1_000_000, help="views in the synthetic access log")
    parser.add_argument("--markdown-pages", type=int, default=5_000, help="pages in the Markdown folder")
    parser.add_argument(
        "--table-pages", type=int, default=100_000, help="pages of the page table and edge list"
    )
    parser.add_argument("--runs", type=int, default=3, help="runs per measurement (median printed)")
    args = parser.parse_args(argv)
    from rankrec.synth import synthesize

    with tempfile.TemporaryDirectory(prefix="rankrec-bench-") as scratch:
        workdir = Path(scratch)
        readers = 5_000
        started = time.perf_counter()
        log = synthesize(
            workdir / "log-wiki",
            pages=50_000,
            seed=1,
            layout="tables",
            readers=readers,
            views_per_reader=args.log_views / readers,
            access_log=True,
        )
        print(
            f"synth: {log.access_log_lines:,} access-log lines, {log.views:,} views "
            f"in {time.perf_counter() - started:.1f} s"
        )
        started = time.perf_counter()
        pages = synthesize(workdir / "md-wiki", pages=args.markdown_pages, seed=1, layout="markdown")
        print(f"synth: {pages.pages:,} Markdown pages in {time.perf_counter() - started:.1f} s")
        views = workdir / "log-wiki" / "views.csv"
        rows = [
            _measure(workdir / "log-wiki" / "access.log", "access-log", workdir, args.runs, "views"),
            _measure(views, "views", workdir, args.runs, "views"),
            _measure(views, "plain-sqlite3-views", workdir, args.runs, "views"),
            _measure(workdir / "md-wiki" / "pages", "markdown", workdir, args.runs, "pages"),
        ]
        lines = {"access-log": log.access_log_lines, "views": log.views}
        for row in rows:
            if row["format"] in lines:
                row["lines_per_second"] = round(lines[row["format"]] / row["median_seconds"])
            print(json.dumps(row))
        ours, plain = rows[1]["median_seconds"], rows[2]["median_seconds"]
        print(f"view events: rankrec {ours} s, plain sqlite3 {plain} s: {ours / plain:.2f}x")
        _tables(workdir, args.table_pages, args.runs)


def _tables(workdir: Path, pages: int, runs: int) -> None:
    """The page table and the edge list of a `rankrec synth` wiki, each imported alone, and the edge
    list inserted by plain sqlite3: rates, and rankrec's time over the plain insert's."""
    from rankrec.synth import synthesize

    started = time.perf_counter()
    made = synthesize(workdir / "tables", pages=pages, seed=1, layout="tables")
    print(f"synth: {made.pages:,} pages, {made.links:,} links in {time.perf_counter() - started:.1f} s")
    links = workdir / "tables" / "links.csv"
    edges = _measure(links, "edges", workdir, runs, "links")
    plain = _measure(links, "plain-sqlite3", workdir, runs, "links")
    for row in (edges, plain, _measure(workdir / "tables" / "pages.csv", "pages", workdir, runs, "pages")):
        print(json.dumps(row))
    print(
        f"edge list: rankrec {edges['median_seconds']} s, plain sqlite3 {plain['median_seconds']} s: "
        f"{edges['median_seconds'] / plain['median_seconds']:.2f}x"
    )


if __name__ == "__main__":
    main(sys.argv[1:])

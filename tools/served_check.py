"""Check that what `rankrec evaluate` reported is what a built index serves.

Makes the evaluation's test split again, writes a copy of the store whose reading history is the split's
training part only, runs `rankrec build --settings REPORT/settings.json` on it (the command a maintainer
runs), asks `related`/`recommend` of the published index for every test query, and scores those lists
with the evaluation's own metric. The nDCG@k printed should equal the report's rankrec nDCG@k.

    python tools/served_check.py --wiki WIKI.db --report REPORT --split sessions --gap 0.5
"""

from __future__ import annotations

import argparse
import dataclasses
import json
import sqlite3
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np

from rankrec.evaluate.metrics import evaluate_lists
from rankrec.evaluate.run import load_data, make_split
from rankrec.evaluate.splits import excluded_pages
from rankrec.index import load_index
from rankrec.recommend import reader_from_store, recommend, related
from rankrec.store import Store


def training_store(source: Path, target: Path, data, split) -> Path:
    """A copy of ``source`` whose views are the split's training part only."""
    with sqlite3.connect(source) as origin, sqlite3.connect(target) as copy:
        origin.backup(copy)  # SQLite's online backup: a consistent copy of the whole store
    with Store(source) as store:
        row_ids, names = store.users()
    user_of = dict(zip(row_ids.tolist(), names, strict=True))
    train = split.train
    with Store(target) as store:
        store.delete_views_before(float("inf"))
    with Store(target) as store, store.transaction():
        store.put_views(
            (user_of[int(user)], str(data.pages[page]), float(time), None)
            for user, page, time in zip(train.users, train.pages, train.times, strict=True)
        )
        store.log_import("training part", "served_check", len(train), 0)
    return target


def served(store: Store, index, data, split, k: int) -> np.ndarray:
    row_ids, names = store.users()
    user_of = dict(zip(row_ids.tolist(), names, strict=True))
    number_of = {str(page): number for number, page in enumerate(data.pages.tolist())}
    excluded = excluded_pages(split)
    lists = np.full((len(split.queries), k), -1, dtype=np.int64)
    for query in range(len(split.queries)):
        prefix = split.queries.pages[query]
        reader = reader_from_store(
            store, index, user_of[int(split.queries.users[query])], now=float(split.queries.times[query])
        )
        reader = dataclasses.replace(reader, recent=excluded[[query]].indices.astype(np.int64))
        if split.task == "sessions":
            pages = prefix[prefix >= 0]
            if pages.size == 1:
                result = related(index, str(data.pages[pages[0]]), reader=reader, k=k, exclude_read=True)
            else:
                restart = np.zeros(index.size)
                restart[pages] = 1.0 / pages.size
                result = recommend(
                    index, dataclasses.replace(reader, restart=restart), k=k, exclude_read=True
                )
        else:
            result = recommend(index, reader, k=k, exclude_read=True)
        found = [number_of[item.page] for item in result.items]
        lists[query, : len(found)] = found
    return lists


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--wiki", required=True, type=Path)
    parser.add_argument("--report", required=True, type=Path, help="the report folder of `rankrec evaluate`")
    parser.add_argument("--split", default="temporal", choices=("temporal", "last-n", "sessions"))
    parser.add_argument("--gap", type=float, default=1800.0)
    parser.add_argument("-k", type=int, default=10)
    parser.add_argument(
        "--defaults", action="store_true", help="build without --settings (the defaults) to compare with them"
    )
    args = parser.parse_args()
    with Store(args.wiki, create=False) as store:
        data = load_data(store)
    split = make_split(data, args.split, gap=args.gap)
    with tempfile.TemporaryDirectory(prefix="served-check-") as scratch:
        folder = Path(scratch)
        wiki = training_store(args.wiki, folder / "train.db", data, split)
        command = [
            sys.executable,
            "-m",
            "rankrec.cli",
            "build",
            "--wiki",
            str(wiki),
            "--index",
            str(folder / "index"),
        ]
        if not args.defaults:
            command += ["--settings", str(args.report / "settings.json")]
        subprocess.run(command, check=True)
        index = load_index(folder / "index")
        with Store(wiki, create=False) as store:
            lists = served(store, index, data, split, args.k)
    found = float(np.nanmean(evaluate_lists(lists, split.relevant, ks=(args.k,))[f"ndcg@{args.k}"]))
    reported = json.loads((args.report / "results.json").read_text())["methods"]["rankrec"]
    how = "rankrec build (defaults)" if args.defaults else "rankrec build --settings"
    print(f"served from `{how}`: ndcg@{args.k} {found:.4f}")
    print(f"reported by `rankrec evaluate`:        ndcg@{args.k} {reported[f'ndcg@{args.k}']:.4f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())

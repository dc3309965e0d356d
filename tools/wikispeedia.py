"""Put the Wikispeedia links and unfinished navigation paths into a rankrec store, for `rankrec evaluate`.

Usage (from the project root)::

    .venv/bin/python tools/wikispeedia.py --data ../shared/data/wikispeedia --out build/wikispeedia

writes ``pages.csv`` (id, title, space, tags), ``links.tsv`` (source, target) and ``views.csv`` (user, page,
timestamp) into ``--out`` and imports them with ``rankrec import`` into ``--out/wiki.db`` (made anew).

How the data becomes a wiki (the dataset's format: its SOURCE.md):

- every article is a page; its title is the decoded article name; its space is the top level of its first
  subject category (``subject.Science.Biology`` -> ``Science``), its tags every level of every subject
  category (``Science``, ``Science.Biology``);
- every hyperlink is a link (the few self-links are left out);
- every unfinished path is one reader's session: the reader is the hashed IP address; each step is a view
  of the page the player is on (a back click ``<`` views the previous page again); steps are 1 ms apart
  from the path's start time, and paths of one reader start whole seconds apart, so with a session gap of
  0.5 s every path is its own session (``rankrec evaluate --split sessions --gap 0.5``).

Timing of the steps inside a path is invented (the dataset keeps only a path's start and duration), so the
session task, which ignores time inside a session, is the meaningful one here.
"""

from __future__ import annotations

import argparse
import csv
import sys
from pathlib import Path
from urllib.parse import unquote

STEP_SECONDS = 0.001  # views of one path are this far apart
SESSION_GAP = 0.5  # the --gap that makes each path its own session


def _rows(path: Path, *, header: bool) -> list[list[str]]:
    text = path.read_text(encoding="utf-8")
    lines = [line for line in text.splitlines() if line and not line.startswith("#")]
    return [line.split("\t") for line in lines[1 if header else 0 :]]


def _categories(categories: Path) -> tuple[dict[str, str], dict[str, list[str]]]:
    """Each article's space (the top level of its first subject category) and tags (every level of every
    subject category: ``subject.Science.Biology`` -> ``Science``, ``Science.Biology``)."""
    spaces: dict[str, str] = {}
    tags: dict[str, list[str]] = {}
    for article, category in _rows(categories, header=True):
        parts = category.split(".")[1:]
        if parts:
            spaces.setdefault(article, parts[0])
        known = tags.setdefault(article, [])
        for depth in range(1, len(parts) + 1):
            tag = ".".join(parts[:depth])
            if tag not in known:
                known.append(tag)
    return spaces, tags


def path_views(paths: Path) -> list[tuple[str, str, str]]:
    """(reader, page, timestamp text) for every step of every unfinished path."""
    views = []
    for fields in _rows(paths, header=False):
        reader, start, steps = fields[0], float(fields[1]), fields[3].split(";")
        trail: list[str] = []
        for step, token in enumerate(steps):
            if token == "<":
                if len(trail) > 1:
                    trail.pop()
            else:
                trail.append(token)
            views.append((reader, trail[-1], f"{start + step * STEP_SECONDS:.3f}"))
    return views


def write_files(data: Path, out: Path) -> dict[str, Path]:
    """Write the pages, links and views files of the Wikispeedia folder ``data`` into ``out``."""
    out.mkdir(parents=True, exist_ok=True)
    articles = [row[0] for row in _rows(data / "articles.tsv", header=True)]
    spaces, tags = _categories(data / "categories.tsv")
    files = {"pages": out / "pages.csv", "edges": out / "links.tsv", "views": out / "views.csv"}
    with files["pages"].open("w", encoding="utf-8", newline="") as handle:
        writer = csv.writer(handle, lineterminator="\n")
        writer.writerow(["id", "title", "space", "tags"])
        writer.writerows(
            [
                article,
                unquote(article).replace("_", " "),
                spaces.get(article, ""),
                ";".join(tags.get(article, [])),
            ]
            for article in articles
        )
    with files["edges"].open("w", encoding="utf-8") as handle:
        handle.write("source\ttarget\n")
        links = _rows(data / "links.tsv", header=True)
        # a self-link says nothing about where a reader goes next (and rankrec's edge reader refuses it)
        handle.writelines(f"{source}\t{target}\n" for source, target in links if source != target)
    with files["views"].open("w", encoding="utf-8", newline="") as handle:
        writer = csv.writer(handle, lineterminator="\n")
        writer.writerow(["user", "page", "timestamp"])
        writer.writerows(path_views(data / "paths_unfinished.tsv"))
    return files


def prepare(data: Path, out: Path) -> Path:
    """Write the files and import them into ``out/wiki.db`` (made anew); returns the store's path."""
    from rankrec.cli import main

    files = write_files(data, out)
    wiki = out / "wiki.db"
    for suffix in ("", "-wal", "-shm"):
        Path(f"{wiki}{suffix}").unlink(missing_ok=True)
    for format in ("pages", "edges", "views"):  # pages first: their titles and spaces are kept
        code = main(["import", str(files[format]), "--wiki", str(wiki), "--format", format, "--strict"])
        if code != 0:
            raise SystemExit(f"importing {files[format]} failed (exit status {code})")
    return wiki


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument(
        "--data",
        type=Path,
        default=Path("../shared/data/wikispeedia"),
        help="the Wikispeedia folder (articles, categories, links, paths_unfinished .tsv)",
    )
    parser.add_argument(
        "--out", type=Path, default=Path("build/wikispeedia"), help="where the files and the store go"
    )
    args = parser.parse_args(argv)
    missing = [
        name
        for name in ("articles.tsv", "categories.tsv", "links.tsv", "paths_unfinished.tsv")
        if not (args.data / name).is_file()
    ]
    if missing:
        print(f"wikispeedia: {args.data} lacks {', '.join(missing)}", file=sys.stderr)
        return 2
    wiki = prepare(args.data, args.out)
    print(
        f"store written to {wiki}; evaluate with\n  rankrec evaluate --wiki {wiki} --report "
        f"{args.out / 'report'} --split sessions --gap {SESSION_GAP}"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())

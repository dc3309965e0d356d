"""``rankrec export``: every page's related list into a file or into the pages of a Markdown wiki; every
team's landing ordering into a file (``--teams``)."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from ._cli_common import add_cluster_option, list_urls, open_index, step_bars, worker_count
from ._output import EXPORT_FORMATS as FORMATS

_SHOWN_DIFFS = 3  # files whose whole diff a dry run prints (the others are counted)


def register(commands) -> None:
    """Add the ``export`` sub-command."""
    export = commands.add_parser(
        "export",
        help="write every page's related list (or, with --teams, every team's landing ordering) to a file, "
        "or related lists into the pages of a Markdown wiki",
        description=(
            "Ask the index for every page's related list, as the service answers a viewer in the given "
            "access groups (none: a public viewer, public pages only). With --out: one file, JSON (page "
            "-> items), JSON Lines or CSV, each item with page id, title, URL, score and reason. With "
            "--into: a 'Related pages' block between two comment markers in each Markdown page of the "
            "folder, replacing the previous block or appended; links are relative, so they resolve in the "
            "folder and in a site generator; the next import does not read the block's links. With --teams "
            "and --out: every team's landing ordering instead (team -> items), as `rankrec landing TEAM` "
            "makes it, keeping only pages the viewer may see too; teams with too few distinct active "
            "readers get no list and are only counted. Files are replaced atomically; pages changed since "
            "the import are left alone and named."
        ),
    )
    export.add_argument("--index", required=True, help="the index folder (written by `rankrec build`)")
    export.add_argument("--wiki", help="the wiki store (default: the one the index was built from)")
    target = export.add_mutually_exclusive_group(required=True)
    target.add_argument("--out", metavar="FILE", help="write the lists to FILE")
    target.add_argument("--into", metavar="WIKI_DIR", help="write a related block into each Markdown page")
    export.add_argument(
        "--teams",
        action="store_true",
        help="with --out: every team's landing ordering (as `rankrec landing` makes it), not related lists",
    )
    export.add_argument(
        "--format",
        choices=FORMATS,
        help="with --out: json, jsonl or csv (default: from FILE's suffix, else json)",
    )
    export.add_argument(
        "--viewer-group",
        action="append",
        default=[],
        metavar="G",
        help="lists as a viewer in access group G sees them (repeat for several groups)",
    )
    export.add_argument(
        "-k", type=int, metavar="K", help="items per list (default 10; with --teams 20, as `rankrec landing`)"
    )
    export.add_argument(
        "--url-template",
        metavar="T",
        help="with --out: item URLs from T, '{page}' standing for the page id (default: the store's URLs)",
    )
    export.add_argument(
        "--dry-run", action="store_true", help="with --into: print the changes, write nothing"
    )
    export.add_argument("--encoding", default="utf-8", help="with --into: the pages' encoding (utf-8)")
    export.add_argument(
        "--workers",
        type=worker_count,
        default=1,
        metavar="N",
        help="with --out: processes making the lists (default 1); the file is the same for any N",
    )
    add_cluster_option(export, "--out's lists, chunk by chunk,")
    export.set_defaults(run=_cmd_export)


def _format(args: argparse.Namespace) -> str:
    if args.format is not None:
        return args.format
    suffix = Path(args.out).suffix.lower().lstrip(".")
    return {"jsonl": "jsonl", "ndjson": "jsonl", "csv": "csv"}.get(suffix, "json")


def _cmd_export(args: argparse.Namespace) -> int:
    from .errors import UsageError
    from .export import export_lists
    from .export_wiki import stored_page_hashes, write_into_wiki

    if args.into is None and args.dry_run:
        raise UsageError("--dry-run goes with --into (an export to a file writes nothing else)")
    if args.teams and args.out is None:
        raise UsageError("--teams goes with --out (landing orderings are written to a file)")
    if args.k is None:
        args.k = 20 if args.teams else 10
    if args.k < 1:
        raise UsageError(f"-k must be at least 1; got {args.k}")
    if args.url_template is not None and "{page}" not in args.url_template:
        raise UsageError(f"--url-template must hold {{page}}; got {args.url_template!r}")
    index, store = open_index(args, need_store=True)
    groups = frozenset(args.viewer_group) or None
    with store, step_bars() as progress:
        if args.teams:
            return _export_landing(args, index, store, groups, progress)
        if args.out is not None:
            url = list_urls(args, store)
            done = export_lists(
                index,
                args.out,
                format=_format(args),
                groups=groups,
                k=args.k,
                url=url,
                progress=progress,
                workers=args.workers,
                cluster=args.cluster,
            )
            print(
                f"{done.lists:,} lists, {done.items:,} items written to {done.path} in {done.seconds:.1f} s"
            )
            return 0
        done = write_into_wiki(
            index,
            args.into,
            stored_hashes=stored_page_hashes(store),
            groups=groups,
            k=args.k,
            encoding=args.encoding,
            dry_run=args.dry_run,
            progress=progress,
        )
    for diff in done.diffs[:_SHOWN_DIFFS] if args.dry_run else ():
        sys.stdout.write(diff)
    verb = "would change" if args.dry_run else "changed"
    print(
        f"{done.files:,} Markdown pages: {done.written:,} {verb}, {done.unchanged:,} already current, "
        f"{done.without_list:,} without a list, {done.not_in_index:,} not in the index or not visible "
        f"({done.seconds:.1f} s)"
    )
    if args.dry_run and len(done.diffs) > _SHOWN_DIFFS:
        print(f"(diffs of {len(done.diffs) - _SHOWN_DIFFS:,} more pages not shown)")
    for relative in done.changed_since_import:
        print(f"left alone, changed since the import: {relative}", file=sys.stderr)
    for problem in done.unreadable:
        print(f"left alone, unreadable: {problem}", file=sys.stderr)
    return 0


def _export_landing(args: argparse.Namespace, index, store, groups, progress) -> int:
    """``--teams``: every team's landing ordering into ``--out``; left-out teams counted on stderr."""
    from .export import export_landing

    done = export_landing(
        index,
        store,
        args.out,
        format=_format(args),
        groups=groups,
        k=args.k,
        url=list_urls(args, store),
        progress=progress,
    )
    print(
        f"{done.lists:,} landing lists, {done.items:,} items written to {done.path} in {done.seconds:.1f} s"
    )
    if done.too_few_readers:
        teams = "team" if done.too_few_readers == 1 else "teams"
        print(
            f"{done.too_few_readers:,} {teams} left out: fewer than {done.minimum} distinct active readers",
            file=sys.stderr,
        )
    return 0

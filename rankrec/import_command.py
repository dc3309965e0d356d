"""The ``rankrec import`` and ``rankrec stats`` commands (parsing and formatting only)."""

from __future__ import annotations

import argparse
import sys

from ._cli_common import pseudonym_key, step_bars
from ._output import print_mapping
from .sources import FORMATS


def register(commands) -> None:
    """Add the ``import`` and ``stats`` sub-commands to an ``argparse`` sub-parsers object."""
    wiki_help = "the wiki store (an SQLite file; created by `import` if missing)"

    imp = commands.add_parser(
        "import",
        help="read pages, links, views and memberships into a wiki store",
        description=(
            "Read each SOURCE into the wiki store, all in one transaction. Bad records are skipped and "
            "reported as file:line: reason (exit 0 if at least one good record was read); with --strict "
            "the first bad record stops the import, nothing is written, and the exit status is 2. "
            "Re-importing the same file changes nothing."
        ),
    )
    imp.add_argument("sources", nargs="+", metavar="SOURCE", help="a file or folder to read")
    imp.add_argument("--wiki", required=True, metavar="WIKI.db", help=wiki_help)
    imp.add_argument(
        "--format",
        default="auto",
        choices=("auto", *FORMATS),
        help="how to read every SOURCE (default: guess each from its name and first line)",
    )
    imp.add_argument("--strict", action="store_true", help="stop at the first bad record, change nothing")
    imp.add_argument("--encoding", help="text encoding of the sources (default UTF-8; a BOM wins)")
    imp.add_argument("--base-url", help="HTML folders: the URL the folder is served at")
    imp.add_argument(
        "--exclude", metavar="SELECTOR", help="HTML folders: CSS selector of navigation chrome to ignore"
    )
    imp.add_argument(
        "--page-pattern",
        metavar="REGEX",
        help="access logs: regular expression with a (?P<page>...) group mapping a URL path to a page id",
    )
    imp.add_argument(
        "--anonymous",
        choices=("host-agent", "host", "drop"),
        help="access logs: who made a request without an authenticated user (default host-agent: a hash)",
    )
    imp.add_argument(
        "--max-errors", type=int, default=20, metavar="N", help="bad records to list (default 20)"
    )
    key_help = "a key file (`rankrec serve --pseudonym-key` makes one): users are stored as keyed pseudonyms"
    imp.add_argument("--pseudonym-key", metavar="FILE", help=key_help)
    imp.set_defaults(run=_cmd_import)

    stats = commands.add_parser("stats", help="sizes, graph shape, reading history, unresolved links")
    stats.add_argument("--wiki", required=True, metavar="WIKI.db", help="the wiki store")
    stats.add_argument("--format", default="table", choices=("table", "json"), help="output format")
    stats.add_argument("--worst", type=int, default=10, metavar="N", help="unresolved links to list")
    stats.set_defaults(run=_cmd_stats)


def _cmd_import(args: argparse.Namespace) -> int:
    from .importer import import_sources
    from .store import Store

    options = {
        "encoding": args.encoding,
        "base_url": args.base_url,
        "exclude": args.exclude,
        "page_pattern": args.page_pattern,
        "anonymous": args.anonymous,
    }
    sources = [(path, args.format) for path in args.sources]
    key = pseudonym_key(args)
    with Store(args.wiki) as store, step_bars() as bar:
        reports = import_sources(
            store, sources, strict=args.strict, progress=bar, pseudonym_key=key, **options
        )
    shown = 0
    for report in reports:
        kinds = ", ".join(f"{count:,} {kind}" for kind, count in sorted(report.records.items())) or "nothing"
        line = f"{report.source} ({report.format}): {kinds} in {report.seconds:.1f} s"
        if report.error_count:
            line += f"; {report.error_count:,} bad records skipped"
        if report.dropped:
            line += "; dropped " + ", ".join(f"{n:,} {why}" for why, n in sorted(report.dropped.items()))
        print(line)
        for error in report.errors:
            if shown < args.max_errors:
                print(f"  {error}", file=sys.stderr)
                shown += 1
    hidden = sum(report.error_count for report in reports) - shown
    if hidden > 0:
        print(f"  ... and {hidden:,} more bad records", file=sys.stderr)
    return 0


def _cmd_stats(args: argparse.Namespace) -> int:
    from .stats import wiki_stats
    from .store import Store

    with Store(args.wiki, create=False) as store:
        summary = wiki_stats(store, worst=args.worst)
    print_mapping(summary, args.format)
    return 0

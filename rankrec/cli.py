"""The `rankrec` command: parses arguments, calls the library, formats what it returns.

Exit status: 0 success, 2 bad input or usage (a one-line message, no traceback), 130 when
interrupted (nothing half-written: imports roll back). Set RANKREC_DEBUG=1 to see tracebacks
of unexpected errors.
"""

from __future__ import annotations

import argparse
import os
import sys
from collections.abc import Sequence
from dataclasses import asdict
from pathlib import Path

from . import __version__
from ._output import print_mapping, print_rows
from .errors import RankrecError
from .sources import FORMATS

EXIT_INPUT = 2


def _progress_bar(description: str, unit: str, total: int | None = None):
    from tqdm import tqdm

    return tqdm(total=total, desc=description, unit=unit, unit_scale=True, leave=False, disable=None)


# -- import ---------------------------------------------------------------------------------------
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
    with Store(args.wiki) as store, _progress_bar("importing", "rec") as bar:
        reports = import_sources(store, sources, strict=args.strict, progress=bar.update, **options)
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


# -- stats ----------------------------------------------------------------------------------------
def _cmd_stats(args: argparse.Namespace) -> int:
    from .stats import wiki_stats
    from .store import Store

    with Store(args.wiki, create=False) as store:
        summary = wiki_stats(store, worst=args.worst)
    print_mapping(summary, args.format)
    return 0


# -- rank ----------------------------------------------------------------------------------------
def _cmd_rank(args: argparse.Namespace) -> int:
    from .ranking import rank_pages
    from .store import Store

    with Store(args.wiki, create=False) as store:
        ranking = rank_pages(
            store, pages=args.restart, spaces=args.space, tags=args.tag, k=args.k, damping=args.damping
        )
    rows = [
        {"page": page, "score": float(score)}
        for page, score in zip(ranking.pages, ranking.scores, strict=True)
    ]
    print_rows(rows, args.format)
    if not ranking.solve.converged:
        print("warning: the power iteration did not converge; scores are approximate", file=sys.stderr)
    return 0


# -- synth ----------------------------------------------------------------------------------------
def _cmd_synth(args: argparse.Namespace) -> int:
    from .synth import synthesize

    bars: dict = {}

    def progress(step: str, done: int, total: int) -> None:
        bar = bars.get(step)
        if bar is None:
            bar = bars[step] = _progress_bar(step, "it", total)
        bar.update(done - bar.n)

    try:
        summary = synthesize(
            args.out,
            pages=args.pages,
            seed=args.seed,
            layout=args.layout,
            readers=args.readers,
            days=args.days,
            views_per_reader=args.views_per_reader,
            access_log=args.access_log,
            progress=progress,
        )
    except ValueError as error:
        print(f"rankrec synth: {error}", file=sys.stderr)
        return EXIT_INPUT
    finally:
        for bar in bars.values():
            bar.close()
    shown = {key: value for key, value in asdict(summary).items() if key not in ("files", "out_dir")}
    print_mapping(shown, "table")
    print(f"written to {args.out}")
    return 0


# -- demo -----------------------------------------------------------------------------------------
def _cmd_demo(args: argparse.Namespace) -> int:
    from .demo import run_demo

    run_demo(Path(args.workdir), out=sys.stdout)
    return 0


# -- parser ---------------------------------------------------------------------------------------
def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="rankrec",
        description="Recommend pages of an internal wiki with personalised PageRank.",
        epilog="Run `rankrec COMMAND --help` for each command's options.",
    )
    parser.add_argument("--version", action="version", version=f"rankrec {__version__}")
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

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
    imp.set_defaults(run=_cmd_import)

    stats = commands.add_parser("stats", help="sizes, graph shape, reading history, unresolved links")
    stats.add_argument("--wiki", required=True, metavar="WIKI.db", help="the wiki store")
    stats.add_argument("--format", default="table", choices=("table", "json"), help="output format")
    stats.add_argument("--worst", type=int, default=10, metavar="N", help="unresolved links to list")
    stats.set_defaults(run=_cmd_stats)

    rank = commands.add_parser(
        "rank",
        help="pages by global or personalised PageRank",
        description=(
            "Print the top pages by PageRank. With --restart, --space or --tag the random surfer restarts "
            "uniformly from those pages (personalised PageRank); without, from any page (global PageRank). "
            "Dangling pages send their mass to the restart distribution."
        ),
    )
    rank.add_argument("--wiki", required=True, metavar="WIKI.db", help="the wiki store")
    rank.add_argument(
        "--restart", action="append", default=[], metavar="PAGE", help="restart page (repeatable)"
    )
    rank.add_argument(
        "--space", action="append", default=[], metavar="S", help="restart from a space's pages"
    )
    rank.add_argument("--tag", action="append", default=[], metavar="T", help="restart from a tag's pages")
    rank.add_argument("-k", type=int, default=20, help="how many pages (default 20)")
    rank.add_argument("--damping", type=float, default=0.85, help="probability of following a link (0.85)")
    rank.add_argument("--format", default="table", choices=("table", "json", "csv"), help="output format")
    rank.set_defaults(run=_cmd_rank)

    synth = commands.add_parser(
        "synth",
        help="write an invented organisation's wiki and reading history (demos, benchmarks)",
        description="Deterministic: the same --pages and --seed give the same files.",
    )
    synth.add_argument("--pages", type=int, required=True, metavar="N", help="number of pages")
    synth.add_argument("--out", required=True, metavar="DIR", help="folder to create (must not hold files)")
    synth.add_argument("--seed", type=int, default=0, metavar="S", help="random seed (default 0)")
    synth.add_argument(
        "--layout",
        default="auto",
        choices=("auto", "markdown", "tables"),
        help="Markdown folder or page/edge tables (default: Markdown up to 20,000 pages)",
    )
    synth.add_argument(
        "--readers", type=int, metavar="N", help="number of readers (default scales with pages)"
    )
    synth.add_argument(
        "--days", type=int, default=90, metavar="D", help="days of reading history (default 90)"
    )
    synth.add_argument(
        "--views-per-reader",
        type=float,
        metavar="V",
        help="typical views per reader (default scales with pages)",
    )
    synth.add_argument(
        "--access-log", action="store_true", help="also write the views as a Combined Log Format access log"
    )
    synth.set_defaults(run=_cmd_synth)

    demo = commands.add_parser(
        "demo", help="import the bundled invented wiki and show what rankrec makes of it"
    )
    demo.add_argument("--workdir", default="build/demo", metavar="DIR", help="where the demo store goes")
    demo.set_defaults(run=_cmd_demo)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    try:
        return args.run(args)
    except RankrecError as error:
        print(f"rankrec {args.command}: {error}", file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        print(f"rankrec {args.command}: interrupted; nothing was written", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0
    except Exception as error:  # the last guard: a message, not a traceback
        if os.environ.get("RANKREC_DEBUG"):
            raise
        print(
            f"rankrec {args.command}: unexpected error: {type(error).__name__}: {error} "
            "(set RANKREC_DEBUG=1 for a traceback)",
            file=sys.stderr,
        )
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())

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
from contextlib import contextmanager
from dataclasses import asdict
from importlib import import_module
from pathlib import Path

from . import __version__
from ._output import print_mapping, print_rows
from .errors import RankrecError
from .sources import FORMATS

EXIT_INPUT = 2

# Commands that live beside the code they run; each module has ``register(commands)``.
_COMMAND_MODULES = ("rankrec.evaluate.command", "rankrec.serve_command")


def _progress_bar(description: str, unit: str, total: int | None = None):
    from tqdm import tqdm

    return tqdm(total=total, desc=description, unit=unit, unit_scale=True, leave=False, disable=None)


@contextmanager
def _step_bars():
    """A ``progress(step, done, total)`` callback drawing one bar per step; closes them at the end."""
    bars: dict = {}

    def progress(step: str, done: int, total: int) -> None:
        bar = bars.get(step)
        if bar is None:
            bar = bars[step] = _progress_bar(step, "it", total)
        bar.update(done - bar.n)

    try:
        yield progress
    finally:
        for bar in bars.values():
            bar.close()


def _pseudonym_key(args: argparse.Namespace) -> bytes | None:
    from .privacy import load_key

    return None if args.pseudonym_key is None else load_key(args.pseudonym_key)


def _stored_user(args: argparse.Namespace, user: str) -> str:
    """The id ``user`` is stored under: its keyed pseudonym when ``--pseudonym-key`` is given."""
    from .privacy import stored_id

    return stored_id(_pseudonym_key(args), user)


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
    key = _pseudonym_key(args)
    with Store(args.wiki) as store, _progress_bar("importing", "rec") as bar:
        reports = import_sources(
            store, sources, strict=args.strict, progress=bar.update, pseudonym_key=key, **options
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


# -- build, related, recommend, landing ------------------------------------------------------------
def _cmd_build(args: argparse.Namespace) -> int:
    from .index import build_index, load_index
    from .store import Store

    with _step_bars() as progress, Store(args.wiki, create=False) as store:
        build_index(
            store,
            args.index,
            damping=args.damping,
            tol=args.tol,
            topics=args.topics,
            hubs=args.hubs,
            k_related=args.k_related,
            lift=args.lift,
            view_share=args.view_share,
            workers=args.workers,
            progress=progress,
        )
    manifest = load_index(args.index).manifest
    print_mapping({**manifest.counts, "seconds": manifest.seconds}, "table")
    print(f"index written to {args.index}")
    return 0


def _open_index(args: argparse.Namespace, *, need_store: bool):
    """The index, and its store (checked current) from --wiki or the manifest (None: not needed, absent)."""
    from .index import load_index
    from .store import Store

    index = load_index(args.index)
    wiki = args.wiki or index.manifest.store
    if args.wiki is None and not need_store and not Path(wiki).is_file():
        return index, None
    store = Store(wiki, create=False)
    try:
        index.check_current(store)
    except BaseException:
        store.close()
        raise
    return index, store


def _print_list(result, format: str) -> None:
    print_rows(result.rows(), format)


def _cmd_related(args: argparse.Namespace) -> int:
    from .recommend import reader_from_store, related

    index, store = _open_index(args, need_store=args.viewer is not None)
    try:
        viewer = None if args.viewer is None else _stored_user(args, args.viewer)
        reader = None if viewer is None else reader_from_store(store, index, viewer)
        result = related(
            index,
            args.page,
            reader=reader,
            k=args.k,
            exclude_linked=args.exclude_linked,
            exclude_read=args.exclude_read,
            blend=args.blend,
            lift=args.lift,
            per_space=args.per_space,
        )
    finally:
        if store is not None:
            store.close()
    _print_list(result, args.format)
    return 0


def _cmd_recommend(args: argparse.Namespace) -> int:
    from .recommend import reader_from_store, recommend

    index, store = _open_index(args, need_store=True)
    with store:
        reader = reader_from_store(store, index, _stored_user(args, args.user))
        result = recommend(
            index,
            reader,
            k=args.k,
            exclude_read=not args.include_read,
            lift=args.lift,
            per_space=args.per_space,
        )
    _print_list(result, args.format)
    return 0


def _cmd_landing(args: argparse.Namespace) -> int:
    from .recommend import changes_since, landing, read_previous, team_from_store

    index, store = _open_index(args, need_store=True)
    with store:
        team = team_from_store(store, index, args.team, min_readers=args.min_readers)
        result = landing(index, team, k=args.k, lift=args.lift, per_space=args.per_space)
    if args.since is None:
        _print_list(result, args.format)
        return 0
    entered, left = changes_since(result, read_previous(args.since))
    rows = [{**row, "change": "entered" if row["page"] in entered else ""} for row in result.rows()]
    if args.format in ("json", "csv"):
        rows += [
            {
                "rank": None,
                "page": page,
                "title": None,
                "space": None,
                "score": None,
                "reason": None,
                "change": "left",
            }
            for page in left
        ]
        print_rows(rows, args.format)
        return 0
    print_rows(rows, args.format)
    if left:
        gap = "\n" if args.format == "md" else ""
        print(f"{gap}left the list since the last export: " + ", ".join(left))
    return 0


# -- synth ----------------------------------------------------------------------------------------
def _cmd_synth(args: argparse.Namespace) -> int:
    from .synth import synthesize

    try:
        with _step_bars() as progress:
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
    key_help = "a key file (`rankrec serve --pseudonym-key` makes one): users are stored as keyed pseudonyms"
    imp.add_argument("--pseudonym-key", metavar="FILE", help=key_help)
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

    index_help = "the index folder (written by `rankrec build`)"
    wiki_default = "the wiki store (default: the one the index was built from)"
    build = commands.add_parser(
        "build",
        help="compute and publish the recommendation index of a wiki store",
        description=(
            "Compute global PageRank, a basis of topic and hub vectors and every page's related list, "
            "and publish them as one folder (atomically: a failed build leaves the previous index)."
        ),
    )
    build.add_argument("--wiki", required=True, metavar="WIKI.db", help="the wiki store")
    build.add_argument("--index", required=True, metavar="DIR", help="the index folder to (re)place")
    build.add_argument("--damping", type=float, default=0.85, help="probability of following a link (0.85)")
    build.add_argument("--tol", type=float, default=1e-6, help="power-iteration tolerance, L1 (1e-6)")
    build.add_argument(
        "--topics", default="spaces", metavar="spaces|tags|none|text:K", help="topic vectors (default spaces)"
    )
    build.add_argument("--hubs", type=int, default=64, metavar="N", help="most-viewed pages as basis vectors")
    build.add_argument(
        "--k-related", type=int, default=50, metavar="K", help="candidates kept per page (default 50)"
    )
    build.add_argument(
        "--lift", type=float, default=0.5, metavar="B", help="rank by score / global^B (default 0.5)"
    )
    build.add_argument(
        "--view-share",
        type=float,
        metavar="S",
        help="precompute only the most-viewed pages carrying this share of views (default: every page)",
    )
    build.add_argument("--workers", type=int, default=1, metavar="N", help="processes (default 1)")
    build.set_defaults(run=_cmd_build)

    def list_options(command, k: int) -> None:
        command.add_argument("--index", required=True, metavar="DIR", help=index_help)
        command.add_argument("--wiki", metavar="WIKI.db", help=wiki_default)
        command.add_argument("-k", type=int, default=k, help=f"how many pages (default {k})")
        command.add_argument("--lift", type=float, metavar="B", help="lift exponent (default: the index's)")
        command.add_argument("--per-space", type=int, metavar="M", help="at most M pages from one space")
        command.add_argument(
            "--format", default="table", choices=("table", "json", "csv", "md"), help="output format"
        )

    rel = commands.add_parser(
        "related",
        help="pages related to a page",
        description="Without --viewer only pages visible to everyone are listed.",
    )
    rel.add_argument("page", metavar="PAGE", help="page id")
    list_options(rel, 10)
    rel.add_argument("--viewer", metavar="USER", help="apply this user's access groups and reading history")
    held_as = "the store holds users as pseudonyms under this key"
    rel.add_argument("--pseudonym-key", metavar="FILE", help=held_as)
    rel.add_argument("--exclude-linked", action="store_true", help="leave out pages PAGE links to")
    rel.add_argument(
        "--exclude-read", action="store_true", help="leave out pages the viewer read in the last 30 days"
    )
    rel.add_argument(
        "--blend", type=float, default=0.0, metavar="W", help="mix in the viewer's profile with weight W"
    )
    rel.set_defaults(run=_cmd_related)

    rec = commands.add_parser("recommend", help="a reader's personal list")
    rec.add_argument("user", metavar="USER", help="user id")
    list_options(rec, 10)
    rec.add_argument(
        "--include-read", action="store_true", help="keep pages the user read in the last 30 days"
    )
    rec.add_argument("--pseudonym-key", metavar="FILE", help=held_as)
    rec.set_defaults(run=_cmd_recommend)

    land = commands.add_parser(
        "landing",
        help="a team's landing ordering",
        description=(
            "Only pages every member may see; refused for teams with too few distinct active readers. "
            "No output names a member."
        ),
    )
    land.add_argument("team", metavar="TEAM", help="team name")
    list_options(land, 20)
    land.add_argument(
        "--since", metavar="PREVIOUS.json", help="mark what entered or left since this earlier JSON export"
    )
    land.add_argument(
        "--min-readers", type=int, default=5, metavar="N", help="fewest distinct active readers (default 5)"
    )
    land.set_defaults(run=_cmd_landing)

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

    for name in _COMMAND_MODULES:
        import_module(name).register(commands)
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

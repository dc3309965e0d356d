"""The ``rankrec import`` and ``rankrec stats`` commands (parsing and formatting only)."""

from __future__ import annotations

import argparse
import sys

from ._cli_common import pseudonym_key, step_bars, worker_count
from ._output import print_mapping
from .sources import ALIASES, FORMATS, ROOT_RELATIVE, SAME_PAGE, SPACE_MODES, check_base_url, detect_format
from .sources.records import DEFAULT_EXCLUDE


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
        "--exclude",
        action="append",
        default=[],
        metavar="SELECTOR",
        help=(
            "HTML folders: CSS selector of more page chrome whose links and text are ignored (repeatable); "
            f"added to the defaults {DEFAULT_EXCLUDE!r}. Other chrome (footers, bars, sidebars) is "
            "judged from links that repeat in one place on many pages"
        ),
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
    imp.add_argument(
        "--keep-site-in-titles",
        action="store_true",
        help="folders: keep page titles whole (by default the site name that at least 60%% of a folder's "
        "titles carry, such as ' | Acme Docs' at the end, is cut off; the import summary shows it)",
    )
    imp.add_argument(
        "--spaces",
        default="auto",
        choices=SPACE_MODES,
        help="folders: where pages' spaces come from. auto (default): a page's first folder when most pages "
        "are in folders, else the site's own structure (its 'up' links, its table-of-contents page, or "
        "file-name prefixes; at most 40 spaces, small ones lumped into 'other'); folders: first folders "
        "only; none: no spaces from the layout",
    )
    imp.add_argument(
        "--workers",
        type=worker_count,
        default=1,
        metavar="N",
        help="folders: processes parsing the page files (default 1); the store is the same for any N",
    )
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
        "exclude": ", ".join((DEFAULT_EXCLUDE, *args.exclude)) if args.exclude else None,
        "page_pattern": args.page_pattern,
        "anonymous": args.anonymous,
    }
    # checked before the store is opened: a bad option leaves no store file behind
    if args.base_url is not None:
        check_base_url(args.base_url, name="--base-url")
    sources = [(path, detect_format(path) if args.format == "auto" else args.format) for path in args.sources]
    key = pseudonym_key(args)
    with Store(args.wiki) as store, step_bars() as bar:
        reports = import_sources(
            store,
            sources,
            strict=args.strict,
            progress=bar,
            pseudonym_key=key,
            keep_title_affixes=args.keep_site_in_titles,
            spaces=args.spaces,
            workers=args.workers,
            **options,
        )
        held = store.counts()
        held["links_total"] = store.stored_link_count()
    shown = 0
    for report in reports:
        kinds = ", ".join(f"{count:,} {kind}" for kind, count in sorted(report.records.items())) or "nothing"
        line = f"{report.source} ({report.format}): {kinds} in {report.seconds:.1f} s"
        if report.error_count:
            line += f"; {report.error_count:,} bad records skipped"
        dropped = dict(report.dropped)
        same_page, root_relative = dropped.pop(SAME_PAGE, 0), dropped.pop(ROOT_RELATIVE, 0)
        if same_page:
            line += f"; {same_page:,} same-page links (to the page itself) counted apart"
        aliases = dropped.pop(ALIASES, 0)
        if aliases:
            line += f"; {aliases:,} symbolic links to other page files read as those pages"
        if dropped:
            line += "; dropped " + ", ".join(f"{n:,} {why}" for why, n in sorted(dropped.items()))
        print(line)
        if root_relative:
            print(
                f'  {root_relative:,} root-relative links (href="/...") were not resolved: without '
                "--base-url the site's root is unknown; give --base-url URL (the address the folder is "
                "served at) to resolve them"
            )
        if report.site is not None:
            print(f"  {_site_line(report.site, args.keep_site_in_titles)}")
        for error in report.errors:
            if shown < args.max_errors:
                print(f"  {error}", file=sys.stderr)
                shown += 1
    hidden = sum(report.error_count for report in reports) - shown
    if hidden > 0:
        print(f"  ... and {hidden:,} more bad records", file=sys.stderr)
    print(_store_line(args.wiki, held))
    return 0


def _store_line(wiki: str, held: dict) -> str:
    """What the store holds after the import, its link counts named as `rankrec stats` names them: the
    links read above count once per (page, target) in the store, a re-read page's replace its old ones."""
    other = held["links_total"] - held["links"] - held["unresolved_links"]
    return (
        f"{wiki} now holds {held['pages']:,} pages and {held['links_total']:,} links: {held['links']:,} "
        f"between its pages (stats: links) and {held['unresolved_links']:,} to pages no source describes "
        "(stats: unresolved links)" + (f", {other:,} from pages no source describes" if other else "")
    )


def _site_line(site, kept: bool) -> str:
    """What the import found of a folder's site, in one line."""
    affixes = (("prefix", site.title_prefix), ("suffix", site.title_suffix))
    cut = " and ".join(f"{what} {affix!r}" for what, affix in affixes if affix)
    titles = "titles kept as given" if kept else f"cut title {cut}" if cut else "no common title affix"
    spaces = f"{site.space_count:,} spaces from {site.spaces}" if site.space_count else "no spaces"
    return f"{titles}; {spaces}"


def _cmd_stats(args: argparse.Namespace) -> int:
    from .stats import wiki_stats
    from .store import Store

    with Store(args.wiki, create=False) as store:
        summary = wiki_stats(store, worst=args.worst)
    print_mapping(summary, args.format)
    return 0

"""The ``rankrec rank`` command (parsing and formatting only; the work is in :mod:`rankrec.ranking`)."""

from __future__ import annotations

import argparse
import sys

from ._output import print_rows
from .errors import UsageError


def register(commands) -> None:
    """Add the ``rank`` sub-command to an ``argparse`` sub-parsers object."""
    rank = commands.add_parser(
        "rank",
        help="pages by global or personalised PageRank",
        description=(
            "Print the top pages by PageRank, with their titles and spaces. With --restart, --space or --tag "
            "the random surfer restarts uniformly from those pages (personalised PageRank); without, from "
            "any page (global PageRank). Dangling pages send their mass to the restart distribution."
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
    rank.add_argument(
        "--space-pages",
        default="any",
        choices=("any", "first", "only"),
        help=(
            "with --space: where that space's pages go in the list: ranked among all pages (any, the "
            "default), ahead of every other page (first; each part keeps its own order), or alone (only)"
        ),
    )
    rank.add_argument("-k", type=int, default=20, help="how many pages (default 20)")
    rank.add_argument("--damping", type=float, default=0.85, help="probability of following a link (0.85)")
    rank.add_argument(
        "--lift",
        type=float,
        default=0.0,
        metavar="B",
        help=(
            "rank by score / global^B, as related, recommend and landing lists do, so that pages every "
            "part of the wiki links to do not top the list (needs a restart; default 0: plain scores; "
            "built indexes use 0.5 unless evaluation chose otherwise); adds the global and lifted columns"
        ),
    )
    rank.add_argument("--format", default="table", choices=("table", "json", "csv"), help="output format")
    rank.set_defaults(run=_cmd_rank)


def _cmd_rank(args: argparse.Namespace) -> int:
    from .ranking import rank_pages
    from .store import Store

    if args.space_pages != "any" and not args.space:
        raise UsageError(f"--space-pages {args.space_pages} needs --space")
    if args.lift and not (args.restart or args.space or args.tag):
        raise UsageError(
            "--lift weighs personalised against global PageRank: give --restart, --space or --tag"
        )
    with Store(args.wiki, create=False) as store:
        try:
            ranking = rank_pages(
                store,
                pages=args.restart,
                spaces=args.space,
                tags=args.tag,
                k=args.k,
                damping=args.damping,
                lift=args.lift,
                space_pages=args.space_pages,
            )
        except ValueError as error:  # a bad -k, --damping or --lift: the library's message names it
            raise UsageError(str(error)) from None
    rows = []
    for position, page in enumerate(ranking.pages):
        row = {
            "page": page,
            "title": ranking.titles[position],
            "space": ranking.spaces[position],
            "score": float(ranking.scores[position]),
        }
        if ranking.global_scores is not None:
            row["global"] = float(ranking.global_scores[position])
            row["lifted"] = float(ranking.ranked[position])
        rows.append(row)
    print_rows(rows, args.format)
    if not ranking.converged:
        print("warning: the power iteration did not converge; scores are approximate", file=sys.stderr)
    return 0

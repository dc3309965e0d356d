"""The ``rankrec rank`` command (parsing and formatting only; the work is in :mod:`rankrec.ranking`)."""

from __future__ import annotations

import argparse
import sys

from ._output import print_rows


def register(commands) -> None:
    """Add the ``rank`` sub-command to an ``argparse`` sub-parsers object."""
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

"""The ``rankrec synth`` command (parsing and formatting only; the work is in :mod:`rankrec.synth`)."""

from __future__ import annotations

import argparse
from dataclasses import asdict

from ._cli_common import step_bars
from ._output import print_mapping
from .errors import UsageError


def register(commands) -> None:
    """Add the ``synth`` sub-command to an ``argparse`` sub-parsers object."""
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
    synth.add_argument(
        "--text-words",
        type=float,
        default=300,
        metavar="W",
        help="tables layout: mean words of invented text a page, in pages.csv (default 300; 0: no text)",
    )
    synth.set_defaults(run=_cmd_synth)


def _cmd_synth(args: argparse.Namespace) -> int:
    from .synth import synthesize

    try:
        with step_bars() as progress:
            summary = synthesize(
                args.out,
                pages=args.pages,
                seed=args.seed,
                layout=args.layout,
                readers=args.readers,
                days=args.days,
                views_per_reader=args.views_per_reader,
                access_log=args.access_log,
                text_words=args.text_words,
                progress=progress,
            )
    except ValueError as error:  # synthesize checks its arguments
        raise UsageError(str(error)) from None
    shown = {key: value for key, value in asdict(summary).items() if key not in ("files", "out_dir")}
    print_mapping(shown, "table")
    print(f"written to {args.out}")
    return 0

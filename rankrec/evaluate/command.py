"""The ``rankrec evaluate`` command (parsing and formatting only; the work is in this package)."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from .._cli_common import add_cluster_option
from ..configuration import Configuration
from ..errors import UsageError
from ..sources import FieldError, parse_timestamp
from .splits import SESSION_GAP_SECONDS


def _cutoff(text: str) -> float:
    try:
        return parse_timestamp(text, now=float("inf"))
    except FieldError as error:
        raise argparse.ArgumentTypeError(str(error)) from None


def _numbers(text: str) -> tuple[float, ...]:
    try:
        values = tuple(float(part) for part in text.split(",") if part.strip())
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected comma-separated numbers, got {text!r}") from None
    if not values:
        raise argparse.ArgumentTypeError(f"expected at least one number, got {text!r}")
    return values


def _ks(text: str) -> tuple[int, ...]:
    try:
        values = tuple(int(part) for part in text.split(",") if part.strip())
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected comma-separated list lengths, got {text!r}") from None
    if not values or min(values) < 1:
        raise argparse.ArgumentTypeError(f"list lengths must be integers >= 1, got {text!r}")
    return values


def _bar(total: int):
    from tqdm import tqdm

    return tqdm(total=total, desc="evaluating", unit="step", leave=False, disable=None)


def evaluate(args: argparse.Namespace, out=None) -> int:
    """Run ``rankrec evaluate``; prints the headline table and where the report is."""
    from .grid import Grid
    from .report import write_report
    from .run import load_data, make_split, open_store, run_evaluation

    out = out or sys.stdout
    try:  # settings first, so that a bad value costs no reading (the library checks its own)
        start = Configuration(
            damping=args.damping,
            half_life_days=args.half_life,
            navigation_weight=args.navigation_weight,
            lift=args.lift,
            ranker=args.ranker,
            editorial_place=args.editorial_place or "",  # the ranker learns from the training part's blocks
        )
        grid = None
        if not args.no_sweep:
            defaults = Grid()
            grid = Grid(
                damping=args.grid_damping or defaults.damping,
                lift=args.grid_lift or defaults.lift,
                half_life_days=args.grid_half_life or defaults.half_life_days,
                navigation_weight=args.grid_navigation_weight or defaults.navigation_weight,
            )
    except ValueError as error:
        raise UsageError(str(error)) from None
    for name in ("samples", "workers", "prefix", "last"):
        if getattr(args, name) < 1:
            raise UsageError(f"--{name} must be at least 1; got {getattr(args, name)!r}")
    if (args.split == "editorial") != (args.editorial_place is not None):
        raise UsageError("--editorial-place goes with --split editorial, and --split editorial needs it")
    if not 0 < args.test_share < 1 or args.gap <= 0:
        raise UsageError(
            f"--test-share must lie in (0, 1) and --gap be positive; got {args.test_share!r} and {args.gap!r}"
        )
    with open_store(args.wiki) as store:
        data = load_data(store)
    split = make_split(
        data,
        args.split,
        cutoff=args.cutoff,
        test_share=args.test_share,
        gap=args.gap,
        n=args.last,
        prefix=args.prefix,
        seed=args.seed,
        editorial=args.editorial_place,
    )
    bar = _bar(None)
    try:

        def progress(description: str, done: int, total: int) -> None:
            bar.total = total
            bar.set_description(description[:40], refresh=False)
            bar.update(done - bar.n)

        evaluation = run_evaluation(
            data,
            split,
            grid=grid,
            start=start,
            ks=args.k,
            samples=args.samples,
            seed=args.seed,
            workers=args.workers,
            progress=progress,
            cluster=args.cluster,
        )
    finally:
        bar.close()
    write_report(evaluation, args.report)
    _summary(evaluation, out)
    out.write(f"report written to {args.report} (report.md, results.json, settings.json, plots)\n")
    settings = Path(args.report) / "settings.json"
    out.write(
        f"serve what was evaluated: rankrec build --wiki {args.wiki} --index DIR --settings {settings}\n"
    )
    return 0


def _summary(evaluation, out) -> None:
    k = evaluation.settings["headline_k"]
    shown = (f"ndcg@{k}", f"recall@{k}", f"hit_rate@{k}", "mrr", f"coverage@{k}")
    width = max(len(name) for name in evaluation.methods)
    out.write(f"{'method':<{width}}  " + "  ".join(f"{name:>11}" for name in shown) + "\n")
    for name, scores in evaluation.methods.items():
        cells = ("-" if scores.means.get(m) is None else f"{scores.means[m]:.4f}" for m in shown)
        out.write(f"{name:<{width}}  " + "  ".join(f"{cell:>11}" for cell in cells) + "\n")
    found = evaluation.comparison["metrics"].get(f"ndcg@{k}")
    configuration = evaluation.configuration
    shown_configuration = ", ".join(
        f"{name} {getattr(configuration, name):g}"
        for name in ("damping", "lift", "navigation_weight", "half_life_days")
    )
    out.write(f"rankrec configuration: {shown_configuration}\n")
    if found is not None:
        low, high = found["ci95"]
        out.write(
            f"rankrec − {evaluation.best_baseline} (best baseline), ndcg@{k}: "
            f"{found['difference']:+.4f}, 95% interval [{low:+.4f}, {high:+.4f}]\n"
        )


def register(commands) -> None:
    """Add the ``evaluate`` sub-command to an ``argparse`` sub-parsers object."""
    command = commands.add_parser(
        "evaluate",
        help="offline evaluation: rankrec against simple baselines on the store's own history",
        description=(
            "Split the store's views (or, with --split links, its links) so that nothing of the test "
            "part reaches any model, choose rankrec's damping, half-life, navigation weight, text weight "
            "and lift on a validation split carved from the training part, and compare rankrec with "
            "random, most-read, global PageRank, out-links, co-visitation, text-similarity and "
            "team-most-read lists on the test split. Writes DIR/report.md, DIR/results.json, "
            "DIR/settings.json "
            "(for `rankrec build --settings`) and PNG plots (the folder is replaced as a whole)."
        ),
    )
    command.add_argument("--wiki", required=True, metavar="WIKI.db", help="the wiki store")
    command.add_argument("--report", required=True, metavar="DIR", help="the report folder to (re)place")
    command.add_argument(
        "--split",
        default="temporal",
        choices=("temporal", "last-n", "sessions", "links", "editorial"),
        help="temporal: each reader's new pages after a global cutoff (default); last-n: each reader's "
        "last N views; sessions: given a session's first page(s), the pages it goes on to; links: hide "
        "--test-share of each page's content links (never page chrome) from every input and recover them "
        "(needs no reading history); editorial: recover the links of the site's own curated blocks "
        "(--editorial-place), hidden from every input, for half of the pages holding some",
    )
    command.add_argument(
        "--editorial-place",
        metavar="GLOB",
        help="--split editorial: shell pattern of the link places of curated 'related'/'see also' blocks, "
        "matched against the place `rankrec stats` and the importers record: HTML, the element chain with "
        "classes ('*seealso*' for a Sphinx See-also box); Markdown, blocks and the heading above "
        "('md:*@see also')",
    )
    command.add_argument(
        "--cutoff",
        type=_cutoff,
        metavar="ISO-DATE",
        help="start of the test period (default: the last --test-share of the time span)",
    )
    command.add_argument(
        "--test-share",
        type=float,
        default=0.2,
        metavar="S",
        help="share of the time span that is test when no cutoff is given; with --split links, the share "
        "of each page's content links hidden (0.2)",
    )
    command.add_argument(
        "--gap",
        type=float,
        default=SESSION_GAP_SECONDS,
        metavar="SECONDS",
        help=f"inactivity that ends a session, in seconds ({SESSION_GAP_SECONDS:g})",
    )
    command.add_argument(
        "--prefix",
        type=int,
        default=1,
        metavar="P",
        help="sessions: pages of each session given as the query (1)",
    )
    command.add_argument(
        "--last", type=int, default=1, metavar="N", help="last-n: views held out per reader (1)"
    )
    command.add_argument(
        "-k",
        type=_ks,
        default=(1, 3, 5, 10, 20),
        metavar="K,K,...",
        help="list lengths to score (default 1,3,5,10,20; the headline is 10 when listed)",
    )
    command.add_argument(
        "--seed", type=int, default=0, help="seed of the random baseline and the bootstrap (0)"
    )
    command.add_argument("--samples", type=int, default=1000, metavar="B", help="bootstrap resamples (1000)")
    command.add_argument(
        "--workers", type=int, default=1, metavar="N", help="threads of the power iteration (1)"
    )
    add_cluster_option(command, "the sweeps' builds side by side", reads_folder=False)
    settings = command.add_argument_group("rankrec's settings (the sweeps start from these)")
    defaults = Configuration()
    settings.add_argument(
        "--damping",
        type=float,
        default=defaults.damping,
        help=f"probability of following a link ({defaults.damping:g})",
    )
    settings.add_argument(
        "--half-life",
        type=float,
        default=defaults.half_life_days,
        metavar="DAYS",
        help=f"half-life of a view in a reader's profile ({defaults.half_life_days:g} days)",
    )
    settings.add_argument(
        "--navigation-weight",
        type=float,
        default=defaults.navigation_weight,
        metavar="W",
        help=f"share of a page's row given to observed navigation ({defaults.navigation_weight:g})",
    )
    settings.add_argument(
        "--lift",
        type=float,
        default=defaults.lift,
        metavar="B",
        help=f"rank by score / global^B ({defaults.lift:g})",
    )
    settings.add_argument(
        "--ranker",
        choices=("auto", "lightgbm", "linear", "none"),
        default=defaults.ranker,
        help="related lists' order: learnt in each build from the training part's own sessions or held-out "
        f"links, or none (the PageRank and text mix); validation also tries none ({defaults.ranker})",
    )
    settings.add_argument("--no-sweep", action="store_true", help="use these settings as they are")
    grid = command.add_argument_group("sweep grids (comma-separated values)")
    from .grid import GRID_NAMES, Grid  # the grid's own defaults, shown as they are

    grid_defaults = Grid()
    shown = {name: ",".join(f"{value:g}" for value in getattr(grid_defaults, name)) for name in GRID_NAMES}
    grid.add_argument("--grid-damping", type=_numbers, metavar="V,V,...", help=f"default {shown['damping']}")
    grid.add_argument("--grid-lift", type=_numbers, metavar="V,V,...", help=f"default {shown['lift']}")
    grid.add_argument(
        "--grid-half-life", type=_numbers, metavar="V,V,...", help=f"default {shown['half_life_days']} (days)"
    )
    grid.add_argument(
        "--grid-navigation-weight",
        type=_numbers,
        metavar="V,V,...",
        help=f"default {shown['navigation_weight']}",
    )
    command.set_defaults(run=evaluate)

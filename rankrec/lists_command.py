"""The ``rankrec build``, ``related``, ``recommend`` and ``landing`` commands (parsing, formatting)."""

from __future__ import annotations

import argparse
from pathlib import Path

from ._cli_common import (
    add_cluster_option,
    list_urls,
    open_index,
    print_list,
    step_bars,
    stored_user,
    worker_count,
)
from ._output import print_mapping, print_rows
from .errors import UsageError


def register(commands) -> None:
    """Add the ``build``, ``related``, ``recommend`` and ``landing`` sub-commands."""
    index_help = "the index folder (written by `rankrec build`)"
    wiki_default = "the wiki store (default: the one the index was built from)"
    build = commands.add_parser(
        "build",
        help="compute and publish the recommendation index of a wiki store",
        description=(
            "Compute global PageRank, a basis of topic and hub vectors and every page's related list, "
            "and publish them as one folder (atomically: a failed build leaves the previous index). "
            "The lists follow one configuration: the one `rankrec evaluate` chose (--settings "
            "REPORT/settings.json), else the defaults; --damping, --lift, --navigation-weight and "
            "--tol change single settings."
        ),
    )
    build.add_argument("--wiki", required=True, metavar="WIKI.db", help="the wiki store")
    build.add_argument("--index", required=True, metavar="DIR", help="the index folder to (re)place")
    build.add_argument(
        "--settings",
        metavar="FILE",
        help="the configuration `rankrec evaluate` chose (REPORT/settings.json); default: the defaults",
    )
    build.add_argument("--damping", type=float, help="probability of following a link (default 0.85)")
    build.add_argument("--tol", type=float, help="power-iteration tolerance, L1 (default 1e-6)")
    build.add_argument(
        "--navigation-weight",
        type=float,
        metavar="W",
        help="share of a page's row given to the moves readers made from it (default 0.3; 0: links only)",
    )
    build.add_argument(
        "--topics", default="spaces", metavar="spaces|tags|none|text:K", help="topic vectors (default spaces)"
    )
    build.add_argument("--hubs", type=int, default=64, metavar="N", help="most-viewed pages as basis vectors")
    build.add_argument(
        "--k-related", type=int, default=50, metavar="K", help="candidates kept per page (default 50)"
    )
    build.add_argument("--lift", type=float, metavar="B", help="rank by score / global^B (default 0.5)")
    build.add_argument(
        "--view-share",
        type=float,
        metavar="S",
        help="precompute only the most-viewed pages carrying this share of views (default: every page)",
    )
    build.add_argument(
        "--skip-pages",
        action="append",
        metavar="GLOB",
        help="keep pages whose id matches this shell pattern out of every list (generated indexes, source "
        "listings: 'genindex*', '_modules/*'); repeat for more; added to the settings file's",
    )
    build.add_argument(
        "--keep-listings",
        action="store_true",
        help="let generated source listings (pages at least 90%% code, such as Javadoc's src-html or "
        "Doxygen's *_source pages) into lists; by default they are kept out, as --skip-pages would",
    )
    build.add_argument(
        "--ranker",
        choices=("auto", "lightgbm", "linear", "none"),
        help="order related lists by a ranker learnt from this wiki's own sessions or held-out links "
        "(auto, the default: LightGBM or a linear model, the simpler unless the other is clearly better) "
        "or by the PageRank and text mix (none)",
    )
    build.add_argument(
        "--full",
        action="store_true",
        help="compute every part afresh; by default a rebuild takes over from the index it replaces the "
        "text neighbours when no page's text changed, the learnt ranker while under 5%% of pages changed "
        "since it was trained, and each related list that the changes cannot have moved beyond its own "
        "error bound (the manifest's 'reuse' entry says how many and why the others were computed)",
    )
    build.add_argument("--workers", type=worker_count, default=1, metavar="N", help="processes (default 1)")
    add_cluster_option(build, "the related lists' blocks of pages (wikis above 5,000 pages)")
    build.set_defaults(run=_cmd_build)

    def list_options(command, k: int) -> None:
        command.add_argument("--index", required=True, metavar="DIR", help=index_help)
        command.add_argument("--wiki", metavar="WIKI.db", help=wiki_default)
        command.add_argument("-k", type=int, default=k, help=f"how many pages (default {k})")
        command.add_argument("--lift", type=float, metavar="B", help="lift exponent (default: the index's)")
        command.add_argument("--per-space", type=int, metavar="M", help="at most M pages from one space")
        command.add_argument(
            "--format",
            default="table",
            choices=("table", "json", "csv", "md"),
            help="output format (md: a Markdown list of links, ready to paste onto a page)",
        )
        command.add_argument(
            "--url-template",
            metavar="T",
            help="with --format md: link URLs from T, '{page}' standing for the page id "
            "(default: the store's URLs; without one, no link)",
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
        "--personal-share",
        type=float,
        default=0.0,
        metavar="W",
        help="mix in the viewer's personal vector with weight W (0..1; default 0)",
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
        "--min-readers",
        type=int,
        metavar="N",
        help="fewest distinct active readers (default: the index configuration's, 5 unless changed)",
    )
    land.set_defaults(run=_cmd_landing)


def _build_configuration(args: argparse.Namespace, store_path: str):
    """The configuration to build with, where it came from, and a line saying so."""
    from .configuration import Configuration, read_settings

    overrides = {
        name: getattr(args, name)
        for name in ("damping", "tol", "lift", "navigation_weight", "ranker")
        if getattr(args, name, None) is not None
    }
    if args.settings is None:
        configuration, source = Configuration(), {"kind": "defaults"}
        said = (
            "configuration: the defaults (no --settings; `rankrec evaluate` writes one chosen for this wiki)"
        )
    else:
        settings = read_settings(args.settings)
        configuration = settings.configuration
        source = {"kind": "file", "path": str(Path(args.settings).resolve()), "chosen_on": settings.chosen_on}
        said = f"configuration: {args.settings}"
        chosen_store = settings.chosen_on.get("store")
        if chosen_store and Path(chosen_store).resolve() != Path(store_path).resolve():
            said += f" (chosen on another store: {chosen_store})"
    if getattr(args, "skip_pages", None):
        overrides["skip_pages"] = (*configuration.skip_pages, *args.skip_pages)
    if getattr(args, "keep_listings", False):
        overrides["skip_listings"] = False
    if overrides:
        try:
            configuration = configuration.with_values(**overrides)
        except (TypeError, ValueError) as error:
            raise UsageError(str(error)) from None
        source["overrides"] = {
            name: list(value) if isinstance(value, tuple) else value for name, value in overrides.items()
        }
        said += "; changed on the command line: " + ", ".join(
            f"{name} {value:g}" if isinstance(value, float) else f"{name} {value}"
            for name, value in overrides.items()
        )
    return configuration, source, said


def _cmd_build(args: argparse.Namespace) -> int:
    from .build import build_index
    from .index import load_index
    from .store import Store

    configuration, source, said = _build_configuration(args, args.wiki)
    print(said)
    with step_bars() as progress, Store(args.wiki, create=False) as store:
        build_index(
            store,
            args.index,
            configuration,
            topics=args.topics,
            hubs=args.hubs,
            k_related=args.k_related,
            view_share=args.view_share,
            workers=args.workers,
            cluster=args.cluster,
            settings_source=source,
            reuse=not args.full,
            progress=progress,
        )
    index = load_index(args.index)
    manifest = index.manifest
    shown = ", ".join(
        f"{name} {getattr(index.configuration, name):g}"
        for name in ("damping", "lift", "navigation_weight", "half_life_days")
    )
    print_mapping({**manifest.counts, "seconds": manifest.seconds}, "table")
    print(_ranker_line(manifest.ranker))
    print(_threshold_line(manifest.serving))
    if manifest.text.get("reused_from"):
        print("text neighbours: taken over from the replaced index (no text changed; --full recounts)")
    print(_reuse_line(manifest.reuse, manifest.ranker))
    print(f"index written to {args.index}, serving with {shown}")
    return 0


def _reuse_line(reuse: dict, ranker: dict) -> str:
    """What the build took over of the related lists (and the ranker) from the index it replaced.

    >>> _reuse_line({"from": None, "reason": "the settings changed"}, {})
    'related lists: every list computed (the settings changed)'
    >>> line = _reuse_line({"from": ".x", "lists_taken_over": 90, "lists_computed": 10,
    ...                     "computed_because": {"vector moved": 7, "new": 3}}, {"taken_over_from": ".x"})
    >>> line.endswith("; ranker taken over"), line.split(";")[0]
    (True, 'related lists: 90 taken over from the replaced index, 10 computed (vector moved 7, new 3)')
    """
    if not reuse or reuse.get("from") is None:
        return f"related lists: every list computed ({reuse.get('reason', 'a full build')})"
    because = ", ".join(f"{reason} {count:,}" for reason, count in reuse["computed_because"].items())
    line = f"related lists: {reuse['lists_taken_over']:,} taken over from the replaced index, "
    line += f"{reuse['lists_computed']:,} computed" + (f" ({because})" if because else "")
    return line + ("; ranker taken over" if ranker.get("taken_over_from") else "")


def _threshold_line(serving: dict) -> str:
    """The push threshold personal lists are served with, and the measurement that chose it."""
    if not serving.get("readers"):
        return "personal lists: push threshold as configured (no readers to measure a coarser one on)"
    chosen, configured = serving["vector_epsilon"], serving["configured"]
    required = serving.get("required", 1.0)  # indexes built before the tolerance asked for every page
    if chosen == configured:
        return (
            f"personal lists: push threshold {configured:g} as configured (no coarser one kept "
            f"{required:.1%} of the pages of {serving['readers']} sampled readers' lists)"
        )
    return (
        f"personal lists: push threshold {chosen:g} (configured {configured:g}; its lists for "
        f"{serving['readers']} sampled readers hold {serving['agreement']:.2%} of the configured one's pages)"
    )


def _ranker_line(ranker: dict) -> str:
    """What the build's ranker learnt from, or why related lists use the PageRank and text mix."""
    if not ranker.get("used"):
        reason = ranker.get("reason", "none was trained")
        return f"related lists: the PageRank and text mix (no learnt ranker: {reason})"
    from .ranker.model import labels_text  # here: the command line starts without the ranker's imports

    scores = ", ".join(f"{name} {value:.3f}" for name, value in ranker["validation_ndcg@10"].items())
    source = labels_text(ranker)
    return (
        f"related lists: learnt ranker {ranker['kind']}, trained on {source} "
        f"({ranker['queries_used']:,} queries; check nDCG@10 {scores})"
    )


def _cmd_related(args: argparse.Namespace) -> int:
    from .recommend import reader_from_store, related

    index, store = open_index(args, need_store=args.viewer is not None)
    url = list_urls(args, store)
    try:
        viewer = None if args.viewer is None else stored_user(args, args.viewer)
        reader = None if viewer is None else reader_from_store(store, index, viewer)
        result = related(
            index,
            args.page,
            reader=reader,
            k=args.k,
            exclude_linked=args.exclude_linked,
            exclude_read=args.exclude_read,
            personal_share=args.personal_share,
            lift=args.lift,
            per_space=args.per_space,
        )
    finally:
        if store is not None:
            store.close()
    title = index.titles[index.page_number(result.subject)]
    print_list(result, args.format, url, heading=f"Related to {title}")
    return 0


def _cmd_recommend(args: argparse.Namespace) -> int:
    from .recommend import reader_from_store, recommend

    index, store = open_index(args, need_store=True)
    with store:
        reader = reader_from_store(store, index, stored_user(args, args.user))
        result = recommend(
            index,
            reader,
            k=args.k,
            exclude_read=not args.include_read,
            lift=args.lift,
            per_space=args.per_space,
        )
        url = list_urls(args, store)
    print_list(result, args.format, url, heading="Suggested for you")
    return 0


def _cmd_landing(args: argparse.Namespace) -> int:
    from .recommend import changes_since, landing, read_previous, team_from_store

    index, store = open_index(args, need_store=True)
    with store:
        team = team_from_store(store, index, args.team, min_readers=args.min_readers)
        result = landing(index, team, k=args.k, lift=args.lift, per_space=args.per_space)
        url = list_urls(args, store)
    if args.since is None:
        print_list(result, args.format, url, heading=f"Reading for {args.team}")
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

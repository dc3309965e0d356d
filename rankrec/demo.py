"""The demo: the bundled invented wiki, imported into a fresh store, and what rankrec makes of it.

The wiki lives in ``fixtures/demo-wiki`` of the source tree (made by `rankrec synth` with the
settings in its ``settings.json``); an installed copy without the source tree makes the same
files again from those settings.
"""

from __future__ import annotations

import argparse
import json
import shutil
import sys
from pathlib import Path
from typing import TextIO

from ._output import print_mapping

#: settings of the bundled demo wiki (also written beside it as settings.json)
DEMO_SETTINGS = {"pages": 300, "seed": 7, "days": 90}
FIXTURE = Path(__file__).resolve().parent.parent / "fixtures" / "demo-wiki"


def demo_sources(workdir: Path) -> Path:
    """The folder holding the demo wiki's files: the bundled one, or one made from its settings."""
    if (FIXTURE / "settings.json").is_file():
        return FIXTURE
    from .synth import synthesize

    made = workdir / "demo-wiki"
    if not (made / "settings.json").is_file():
        if made.exists():
            shutil.rmtree(made)
        synthesize(made, layout="markdown", **DEMO_SETTINGS)
        (made / "settings.json").write_text(json.dumps(DEMO_SETTINGS, indent=2) + "\n")
    return made


def import_demo(workdir: Path) -> Path:
    """Import the demo wiki into ``workdir/wiki.db`` (made anew) and return the store's path."""
    from .importer import import_sources
    from .store import Store

    workdir.mkdir(parents=True, exist_ok=True)
    folder = demo_sources(workdir)
    wiki = workdir / "wiki.db"
    for suffix in ("", "-wal", "-shm"):
        Path(f"{wiki}{suffix}").unlink(missing_ok=True)
    sources = [
        (folder / "pages", "markdown"),
        (folder / "views.csv", "views"),
        (folder / "teams.csv", "teams"),
        (folder / "groups.csv", "groups"),
    ]
    with Store(wiki) as store:
        import_sources(store, sources)
    return wiki


def run_demo(workdir: Path, out: TextIO) -> None:
    from .stats import wiki_stats
    from .store import Store

    wiki = import_demo(workdir)
    out.write(f"Imported the invented demo wiki into {wiki}\n\n")
    with Store(wiki, create=False) as store:
        print_mapping(wiki_stats(store, worst=5), "table", out)
        settings = show_evaluation(store, workdir / "report", out)
        show_lists(store, workdir / "index", settings, out)
        show_blocks(store, workdir, out)


def _demo_choices(store) -> tuple[list[str], str, str]:
    """Two much-read pages of different spaces, the busiest reader, the largest team (ties by name)."""
    from collections import Counter

    pages = store.most_viewed_public_pages()
    first = pages[0]
    second = next((row for row in pages if row[1] != first[1]), pages[1])
    reader = store.most_active_user()
    sizes = Counter(name for _, name in store.memberships("team"))
    team = max(sorted(sizes), key=sizes.__getitem__)  # the first of the largest, by name
    return [first[0], second[0]], reader, team


def show_lists(store, folder: Path, settings: Path, out: TextIO) -> None:
    """Build the index into ``folder`` with the evaluated ``settings`` (a settings.json) and print related
    pages, a personal list and a landing ordering from it."""
    from ._output import print_rows
    from .build import build_index
    from .configuration import read_settings
    from .index import load_index
    from .recommend import landing, reader_from_store, recommend, related, team_from_store

    chosen = read_settings(settings)
    source = {"kind": "file", "path": str(settings.resolve()), "chosen_on": chosen.chosen_on}
    build_index(store, folder, chosen.configuration, settings_source=source)
    index = load_index(folder)
    out.write(
        f"\nBuilt the index with the evaluated settings ({settings}: {_shown(index.configuration)}); "
        "every list below is served from it.\n"
    )
    pages, user, team = _demo_choices(store)
    for page in pages:
        out.write(f"\nRelated to {page} (pages visible to everyone):\n")
        print_rows(related(index, page, k=5).rows(), "table", out)
    reader = reader_from_store(store, index, user)
    personal = recommend(index, reader, k=5)
    out.write(f"\nPersonal list for reader {user} (error bound {personal.error_bound:.1e}, L1):\n")
    print_rows(personal.rows(), "table", out)
    out.write(f"\nLanding ordering for team {team} (only pages every member may see):\n")
    print_rows(landing(index, team_from_store(store, index, team), k=8).rows(), "table", out)
    out.write(f"\nThe index is in {folder} (try `rankrec related PAGE --index {folder}`).\n")


def show_blocks(store, workdir: Path, out: TextIO) -> None:
    """Write every page's related block into a copy of the demo wiki's pages (``workdir/pages``) and
    print one page as it now ends."""
    from .blocks import START
    from .export_wiki import stored_page_hashes, write_into_wiki
    from .index import load_index

    copy = workdir / "pages"
    if copy.exists():
        shutil.rmtree(copy)
    shutil.copytree(demo_sources(workdir) / "pages", copy)
    index = load_index(workdir / "index")
    done = write_into_wiki(index, copy, stored_hashes=stored_page_hashes(store))
    out.write(
        f"\nWrote a related-pages block into {done.written} of the {done.files} pages of a copy of the "
        f"demo wiki ({copy}; `rankrec export --into` does this to a wiki folder). One of them ends:\n\n"
    )
    page = next(path for path in sorted(copy.rglob("*.md")) if START in path.read_text(encoding="utf-8"))
    text = page.read_text(encoding="utf-8")
    out.write(f"{page.relative_to(copy)}:\n{text[text.index(START) :]}")


def _shown(configuration) -> str:
    names = ("damping", "lift", "navigation_weight", "half_life_days")
    return ", ".join(f"{name} {getattr(configuration, name):g}" for name in names)


def show_evaluation(store, folder: Path, out: TextIO) -> Path:
    """Evaluate rankrec against the baselines on the demo's own history, print a short summary and return
    the settings file the evaluation chose (``folder/settings.json``)."""
    from .evaluate.report import write_report
    from .evaluate.run import load_data, make_split, run_evaluation

    data = load_data(store)
    evaluation = run_evaluation(data, make_split(data, "temporal"), samples=500)
    write_report(evaluation, folder)
    queries = len(evaluation.split.queries)
    out.write(
        f"\nOffline evaluation (temporal split: the last 20% of the time span is test, {queries} "
        "readers; nDCG@10 with per-user bootstrap 95% interval):\n"
    )
    for name, scores in evaluation.methods.items():
        low, high = scores.ci95["ndcg@10"]
        out.write(f"  {name:<15} {scores.means['ndcg@10']:.3f}  [{low:.3f}, {high:.3f}]\n")
    found = evaluation.comparison["metrics"]["ndcg@10"]
    configuration = _shown(evaluation.configuration)
    out.write(
        f"rankrec ({configuration}, chosen on a validation split) minus {evaluation.best_baseline}: "
        f"{found['difference']:+.3f} [{found['ci95'][0]:+.3f}, {found['ci95'][1]:+.3f}]\n"
    )
    out.write(
        f"The full report is in {folder} (report.md, results.json, settings.json, plots; "
        f"`rankrec evaluate --wiki {store.path} --report DIR` makes it again).\n"
    )
    return Path(folder) / "settings.json"


def register(commands) -> None:
    """Add the ``demo`` sub-command to an ``argparse`` sub-parsers object."""
    demo = commands.add_parser(
        "demo", help="import the bundled invented wiki and show what rankrec makes of it"
    )
    demo.add_argument("--workdir", default="build/demo", metavar="DIR", help="where the demo store goes")
    demo.set_defaults(run=_cmd_demo)


def _cmd_demo(args: argparse.Namespace) -> int:
    run_demo(Path(args.workdir), out=sys.stdout)
    return 0

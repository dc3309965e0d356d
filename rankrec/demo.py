"""The demo: the bundled invented wiki, imported into a fresh store, and what rankrec makes of it.

The wiki lives in ``fixtures/demo-wiki`` of the source tree (made by `rankrec synth` with the
settings in its ``settings.json``); an installed copy without the source tree makes the same
files again from those settings.
"""

from __future__ import annotations

import json
import shutil
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

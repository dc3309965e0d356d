"""What a build takes over from the index it replaces, when the store says the inputs have not changed.

A wiki's build reads the whole store each time; some of its parts depend on only a little of it. The
text neighbours, the longest step after the related lists on a large wiki, depend only on the pages'
text: a rebuild for new reading history or edited links, with the text as it was, takes them over
(:func:`text_step`) when the text digest (:meth:`rankrec.evidence.Evidence.text_digest`, computed from
the digests the store keeps, without reading the text) is the one the replaced index's manifest
records. ``rankrec build --full`` computes everything. The taken-over files are hard links to the old
index's (a copy across file systems), so the old folder can be cleaned away as usual.
"""

from __future__ import annotations

import json
import os
import shutil
from pathlib import Path

from .errors import InputError
from .progress import report
from .text import load_text_neighbours, save_text_neighbours


def previous_text(target: Path | None, digest: str | None) -> Path | None:
    """The text neighbours folder of the index at ``target`` when its manifest records ``digest``."""
    if target is None or digest is None:
        return None
    try:
        recorded = json.loads((target / "manifest.json").read_text()).get("text", {}).get("digest")
    except (OSError, ValueError, AttributeError):
        return None
    folder = (target / "text").resolve()
    return folder if recorded == digest and folder.is_dir() else None


def link_files(source: Path, target: Path) -> None:
    """Make folder ``target`` with hard links to the files of ``source`` (copies across file systems)."""
    target.mkdir()
    for path in sorted(source.iterdir()):
        try:
            os.link(path, target / path.name)
        except OSError:
            shutil.copy2(path, target / path.name)


def text_step(evidence, configuration, staging: Path, target: Path | None, progress, workers):
    """The text neighbours and the manifest's ``text`` entry: taken over from the index at ``target``
    when its text digest is this evidence's (hard links to its files, a copy across file systems),
    else counted and saved."""
    digest = evidence.text_digest(configuration.title_weight)
    previous = previous_text(target, digest)
    if previous is not None:
        try:
            link_files(previous, staging / "text")
            text = load_text_neighbours(staging / "text")
        except (OSError, InputError):  # the old index changed or went away meanwhile: count afresh
            shutil.rmtree(staging / "text", ignore_errors=True)
        else:
            report(progress, "text neighbours (unchanged text: taken over)", 1, 1)
            return text, {"digest": digest, "reused_from": previous.parent.name}
    text = evidence.text_neighbours(configuration.title_weight, progress=progress, workers=workers)
    save_text_neighbours(text, staging / "text")
    return text, {"digest": digest, "reused_from": None}

"""Publishing a folder of files as a whole: readers see the old one or the new one, never a mix.

The files are written into a fresh folder beside the target (``.NAME.<time>-<random>``); the
target itself is a symbolic link that is replaced by one ``rename``, which POSIX makes atomic.
A crash while writing leaves the old target untouched (and a stray staging folder that the
next publish removes).
"""

from __future__ import annotations

import os
import shutil
import tempfile
import time
from collections.abc import Callable
from pathlib import Path


def _fsync_tree(folder: Path) -> None:
    for path in folder.rglob("*"):
        if path.is_file():
            with open(path, "rb") as handle:
                os.fsync(handle.fileno())
    descriptor = os.open(folder, os.O_RDONLY)
    try:
        os.fsync(descriptor)
    finally:
        os.close(descriptor)


def publish_folder(target: Path, write: Callable[[Path], None]) -> Path:
    """Call ``write(staging)`` to fill a new folder, then make ``target`` point at it.

    Returns the real folder now behind ``target``. If ``write`` raises, nothing changes and
    the staging folder is removed.
    """
    target = Path(target)
    parent = target.parent
    parent.mkdir(parents=True, exist_ok=True)
    stamp = time.strftime("%Y%m%dT%H%M%S")
    staging = Path(tempfile.mkdtemp(prefix=f".{target.name}.{stamp}-", dir=parent))
    try:
        write(staging)
        staging.chmod(0o755)
        _fsync_tree(staging)
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise
    previous = Path(os.readlink(target)) if target.is_symlink() else None
    if target.exists() and not target.is_symlink():
        # a plain folder from elsewhere: move it aside first (the only non-atomic step)
        aside = parent / f".{target.name}.replaced-{stamp}"
        os.rename(target, aside)
        previous = aside
    link = parent / f".{target.name}.link-{os.getpid()}"
    link.unlink(missing_ok=True)
    os.symlink(staging.name, link)
    os.replace(link, target)
    if previous is not None:
        old = previous if previous.is_absolute() else parent / previous
        if old.resolve() != staging.resolve():
            shutil.rmtree(old, ignore_errors=True)
    _remove_strays(parent, target.name, keep=staging)
    return staging


def _remove_strays(parent: Path, name: str, keep: Path) -> None:
    """Staging folders of earlier crashed publishes (older than an hour)."""
    for path in parent.glob(f".{name}.*"):
        if (
            path != keep
            and path.is_dir()
            and not path.is_symlink()
            and time.time() - path.stat().st_mtime > 3600
        ):
            shutil.rmtree(path, ignore_errors=True)

"""Publishing a folder of files as a whole: readers see the old one or the new one, never a mix.

The files are written into a fresh folder beside the target (``.NAME.<time>-<random>``); the
target itself is a symbolic link that is replaced by one ``rename``, which POSIX makes atomic.
A crash while writing leaves the old target untouched, and a stray staging folder that the next
publish removes.

What is published may hold restricted titles and reading-derived lists, so it is private to the
owner: the staging folder and every folder in it are 0700, every file 0600 (set before the swap,
whatever the umask).

Stray staging folders are told apart from live ones by locks (``fcntl.flock``, which the kernel
releases when the holding process dies, however it dies). Each publish holds an exclusive lock on
its own staging folder from just after its creation until its swap and clean-up are done. The
clean-up removes every ``.NAME.*`` folder but its own whose lock it can take at once, holding that
lock while it deletes, and skipping the folder the target points at: a folder whose lock is held
is being written by a live build (two builds may publish to one target; the last swap wins and
neither deletes the other's folder), one whose lock is free belongs to a build that died or ended,
whatever its age. The one gap, a folder made but not yet locked, is closed on the other side: once
its lock is held, a publish checks that the folder is still there (same inode) and makes a new one
if a clean-up took it. An age rule alone either keeps a killed build's folder for its whole grace
period or deletes a slow build's live one; the locks need neither guess. No lock is taken on the
parent folder, so a publish may run inside another's staging folder (the index's ``basis/``).
(``flock`` is reliable on local file systems; on NFS it may not be.)
"""

from __future__ import annotations

import errno
import fcntl
import os
import shutil
import tempfile
import threading
import time
from collections.abc import Callable
from pathlib import Path

from .errors import NoSpace

FOLDER_MODE = 0o700
FILE_MODE = 0o600


def _private_and_synced(folder: Path) -> None:
    """Make ``folder`` and everything in it owner-only (0700 folders, 0600 files), then fsync it."""
    for path in folder.rglob("*"):
        if path.is_symlink():
            continue
        if path.is_dir():
            path.chmod(FOLDER_MODE)
        elif path.is_file():
            path.chmod(FILE_MODE)
            with open(path, "rb") as handle:
                os.fsync(handle.fileno())
    folder.chmod(FOLDER_MODE)
    descriptor = os.open(folder, os.O_RDONLY)
    try:
        os.fsync(descriptor)
    finally:
        os.close(descriptor)


def _locked_staging(parent: Path, name: str, stamp: str) -> tuple[Path, int]:
    """A new staging folder (0700) and a descriptor holding its exclusive lock."""
    while True:
        staging = Path(tempfile.mkdtemp(prefix=f".{name}.{stamp}-", dir=parent))
        try:
            descriptor = os.open(staging, os.O_RDONLY)
        except FileNotFoundError:  # a clean-up took it before it was locked
            continue
        fcntl.flock(descriptor, fcntl.LOCK_EX)
        try:
            found = os.stat(staging)
        except FileNotFoundError:
            found = None
        held = os.fstat(descriptor)
        if found is not None and (found.st_dev, found.st_ino) == (held.st_dev, held.st_ino):
            return staging, descriptor
        os.close(descriptor)


def publish_folder(target: Path, write: Callable[[Path], None]) -> Path:
    """Call ``write(staging)`` to fill a new folder, then make ``target`` point at it.

    Returns the real folder now behind ``target``. If ``write`` raises, nothing changes and
    the staging folder is removed; a full disk or quota (``ENOSPC``, ``EDQUOT``) raises
    :class:`~rankrec.errors.NoSpace` then. See the module docstring for permissions and locks.
    """
    target = Path(target)
    try:
        return _publish(target, write)
    except OSError as error:
        if error.errno in (errno.ENOSPC, errno.EDQUOT):
            raise NoSpace(str(target)) from error
        raise


def _publish(target: Path, write: Callable[[Path], None]) -> Path:
    parent = target.parent
    parent.mkdir(parents=True, exist_ok=True)
    stamp = time.strftime("%Y%m%dT%H%M%S")
    staging, lock = _locked_staging(parent, target.name, stamp)
    try:
        try:
            write(staging)
            _private_and_synced(staging)
        except BaseException:
            shutil.rmtree(staging, ignore_errors=True)
            raise
        _swap(target, staging, stamp)
        _remove_strays(target, keep=staging)
    finally:
        os.close(lock)  # releases the lock
    return staging


def _swap(target: Path, staging: Path, stamp: str) -> None:
    """Point ``target`` at ``staging`` (one rename) and remove the folder it pointed at before."""
    parent = target.parent
    previous = Path(os.readlink(target)) if target.is_symlink() else None
    if target.exists() and not target.is_symlink():
        # a plain folder from elsewhere: move it aside first (the only non-atomic step)
        aside = parent / f".{target.name}.replaced-{stamp}"
        os.rename(target, aside)
        previous = aside
    link = parent / f".{target.name}.link-{os.getpid()}-{threading.get_ident()}"
    link.unlink(missing_ok=True)
    os.symlink(staging.name, link)
    os.replace(link, target)
    if previous is not None:
        old = previous if previous.is_absolute() else parent / previous
        if old.resolve() != staging.resolve():
            shutil.rmtree(old, ignore_errors=True)


def _remove_strays(target: Path, keep: Path) -> None:
    """Folders ``.NAME.*`` beside ``target``, other than ``keep`` and the folder ``target`` points at,
    that no live publish holds (each deleted under its own lock)."""
    for path in target.parent.glob(f".{target.name}.*"):
        if path == keep or not path.is_dir() or path.is_symlink():
            continue
        try:
            descriptor = os.open(path, os.O_RDONLY)
        except OSError:  # gone already
            continue
        try:
            fcntl.flock(descriptor, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:  # a live publish is writing it
            os.close(descriptor)
            continue
        try:
            # only a folder's own publish points the target at it, and only while holding its lock
            if not (target.is_symlink() and target.resolve() == path.resolve()):
                shutil.rmtree(path, ignore_errors=True)
        finally:
            os.close(descriptor)

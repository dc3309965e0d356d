"""The index being served, and its hot swap when a new one is published.

``rankrec build`` publishes an index by pointing a symbolic link at a fresh folder
(:mod:`rankrec._atomic`). :class:`LiveIndex` remembers the real folder it loaded; a watcher
thread (every ``watch_seconds``) or ``POST /v1/index/reload`` notices when the link points
elsewhere (or the manifest changed), loads the new index beside the old one, checks it (readable,
this rankrec's format, built from the store being served), warms it up (one list of each kind:
:func:`rankrec.recommend.warm.warm_up`) and switches with one reference
assignment. A request holds the :class:`Loaded` it started with, so in-flight requests finish on
the old index. A refused index is logged and the old one keeps serving.
"""

from __future__ import annotations

import logging
import threading
import time
from dataclasses import dataclass
from pathlib import Path

from rankrec.errors import InputError, RankrecError
from rankrec.index import Index, load_index
from rankrec.recommend.warm import warm_up
from rankrec.store import Store

log = logging.getLogger("rankrec.api")


@dataclass(frozen=True, eq=False)
class Loaded:
    """One loaded index: the object, the real folder behind the link, its manifest's stamp, when loaded."""

    index: Index
    folder: Path
    stamp: tuple
    loaded_at: float
    wiki: Path


@dataclass(frozen=True)
class ReloadOutcome:
    """What a reload did: ``"swapped"``, ``"unchanged"`` or ``"refused"`` (with the reason), and
    the folder name of the index serving afterwards."""

    outcome: str
    index: str | None
    reason: str | None = None


def _stamp(folder: Path) -> tuple:
    status = (folder / "manifest.json").stat()
    return (str(folder), status.st_mtime_ns, status.st_size, status.st_ino)


class LiveIndex:
    """Holds the index being served and swaps in newly published ones.

    Parameters
    ----------
    path : Path
        The published index path (usually a symbolic link).
    wiki : Path or None
        The store; None: the one the index manifest names (read again at each load).
    """

    def __init__(self, path: Path, wiki: Path | None = None) -> None:
        self.path = Path(path)
        self.wiki = None if wiki is None else Path(wiki)
        self.current: Loaded | None = None
        self.last_refusal: str | None = None
        self._refused: str | None = None  # the folder last refused (not retried until it changes)
        self.on_outcome = None  # optional callable(ReloadOutcome), e.g. to count swaps and refusals
        self._lock = threading.Lock()  # one load at a time (watcher and admin call)
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None

    def _load(self) -> Loaded:
        folder = self.path.resolve(strict=True)
        stamp = _stamp(folder)
        index = load_index(folder)
        wiki = self.wiki or Path(index.manifest.store)
        with Store(wiki, create=False) as store:
            index.check_current(store)
        try:  # before the swap: no request pays for the first lists' loading
            seconds = warm_up(index)
        except RankrecError:
            raise
        except Exception as error:  # damaged arrays fail in many ways: the index cannot answer
            raise InputError(str(folder), None, f"the index cannot answer a list: {error!r}") from None
        log.info("index at %s warmed up in %.2f s", folder.name, seconds)
        return Loaded(index=index, folder=folder, stamp=stamp, loaded_at=time.time(), wiki=wiki)

    def reload(self, *, force: bool = False, retry: bool = False) -> ReloadOutcome:
        """Load the published index if it is new (or ``force``); swap it in if it passes the checks.

        A folder once refused is not tried again until the link points elsewhere, unless ``retry``.
        """
        if retry:
            self._refused = None
        outcome = self._reload(force)
        if self.on_outcome is not None and outcome.outcome != "unchanged":
            self.on_outcome(outcome)
        return outcome

    def _reload(self, force: bool) -> ReloadOutcome:
        with self._lock:
            current = self.current
            target = None
            try:
                folder = self.path.resolve(strict=True)
                target = str(folder)
                if not force and current is not None and _stamp(folder) == current.stamp:
                    return ReloadOutcome("unchanged", current.folder.name)
                if not force and target == self._refused:
                    return ReloadOutcome("unchanged", None if current is None else current.folder.name)
                loaded = self._load()
            except (RankrecError, OSError, ValueError) as error:
                reason = _public_reason(error)
                log.error("index at %s refused; %s: %s", self.path, _still(current), error)
                self.last_refusal = reason
                self._refused = target
                return ReloadOutcome("refused", None if current is None else current.folder.name, reason)
            self.current = loaded  # the swap: one reference assignment
            self.last_refusal = self._refused = None
            if current is not None:
                log.info("index swapped: %s -> %s", current.folder.name, loaded.folder.name)
            return ReloadOutcome("swapped", loaded.folder.name)

    # -- watching ---------------------------------------------------------------------------------
    def start_watching(self, seconds: float) -> None:
        """Check for a new publication every ``seconds`` in a daemon thread (0: do nothing)."""
        if seconds <= 0 or self._thread is not None:
            return
        self._stop.clear()
        self._thread = threading.Thread(target=self._watch, args=(seconds,), name="index-watch", daemon=True)
        self._thread.start()

    def _watch(self, seconds: float) -> None:
        while not self._stop.wait(seconds):
            try:
                self.reload()
            except Exception:  # the watcher must outlive any surprise
                log.exception("index watcher failed; trying again in %s s", seconds)

    def stop_watching(self) -> None:
        self._stop.set()
        if self._thread is not None:
            self._thread.join(timeout=10)
            self._thread = None


def _still(current: Loaded | None) -> str:
    return "nothing is served" if current is None else f"still serving {current.folder.name}"


def _public_reason(error: Exception) -> str:
    """A reason safe to answer over HTTP: the error kind and message without folder paths."""
    from rankrec.errors import InputError, StaleData

    if isinstance(error, StaleData):
        return str(error)
    if isinstance(error, InputError):
        return f"not a readable index or store: {error.reason.split(':')[0]}"
    if isinstance(error, FileNotFoundError):
        return "no index is published at the configured path"
    return f"could not load the index ({type(error).__name__})"

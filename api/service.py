"""The state one service instance holds: settings, the live index, tokens, store connections, metrics.

``app.state.service`` is a :class:`Service`. Route modules reach everything through it:
``service.live.current`` (the :class:`api.live.Loaded` a request should hold on to),
``service.read_store(wiki)`` (a read connection for the calling thread), ``service.user_id(name)``
(the id as stored: pseudonymised when a key is configured), ``service.registry`` (the
prometheus registry of this app; other modules register their own metrics on it),
``service.limits`` (rate and concurrency limits, :mod:`api.limits`).
"""

from __future__ import annotations

import threading
from pathlib import Path

from prometheus_client import CollectorRegistry

from rankrec.privacy import stored_id
from rankrec.store import Store

from .auth import TokenTable
from .limits import Limits
from .live import LiveIndex
from .settings import ServiceSettings


class Service:
    """Everything the routes share; made once by :func:`api.app.create_app`."""

    def __init__(self, settings: ServiceSettings) -> None:
        self.settings = settings
        self.registry = CollectorRegistry(auto_describe=True)
        self.tokens = TokenTable(settings.tokens)
        self.live = LiveIndex(settings.index, settings.wiki)
        self.limits = Limits(settings)
        self._key = self._pseudonym_key(settings.pseudonym_key)
        self._local = threading.local()
        self._opened: list[tuple[threading.Thread, Store]] = []  # each read store and its thread
        self._opened_lock = threading.Lock()

    @staticmethod
    def _pseudonym_key(path: Path | None) -> bytes | None:
        if path is None:
            return None
        from rankrec.privacy import load_key

        return load_key(path)

    @property
    def pseudonymous(self) -> bool:
        return self._key is not None

    def user_id(self, user: str) -> str:
        """The id under which ``user`` is stored: its keyed pseudonym when a key is configured."""
        return stored_id(self._key, user)

    def read_store(self, wiki: Path) -> Store:
        """A store connection for reading, one per thread and store file (kept open for reuse).

        Worker threads come and go (anyio retires one idle for 10 seconds), so opening one also
        closes the connections of threads that have ended: nothing else holds them, and kept open
        they would hold their files (three descriptors each) until the service runs out of them.
        """
        stores = getattr(self._local, "stores", None)
        if stores is None:
            stores = self._local.stores = {}
        store = stores.get(wiki)
        if store is None:
            store = stores[wiki] = Store(wiki, create=False)
            with self._opened_lock:
                alive = []
                for thread, opened in self._opened:
                    if thread.is_alive():
                        alive.append((thread, opened))
                    else:
                        opened.close()
                self._opened = [*alive, (threading.current_thread(), store)]
        return store

    def close(self) -> None:
        """Stop the watcher and close every store connection opened for reading."""
        self.live.stop_watching()
        with self._opened_lock:
            for _, store in self._opened:
                store.close()
            self._opened.clear()
        self._local = threading.local()

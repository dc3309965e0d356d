"""The service's shared state: read store connections do not outlive the threads they were made for.

anyio runs the routes in worker threads and retires a worker idle for 10 seconds (anyio's source,
``WorkerThread.MAX_IDLE_TIME``); a connection kept for each thread that ever ran would pile up
while the service runs (measured before the fix: 11 more open descriptors after each burst of
requests that followed an idle spell, under `rankrec serve`), until opening a file fails.
Closing a connection makes its use raise ``sqlite3.ProgrammingError`` (Python's sqlite3
documentation, ``Connection.close``).
"""

from __future__ import annotations

import sqlite3
import threading

import pytest

from api.service import Service
from api.settings import ServiceSettings
from rankrec.tokens import add_token

from .conftest import make_odd_wiki


def _in_thread(work):
    found = []
    thread = threading.Thread(target=lambda: found.append(work()))
    thread.start()
    thread.join()
    return found[0]


def test_stores_of_ended_threads_are_closed_when_another_opens(tmp_path):
    wiki = make_odd_wiki(tmp_path / "wiki.db")
    tokens = tmp_path / "tokens.json"
    add_token(tokens, "frontend", "reader")
    service = Service(ServiceSettings(index=tmp_path / "index", tokens=tokens, watch_seconds=0))
    try:
        here = service.read_store(wiki)
        ended = [_in_thread(lambda: service.read_store(wiki)) for _ in range(20)]
        assert len(service._opened) == 2  # this thread's and the last ended thread's
        for store in ended[:-1]:
            with pytest.raises(sqlite3.ProgrammingError):
                store.connection.execute("SELECT 1")
        assert here.connection.execute("SELECT count(*) FROM pages").fetchone()[0] > 0  # still usable
        assert service.read_store(wiki) is here  # one per thread, reused
    finally:
        service.close()
    with pytest.raises(sqlite3.ProgrammingError):
        here.connection.execute("SELECT 1")

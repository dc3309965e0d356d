"""A full disk, met by the store or by a publish, is said plainly and changes nothing (issue finding 8: a
full disk reported "unexpected error"). The errors are injected (monkeypatch), as SQLite raises them
(``sqlite3.OperationalError: database or disk is full``, SQLITE_FULL) and as the kernel does
(``OSError`` ENOSPC, POSIX). Also: a new store is private to its owner (issue finding 10).
"""

from __future__ import annotations

import errno
import os
import sqlite3
import stat

import pytest

import rankrec._atomic
from rankrec.cli import main
from rankrec.demo import import_demo
from rankrec.errors import NoSpace, StoreUnavailable
from rankrec.store import Store, store_unavailable

FULL = "database or disk is full"


def _no_space(*args, **kwargs):
    raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))


@pytest.fixture(scope="module")
def demo_store(tmp_path_factory):
    return import_demo(tmp_path_factory.mktemp("no-space"))


@pytest.fixture
def wiki(demo_store, tmp_path):
    copy = tmp_path / "wiki.db"
    with Store(demo_store, create=False) as source, Store(copy) as target:
        source.connection.backup(target.connection)
    return copy


def _dump(path) -> list[str]:
    with Store(path, create=False) as store:
        return list(store.connection.iterdump())


@pytest.mark.parametrize(
    ("error", "kind"),
    [
        (sqlite3.OperationalError(FULL), NoSpace),
        (OSError(errno.ENOSPC, "No space left on device"), NoSpace),
        (OSError(errno.EDQUOT, "Disk quota exceeded"), NoSpace),
        (sqlite3.OperationalError("database is locked"), StoreUnavailable),
        (sqlite3.OperationalError("disk I/O error"), StoreUnavailable),
        (sqlite3.OperationalError("no such table: pages"), type(None)),
        (OSError(errno.EACCES, "Permission denied"), type(None)),
    ],
    ids=["sqlite-full", "enospc", "edquot", "locked", "ioerr", "schema", "eacces"],
)
def test_store_errors_are_told_apart(error, kind):
    assert isinstance(store_unavailable("wiki.db", error), kind)


def test_a_full_disk_during_an_import_says_so_and_keeps_the_store(wiki, tmp_path, capsys, monkeypatch):
    before = _dump(wiki)
    source = tmp_path / "views.csv"
    source.write_text("user,page,timestamp\nnewcomer,ops/anything,1000\n")

    def full(self, *args, **kwargs):
        raise sqlite3.OperationalError(FULL)

    monkeypatch.setattr(Store, "log_import", full)
    assert main(["import", str(source), "--wiki", str(wiki), "--format", "views"]) == 2
    error = capsys.readouterr().err
    assert "no space left on device" in error and "unexpected" not in error
    assert error.count("\n") == 1
    monkeypatch.undo()
    assert _dump(wiki) == before  # rolled back: all of the import or none of it


def test_a_full_disk_while_publishing_an_index_keeps_the_previous_one(wiki, tmp_path, capsys, monkeypatch):
    index = tmp_path / "index"
    assert main(["build", "--wiki", str(wiki), "--index", str(index)]) == 0
    live, manifest = index.resolve(), (index / "manifest.json").read_bytes()
    capsys.readouterr()
    monkeypatch.setattr(rankrec._atomic, "_private_and_synced", _no_space)
    assert main(["build", "--wiki", str(wiki), "--index", str(index)]) == 2
    error = capsys.readouterr().err
    assert "no space left on device" in error and "unexpected" not in error
    assert index.resolve() == live and (index / "manifest.json").read_bytes() == manifest
    assert sorted(path.name for path in tmp_path.glob(".index.*")) == [live.name]  # no staging left


def test_a_full_disk_while_writing_a_report_keeps_the_previous_one(wiki, tmp_path, capsys, monkeypatch):
    report = tmp_path / "report"
    report.mkdir()
    (report / "report.md").write_text("the previous report\n")
    monkeypatch.setattr(rankrec._atomic, "_private_and_synced", _no_space)
    assert main(["evaluate", "--wiki", str(wiki), "--report", str(report), "--no-sweep"]) == 2
    error = capsys.readouterr().err
    assert "no space left on device" in error and "unexpected" not in error
    assert (report / "report.md").read_text() == "the previous report\n"


def test_a_full_disk_when_opening_the_store_is_no_space(wiki, monkeypatch):
    def full(*args, **kwargs):
        raise sqlite3.OperationalError(FULL)

    monkeypatch.setattr("rankrec.store.sqlite3.connect", full)
    with pytest.raises(NoSpace, match="no space left on device"):
        Store(wiki, create=False)


def test_a_new_store_and_its_journal_files_are_owner_only(tmp_path):
    previous = os.umask(0o022)  # a common default umask, which would leave the file world-readable
    try:
        with Store(tmp_path / "wiki.db") as store, store.transaction():
            store.put_views([("ana", "ops/a", 1000.0, None)])
        # the -wal and -shm files exist while a connection is open
        with Store(tmp_path / "wiki.db", create=False) as store:
            store.counts()
            modes = {path.name: stat.S_IMODE(path.stat().st_mode) for path in tmp_path.iterdir()}
    finally:
        os.umask(previous)
    assert {"wiki.db", "wiki.db-wal", "wiki.db-shm"} <= set(modes)
    assert set(modes.values()) == {0o600}, modes

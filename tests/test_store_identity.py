"""Store ids: an index is refused with a store other than the one it was built from, however alike."""

from __future__ import annotations

import json
import re

import pytest

from rankrec.build import build_index
from rankrec.cli import main
from rankrec.errors import ForeignIndex, StaleIndex
from rankrec.index import load_index
from rankrec.store import STORE_ID_KEY, Store, read_store_id
from tests.test_index import make_wiki


@pytest.fixture(scope="module")
def twins(tmp_path_factory):
    """Two stores made from the same records (same pages, links, views, one import each), and an index
    built from the first."""
    folder = tmp_path_factory.mktemp("twins")
    first = make_wiki(folder / "a.db", pages=30, seed=4)
    second = make_wiki(folder / "b.db", pages=30, seed=4)
    with Store(first, create=False) as store:
        build_index(store, folder / "index", hubs=2)
    return first, second, folder / "index"


def _forget_store_id(path) -> None:
    """Make ``path`` look like a store made before store ids (its meta row gone)."""
    with Store(path, create=False) as store:
        store.connection.execute("DELETE FROM meta WHERE key = ?", (STORE_ID_KEY,))


def test_stores_with_identical_content_have_different_ids(twins):
    first, second, _ = twins
    with Store(first, create=False) as one, Store(second, create=False) as other:
        assert one.counts() == other.counts() and one.latest_import() == other.latest_import()
        assert re.fullmatch("[0-9a-f]{32}", one.store_id()) and re.fullmatch("[0-9a-f]{32}", other.store_id())
        assert one.store_id() != other.store_id()
        # made once: reopening and writing keep it
        kept = one.store_id()
    with Store(first) as again, again.transaction():
        assert again.store_id() == kept
    assert read_store_id(first) == kept and read_store_id(":memory:") is None


def test_index_from_another_store_is_refused(twins):
    first, second, folder = twins
    index = load_index(folder)
    assert index.manifest.store_id == read_store_id(first)
    with Store(first, create=False) as store:
        index.check_current(store)  # its own store: fine
    with Store(second, create=False) as store:
        # the import counts match (the check by counts alone accepted this), the ids do not
        assert store.latest_import() == index.manifest.store_import
        with pytest.raises(ForeignIndex) as caught:
            index.check_current(store)
    assert isinstance(caught.value, StaleIndex)  # the CLI and the API treat it as a stale index
    message = str(caught.value)
    assert f"rankrec build --wiki {second} --index {folder}" in message and str(first) in message


def test_cli_refuses_the_other_store_with_what_to_run(twins, capsys):
    _, second, folder = twins
    assert main(["related", "s0/page-0", "--index", str(folder), "--wiki", str(second)]) == 2
    error = capsys.readouterr().err
    assert "built from another wiki store" in error and "rankrec build --wiki" in error


def test_same_store_after_a_new_import_is_stale(tmp_path):
    wiki = make_wiki(tmp_path / "wiki.db", pages=30, seed=5)
    with Store(wiki) as store:
        build_index(store, tmp_path / "index", hubs=2)
        index = load_index(tmp_path / "index")
        with store.transaction():
            store.log_import("again", "edges", 0, 0)  # an import that changed nothing: still current
        index.check_current(store)
        with store.transaction():
            store.put_links([("s0/page-0", "s1/page-1", 1.0), ("s1/page-1", "s2/page-29", 1.0)])
            store.log_import("more", "edges", 2, 0)
        with pytest.raises(StaleIndex) as caught:
            index.check_current(store)
    assert not isinstance(caught.value, ForeignIndex)  # the same store, a changed graph


def test_old_manifest_without_store_id_keeps_the_count_check(tmp_path):
    wiki = make_wiki(tmp_path / "wiki.db", pages=30, seed=6)
    with Store(wiki) as store:
        folder = build_index(store, tmp_path / "index", hubs=2)
    manifest = json.loads((folder / "manifest.json").read_text())
    del manifest["store_id"]  # as an index written before store ids
    (folder / "manifest.json").write_text(json.dumps(manifest))
    index = load_index(folder)
    assert index.manifest.store_id is None
    with Store(wiki, create=False) as store:
        index.check_current(store)
        with store.transaction():
            store.put_links([("s0/page-0", "s1/page-1", 1.0)])
            store.log_import("more", "edges", 1, 0)
        with pytest.raises(StaleIndex):
            index.check_current(store)


def test_old_store_gets_an_id_on_its_first_write_only(tmp_path):
    wiki = make_wiki(tmp_path / "wiki.db", pages=30, seed=7)
    _forget_store_id(wiki)
    with Store(wiki, create=False) as store, store.reading():  # a read-only use does not fail, nor write
        assert store.store_id() is None and store.counts()["pages"] == 30
    assert read_store_id(wiki) is None
    with Store(wiki, create=False) as store:
        folder = build_index(store, tmp_path / "index", hubs=2)  # a build only reads the store
        assert load_index(folder).manifest.store_id is None
        with pytest.raises(RuntimeError), store.transaction():  # a failed first write adds nothing
            raise RuntimeError("interrupted")
        assert store.store_id() is None
        with store.transaction():
            store.log_import("views", "views", 0, 0)
        made = store.store_id()
    assert made is not None and read_store_id(wiki) == made
    with Store(wiki) as store, store.transaction():
        assert store.store_id() == made  # never replaced
    with Store(wiki, create=False) as store:
        load_index(folder).check_current(store)  # the index from before the id: the count check


def test_new_store_has_schema_version_and_id_together(tmp_path):
    with Store(tmp_path / "new.db") as store:
        rows = dict(store.connection.execute("SELECT key, value FROM meta").fetchall())
    assert rows == {"schema_version": "2", STORE_ID_KEY: rows[STORE_ID_KEY]} and len(rows[STORE_ID_KEY]) == 32

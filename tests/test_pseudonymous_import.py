"""Imports with a pseudonym key: users are stored as keyed hashes, and the list commands find them."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import pytest

from rankrec.cli import main
from rankrec.privacy import new_key, pseudonym
from rankrec.store import Store

DEMO = Path(__file__).resolve().parents[1] / "fixtures" / "demo-wiki"


def _import(folder: Path, *extra: str) -> Path:
    wiki = folder / "wiki.db"
    sources = [str(DEMO / name) for name in ("pages", "views.csv", "teams.csv", "groups.csv")]
    assert main(["import", *sources, "--wiki", str(wiki), *extra]) == 0
    assert main(["build", "--wiki", str(wiki), "--index", str(folder / "index"), "--hubs", "4"]) == 0
    return wiki


@pytest.fixture(scope="module")
def stores(tmp_path_factory):
    plain = tmp_path_factory.mktemp("plain")
    keyed = tmp_path_factory.mktemp("keyed")
    key_file = keyed / "pseudonym.key"
    key = new_key(key_file)
    return _import(plain), _import(keyed, "--pseudonym-key", str(key_file)), key_file, key


def _users(wiki: Path) -> set[str]:
    with Store(wiki, create=False) as store:
        return {row[0] for row in store.connection.execute("SELECT user FROM users")}


def test_every_stored_user_is_the_keyed_pseudonym_of_a_plain_one(stores):
    plain, keyed, _, key = stores
    with (DEMO / "views.csv").open(encoding="utf-8") as handle:
        readers = {row["user"] for row in csv.DictReader(handle)}
    # pseudonym() itself is checked against the RFC 4231 HMAC-SHA-256 vectors in tests/test_privacy.py
    assert _users(keyed) == {pseudonym(key, user) for user in _users(plain)}
    assert readers <= _users(plain) and not readers & _users(keyed)


def test_lists_are_the_same_with_the_key_as_without(stores, capsys):
    plain, keyed, key_file, _ = stores
    with (DEMO / "views.csv").open(encoding="utf-8") as handle:
        user = next(csv.DictReader(handle))["user"]
    outputs = []
    for wiki, extra in ((plain, []), (keyed, ["--pseudonym-key", str(key_file)])):
        index = str(wiki.parent / "index")
        assert main(["recommend", user, "--index", index, "--format", "json", *extra]) == 0
        assert (
            main(
                [
                    "related",
                    "--viewer",
                    user,
                    _first_page(index),
                    "--index",
                    index,
                    "--format",
                    "json",
                    *extra,
                ]
            )
            == 0
        )
        assert main(["landing", "field-sales", "--index", index, "--format", "json"]) == 0
        outputs.append(capsys.readouterr().out)
    assert outputs[0] == outputs[1]
    lists = [json.loads(part) for part in outputs[0].replace("]\n[", "]\0[").split("\0")]
    assert len(lists) == 3 and all(len(rows) > 0 for rows in lists)
    # without the key the plain id is not in the keyed store
    assert main(["recommend", user, "--index", str(keyed.parent / "index")]) == 2
    assert "unknown user" in capsys.readouterr().err


def _first_page(index: str) -> str:
    with Store(Path(index).parent / "wiki.db", create=False) as store:
        query = "SELECT page FROM pages WHERE present ORDER BY page LIMIT 1"
        return store.connection.execute(query).fetchone()[0]

"""Fixtures of the service tests: the demo wiki built once per session, tokens, a test client."""

from __future__ import annotations

import shutil
import warnings
from pathlib import Path

import pytest
from starlette.exceptions import StarletteDeprecationWarning

from api.app import create_app
from api.settings import ServiceSettings
from rankrec.build import build_index
from rankrec.demo import import_demo
from rankrec.sources.records import Origin, PageRecord
from rankrec.store import Store
from rankrec.tokens import add_token, add_viewer_key, viewer_assertion

with warnings.catch_warnings():
    # starlette asks for the httpx2 package; the httpx it falls back to works the same for these tests
    warnings.simplefilter("ignore", StarletteDeprecationWarning)
    from fastapi.testclient import TestClient

#: page ids that need percent-encoding in a URL path (and one named like the route's suffix)
ODD_PAGES = (
    "plain",
    "a/b/c",
    "with space",
    "per%cent",
    "q?mark",
    "hash#tag",
    "plus+sign",
    "ünïcode/页",
    "related",
    "x/related",
    "semi;colon",
)


def make_odd_wiki(path: Path) -> Path:
    """A small store whose page ids hold '/', '%', '?', '#', spaces and non-ASCII letters."""
    origin = Origin("odd ids")
    with Store(path) as store, store.transaction():
        for position, page in enumerate(ODD_PAGES):
            store.put_page(PageRecord(page, f"Odd {position}", origin, space="odd"))
        count = len(ODD_PAGES)
        links = [(ODD_PAGES[i], ODD_PAGES[(i + 1) % count], 1.0) for i in range(count)]
        links += [(ODD_PAGES[i], ODD_PAGES[(i + 3) % count], 1.0) for i in range(count)]
        store.put_links(links)
        store.log_import("odd ids", "generated", count, 0)
    return path


@pytest.fixture(scope="session")
def demo(tmp_path_factory) -> dict:
    """The invented demo wiki imported and indexed once: its folder, store and index paths, tokens."""
    folder = tmp_path_factory.mktemp("service")
    wiki = import_demo(folder)
    with Store(wiki, create=False) as store:
        build_index(store, folder / "index")
    tokens = folder / "tokens.json"
    reader = add_token(tokens, "wiki-frontend", "reader")
    viewer_key = add_viewer_key(tokens, "wiki-frontend")
    admin = add_token(tokens, "maintainer", "admin")
    return {
        "folder": folder,
        "wiki": wiki,
        "index": folder / "index",
        "tokens": tokens,
        "reader": reader,
        "viewer_key": viewer_key,
        "admin": admin,
    }


def signed_headers(token: str, key: str, token_name: str, user: str, **options) -> dict:
    """Headers of a front end with ``token`` showing a list to ``user``: the bearer token and a fresh
    viewer assertion made with the token's viewer key."""
    return {
        "Authorization": f"Bearer {token}",
        "X-Rankrec-Viewer": viewer_assertion(key, token_name, user, **options),
    }


@pytest.fixture(scope="session")
def as_viewer(demo):
    """``as_viewer(user)``: the demo front end's headers for a list shown to ``user``."""
    return lambda user, **options: signed_headers(
        demo["reader"], demo["viewer_key"], "wiki-frontend", user, **options
    )


@pytest.fixture(scope="session")
def odd(tmp_path_factory, demo) -> dict:
    """A tiny wiki with awkward page ids, indexed, sharing the demo's tokens."""
    folder = tmp_path_factory.mktemp("odd")
    wiki = make_odd_wiki(folder / "wiki.db")
    with Store(wiki, create=False) as store:
        build_index(store, folder / "index", hubs=2)
    return {"wiki": wiki, "index": folder / "index", "tokens": demo["tokens"]}


def settings_for(paths: dict, **options) -> ServiceSettings:
    """Settings of a test service: no index watcher, and no rate limit unless asked for (tests send
    requests back to back; tests/api/test_limits.py tests the limits)."""
    defaults = {"watch_seconds": 0, "rate_per_second": 0}
    return ServiceSettings(index=paths["index"], tokens=paths["tokens"], **{**defaults, **options})


@pytest.fixture(scope="session")
def app(demo):
    made = create_app(settings_for(demo))
    yield made
    made.state.service.close()


@pytest.fixture(scope="session")
def client(app) -> TestClient:
    """A client of the demo service without the lifespan (no watcher thread)."""
    return TestClient(app)


@pytest.fixture(scope="session")
def reader(demo) -> dict:
    return {"Authorization": f"Bearer {demo['reader']}"}


@pytest.fixture(scope="session")
def admin(demo) -> dict:
    return {"Authorization": f"Bearer {demo['admin']}"}


@pytest.fixture
def private_copy(demo, tmp_path) -> dict:
    """The demo index copied to a folder of this test's own (for tests that publish over it)."""
    shutil.copytree(demo["index"].resolve(), tmp_path / ".index.first")
    (tmp_path / "index").symlink_to(".index.first")
    return {"index": tmp_path / "index", "tokens": demo["tokens"], "wiki": demo["wiki"], "folder": tmp_path}


def make_client(app) -> TestClient:
    return TestClient(app)

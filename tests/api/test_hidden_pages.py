"""A page the caller may not see is answered as if the wiki did not hold it, by GET and by POST.

Two wikis that differ only in one restricted page (``ops/secret-plan``, group ``board``) are built
and served side by side. For a caller who may not see that page, every answer about it (and about
ids close to it) must be byte for byte the answer of the wiki without it: same status, same body,
suggestions from the same bounded search (OWASP API Security Top 10 2023, API1 "Broken Object
Level Authorization": an object the caller may not access must not be told apart from a missing
one; API3 "Broken Object Property Level Authorization": nor may its id leak through suggestions).
"""

from __future__ import annotations

import inspect
from urllib.parse import quote

import pytest

from api.app import create_app
from api.lists import make_router
from api.settings import ServiceSettings
from rankrec.build import build_index
from rankrec.index import Index
from rankrec.sources.records import Origin, PageRecord
from rankrec.store import Store
from rankrec.tokens import add_token, add_viewer_key

from .conftest import TestClient, signed_headers

SECRET = "ops/secret-plan"
PUBLIC = [f"ops/runbook-{number}" for number in range(10)] + [
    "ops/secret-handling",
    "ops/secret-planning-guide",
    "ops/secrets-rotation",
    "ops/security-review",
]
RESTRICTED = {SECRET: ("board",), "ops/secret-plan-b": ("board",), "ops/salaries": ("hr",)}
#: the restricted id, ids one edit away, a prefix, and a differently written form
PROBES = [
    SECRET,
    "ops/secret-plam",
    "ops/secret-pla",
    "ops/secret-plan-",
    "Ops/Secret Plan",
    "ops/secret_plan",
]


def _wiki(path, with_secret: bool):
    pages = PUBLIC + [page for page in RESTRICTED if with_secret or page != SECRET]
    origin = Origin("hidden pages")
    with Store(path) as store, store.transaction():
        for position, page in enumerate(pages):
            groups = RESTRICTED.get(page, ())
            store.put_page(PageRecord(page, f"Page {position}", origin, space="ops", groups=groups))
        count = len(pages)
        store.put_links([(pages[i], pages[(i + step) % count], 1.0) for i in range(count) for step in (1, 4)])
        store.put_views(
            [(user, PUBLIC[0], 1_000.0 + i, None) for i, user in enumerate(("insider", "outsider"))]
        )
        store.put_memberships([("group", "board", "insider"), ("group", "hr", "payroll")])
        store.log_import("hidden pages", "generated", count, 0)
    with Store(path, create=False) as store:
        build_index(store, path.parent / "index", hubs=2)
    return path


@pytest.fixture(scope="module")
def twins(tmp_path_factory):
    """Clients of the wiki with the restricted page and of the one without it, and a reader token."""
    tokens = tmp_path_factory.mktemp("tokens") / "tokens.json"
    token = add_token(tokens, "frontend", "reader")
    key = add_viewer_key(tokens, "frontend")
    headers = {"Authorization": f"Bearer {token}"}
    clients, apps = {}, []
    for name, with_secret in (("with", True), ("without", False)):
        wiki = _wiki(tmp_path_factory.mktemp(name) / "wiki.db", with_secret)
        app = create_app(
            ServiceSettings(index=wiki.parent / "index", tokens=tokens, wiki=wiki, watch_seconds=0)
        )
        apps.append(app)
        clients[name] = TestClient(app)

    def shown_to(viewer):  # the front end's headers for a list shown to ``viewer`` (None: nobody)
        return headers if viewer is None else signed_headers(token, key, "frontend", viewer)

    yield {**clients, "headers": headers, "as": shown_to, "app": apps[0]}
    for app in apps:
        app.state.service.close()


def _related(client, page: str, headers, **params):
    return client.get(f"/v1/pages/{quote(page, safe='')}/related", params=params, headers=headers)


@pytest.mark.parametrize("viewer", [None, "outsider", "payroll", "nobody-here"])
def test_a_restricted_id_answers_exactly_as_an_absent_one(twins, viewer):
    suggested = set()
    for probe in PROBES:
        hidden = _related(twins["with"], probe, twins["as"](viewer))
        absent = _related(twins["without"], probe, twins["as"](viewer))
        assert hidden.status_code == absent.status_code == 404, probe
        assert hidden.content == absent.content, probe  # the same bytes
        suggested |= set(hidden.json()["error"].get("details", {}).get("closest", []))
    # the comparison is about real suggestions, and they never name a page the viewer may not see
    assert "ops/secret-planning-guide" in suggested
    assert not suggested & set(RESTRICTED)


def test_a_member_gets_the_page_and_sees_it_suggested(twins):
    headers = twins["as"]("insider")
    assert _related(twins["with"], SECRET, headers).status_code == 200
    error = _related(twins["with"], "ops/secret-plam", headers).json()["error"]
    assert SECRET in error["details"]["closest"]


def test_restricted_and_absent_ids_run_the_same_search(twins, monkeypatch):
    searched = []
    close_ids = Index.close_ids

    def counted(self, page, **options):
        searched.append(page)
        return close_ids(self, page, **options)

    monkeypatch.setattr(Index, "close_ids", counted)
    headers = twins["as"]("outsider")
    for probe in (SECRET, "ops/secret-plam", PUBLIC[1]):
        _related(twins["with"], probe, headers)
    # one bounded search for the restricted id as for the absent one; none for a page that is found
    assert searched == [SECRET, "ops/secret-plam"]


def test_list_routes_do_not_run_on_the_event_loop():
    # a plain def route runs in the thread pool: a search or a push never blocks other requests
    routes = make_router(10).routes
    assert {route.path for route in routes} >= {"/v1/pages/{page:path}/related", "/v1/pages"}
    assert [route.path for route in routes if inspect.iscoroutinefunction(route.endpoint)] == []


def _views(client, headers, *views):
    body = {
        "views": [
            {"user": user, "page": page, "timestamp": 2_000.0 + i} for i, (user, page) in enumerate(views)
        ]
    }
    return client.post("/v1/views", json=body, headers=headers)


@pytest.mark.parametrize("user", ["outsider", "payroll", "newcomer"])
def test_a_view_of_a_page_the_user_may_not_see_is_refused_like_an_absent_page(twins, user):
    headers = twins["headers"]
    for batch in (
        [(user, SECRET)],
        [(user, PUBLIC[2]), (user, SECRET)],
        [(user, "ops/nowhere"), (user, SECRET)],
    ):
        hidden, absent = _views(twins["with"], headers, *batch), _views(twins["without"], headers, *batch)
        assert hidden.status_code == absent.status_code == 422
        assert hidden.content == absent.content
        assert hidden.json()["error"]["code"] == "invalid_view"
    accepted = _views(twins["with"], headers, ("insider", SECRET))  # a member's view is stored
    assert accepted.status_code == 200 and accepted.json()["received"] == 1
    with Store(twins["with"].app.state.settings.wiki, create=False) as store:
        readers = store.connection.execute(
            "SELECT user FROM views JOIN users ON users.id = user_id JOIN pages ON pages.id = page_id "
            "WHERE page = ?",
            (SECRET,),
        ).fetchall()
    assert readers == [("insider",)]

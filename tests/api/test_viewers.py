"""Who may name a viewer: reader tokens only through signed, short-lived viewer assertions (issue
finding 1: ``viewer=`` was taken on the client's word, so any reader token read anyone's history).

OWASP API Security Top 10 2023, API1 "Broken Object Level Authorization": a user's reading history
and groups are that user's objects, so naming a user must be authorised, not claimed; API3 "Broken
Object Property Level Authorization": history-derived reasons only for that user. Unknown and known
users are answered alike, so the answers do not tell who reads the wiki.
"""

from __future__ import annotations

import json
import time
from urllib.parse import quote

import pytest

from api.app import create_app
from rankrec.build import build_index
from rankrec.sources.records import Origin, PageRecord
from rankrec.store import Store
from rankrec.tokens import add_token, add_viewer_key, viewer_assertion

from .conftest import TestClient, settings_for, signed_headers

PUBLIC = [f"ops/runbook-{number}" for number in range(12)]
SECRET = "ops/board-minutes"
ROUTES = {
    "related": f"/v1/pages/{quote(PUBLIC[0], safe='')}/related",
    "landing": "/v1/teams/ops/landing",
    "search": "/v1/pages?prefix=ops/",
}


def _wiki(path):
    """Readers ``alice`` (group board, history), five team members with history, and ``quiet``: in a
    team, but without views or groups (a known user without history)."""
    pages = PUBLIC + [SECRET]
    origin = Origin("viewers")
    readers = ["alice", "bob", "carol", "dan", "erin"]
    with Store(path) as store, store.transaction():
        for position, page in enumerate(pages):
            groups = ("board",) if page == SECRET else ()
            store.put_page(PageRecord(page, f"Runbook {position}", origin, space="ops", groups=groups))
        count = len(pages)
        store.put_links([(pages[i], pages[(i + step) % count], 1.0) for i in range(count) for step in (1, 3)])
        views = [
            (user, PUBLIC[(i * 5 + j) % len(PUBLIC)], 1e6 + 60 * j, None)
            for i, user in enumerate(readers)
            for j in range(4)
        ]
        store.put_views(views + [("alice", SECRET, 1e6 + 999, None)])
        store.put_memberships(
            [("team", "ops", user) for user in [*readers, "quiet"]] + [("group", "board", "alice")]
        )
        store.log_import("viewers", "generated", count, 0)
    with Store(path, create=False) as store:
        build_index(store, path.parent / "index", hubs=2)
    return path


@pytest.fixture(scope="module")
def served(tmp_path_factory):
    folder = tmp_path_factory.mktemp("viewers")
    wiki = _wiki(folder / "wiki.db")
    tokens = folder / "tokens.json"
    made = {
        name: add_token(tokens, name, role)
        for name, role in (
            ("frontend", "reader"),
            ("other-frontend", "reader"),
            ("keyless", "reader"),
            ("ops", "admin"),
        )
    }
    keys = {name: add_viewer_key(tokens, name) for name in ("frontend", "other-frontend")}
    app = create_app(settings_for({"index": folder / "index", "tokens": tokens}, wiki=wiki))
    yield {"client": TestClient(app), "tokens": made, "keys": keys, "wiki": wiki}
    app.state.service.close()


def _bearer(served, name: str) -> dict:
    return {"Authorization": f"Bearer {served['tokens'][name]}"}


def _as(served, user: str, name: str = "frontend", **options) -> dict:
    return signed_headers(served["tokens"][name], served["keys"][name], name, user, **options)


def _error(answer, status: int, code: str) -> dict:
    assert answer.status_code == status, answer.text
    assert answer.json()["error"]["code"] == code
    return answer.json()["error"]


@pytest.mark.parametrize("route", [*ROUTES.values(), "/v1/users/alice/recommendations"])
def test_a_reader_token_cannot_name_a_viewer_in_the_query(served, route):
    answer = served["client"].get(route, params={"viewer": "alice"}, headers=_bearer(served, "frontend"))
    error = _error(answer, 403, "viewer_unsigned")
    assert "X-Rankrec-Viewer" in error["message"] and "items" not in answer.json()
    assert SECRET not in answer.text


def test_an_assertion_names_the_viewer_and_their_restricted_pages(served):
    client = served["client"]
    found = client.get(ROUTES["search"], headers=_as(served, "alice")).json()["pages"]
    assert SECRET in {match["page"] for match in found}
    public = client.get(ROUTES["search"], headers=_bearer(served, "frontend")).json()["pages"]
    assert SECRET not in {match["page"] for match in public}
    body = client.get(f"/v1/pages/{quote(SECRET, safe='')}/related", headers=_as(served, "alice"))
    assert body.status_code == 200 and body.json()["viewer"] == "alice"


def test_an_admin_may_name_a_viewer_in_the_query(served):
    found = served["client"].get(ROUTES["search"], params={"viewer": "alice"}, headers=_bearer(served, "ops"))
    assert found.status_code == 200 and SECRET in {match["page"] for match in found.json()["pages"]}


@pytest.mark.parametrize(
    "case", ["other token", "expired", "too long ahead", "forged", "no key", "not an assertion"]
)
def test_a_wrong_assertion_is_refused(served, case):
    now = time.time()
    headers = _bearer(served, "frontend")
    if case == "other token":  # made for another front end's token, sent with this one
        headers["X-Rankrec-Viewer"] = _as(served, "alice", "other-frontend")["X-Rankrec-Viewer"]
    elif case == "expired":
        headers["X-Rankrec-Viewer"] = viewer_assertion(
            served["keys"]["frontend"], "frontend", "alice", ttl=10, now=now - 20
        )
    elif case == "too long ahead":  # at most viewer_max_ttl (300 s) ahead
        headers = _as(served, "alice", ttl=3600)
    elif case == "forged":
        headers["X-Rankrec-Viewer"] = viewer_assertion(bytes(32), "frontend", "alice")
    elif case == "no key":
        headers = {**_bearer(served, "keyless"), "X-Rankrec-Viewer": _as(served, "alice")["X-Rankrec-Viewer"]}
    else:
        headers["X-Rankrec-Viewer"] = "alice"
    for route in (*ROUTES.values(), "/v1/users/alice/recommendations"):
        answer = served["client"].get(route, headers=headers)
        _error(answer, 403, "viewer_refused")
        assert SECRET not in answer.text and "alice" not in answer.text


def test_personal_lists_only_for_the_asserted_viewer(served):
    client = served["client"]
    _error(client.get("/v1/users/alice/recommendations", headers=_as(served, "bob")), 403, "forbidden")
    _error(
        client.get("/v1/users/alice/recommendations", headers=_bearer(served, "frontend")), 403, "forbidden"
    )
    own = client.get("/v1/users/alice/recommendations", params={"k": 20}, headers=_as(served, "alice"))
    assert own.status_code == 200 and own.json()["viewer"] == "alice"


def _without_names(body: dict, *names: str) -> str:
    text = json.dumps(body, sort_keys=True)
    for name in names:
        text = text.replace(json.dumps(name), '"NAME"')
    return text


def test_a_viewer_the_store_does_not_know_is_answered_as_a_known_one_without_history(served):
    client = served["client"]
    for route in ROUTES.values():
        known, unknown = (client.get(route, headers=_as(served, user)) for user in ("quiet", "nobody-here"))
        assert known.status_code == unknown.status_code == 200, route
        assert _without_names(known.json(), "quiet") == _without_names(unknown.json(), "nobody-here"), route


def test_an_unknown_users_personal_list_looks_like_one_without_history(served):
    # before: 404 unknown_user against 200, so a reader token could tell who uses the wiki
    client = served["client"]
    known = client.get("/v1/users/quiet/recommendations", headers=_as(served, "quiet"))
    unknown = client.get("/v1/users/nobody-here/recommendations", headers=_as(served, "nobody-here"))
    assert known.status_code == unknown.status_code == 200
    assert _without_names(known.json(), "quiet") == _without_names(unknown.json(), "nobody-here")
    assert known.json()["items"]  # not an empty answer: the public order, as for a newcomer
    by_admin = client.get("/v1/users/nobody-here/recommendations", headers=_bearer(served, "ops"))
    assert by_admin.status_code == 200 and by_admin.json()["items"] == unknown.json()["items"]


def test_history_reasons_only_for_the_viewer_themselves(served):
    client = served["client"]
    route = f"/v1/pages/{quote(PUBLIC[1], safe='')}/related"
    others = [
        client.get(route, params={"k": 12}, headers=headers).text
        for headers in (_bearer(served, "frontend"), _as(served, "quiet"), _as(served, "nobody-here"))
    ]
    assert not any("you read" in text for text in others)
    own = client.get(
        "/v1/users/alice/recommendations",
        params={"k": 12, "include_read": True},
        headers=_as(served, "alice"),
    ).text
    assert "you read" in own  # the check above is not vacuous: alice's own list does say it

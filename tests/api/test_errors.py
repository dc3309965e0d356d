"""One handler answers every library error a route lets through, with from_library's status and code."""

from __future__ import annotations

import pytest
from fastapi import FastAPI
from fastapi.testclient import TestClient

from api.errors import from_library, install_error_handlers
from rankrec.errors import GroupTooSmall, InputError, StaleIndex, UnknownPage, UnknownTeam, UnknownUser

RAISED = {
    "page": UnknownPage("ops/db", ["ops/dbs"]),
    "user": UnknownUser("p-0123", ["p-0124"]),
    "team": UnknownTeam("opz", ["ops"]),
    "small": GroupTooSmall("ops", 2, 5),
    "stale": StaleIndex("abc", "def"),
    "input": InputError("/srv/wiki/views.csv", 3, "empty page id"),
}


@pytest.fixture(scope="module")
def client():
    app = FastAPI()
    install_error_handlers(app)

    @app.get("/raise/{name}")
    def raising(name: str) -> dict:
        raise RAISED[name]

    with TestClient(app, raise_server_exceptions=False) as client:
        yield client


@pytest.mark.parametrize(
    ("name", "status", "code"),
    [
        ("page", 404, "unknown_page"),
        ("user", 404, "unknown_user"),
        ("team", 404, "unknown_team"),
        ("small", 409, "group_too_small"),
        ("stale", 503, "stale_index"),
        ("input", 422, "invalid_request"),
    ],
)
def test_a_library_error_is_answered_by_its_mapping(client, name, status, code):
    answer = client.get(f"/raise/{name}")
    expected = from_library(RAISED[name])
    assert (
        (answer.status_code, answer.json()["error"]["code"])
        == (status, code)
        == (expected.status, expected.code)
    )
    assert answer.json()["error"]["message"] == expected.message


def test_the_answer_never_names_other_users_or_server_paths(client):
    # user ids are not suggested (they would tell a reader who else reads); file paths stay on the server
    user, page = client.get("/raise/user").json()["error"], client.get("/raise/page").json()["error"]
    assert "p-0124" not in str(user) and page["details"] == {"closest": ["ops/dbs"]}
    assert "/srv" not in client.get("/raise/input").text

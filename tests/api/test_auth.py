"""Bearer tokens through HTTP: 401 without or with a wrong token, 403 for the wrong role."""

from __future__ import annotations

import json

import pytest

from api.app import create_app
from rankrec.errors import InputError
from rankrec.tokens import add_token
from tests.api.conftest import TestClient, settings_for

# RFC 6750 section 2.1: "Authorization: Bearer <token>"; section 3: a 401 carries WWW-Authenticate
ROUTES = [
    "/v1/index",
    "/v1/pages/anything/related",
    "/v1/users/u00003/recommendations",
    "/v1/teams/field-sales/landing",
    "/v1/pages",
]


@pytest.mark.parametrize("route", ROUTES)
@pytest.mark.parametrize(
    "authorization",
    [None, "Bearer", "Bearer ", "Bearer not-a-token", "Basic dXNlcjpwYXNz", "bearer-less"],
    ids=["none", "empty", "blank", "wrong", "basic", "no-scheme"],
)
def test_missing_or_wrong_tokens_answer_401(client, route, authorization):
    headers = {} if authorization is None else {"Authorization": authorization}
    answer = client.get(route, headers=headers)
    assert answer.status_code == 401
    assert answer.json()["error"]["code"] == "unauthorised"
    assert answer.headers["www-authenticate"] == "Bearer"


def test_a_token_that_differs_in_one_character_is_refused(client, demo):
    token = demo["reader"]
    changed = token[:-1] + ("A" if token[-1] != "A" else "B")
    assert client.get("/v1/index", headers={"Authorization": f"Bearer {changed}"}).status_code == 401
    assert client.get("/v1/index", headers={"Authorization": f"Bearer {token}"}).status_code == 200
    # the scheme name is case-insensitive (RFC 7235 section 2.1)
    assert client.get("/v1/index", headers={"Authorization": f"bearer {token}"}).status_code == 200


def test_admin_calls_refuse_reader_tokens_with_403(client, reader, admin):
    answer = client.post("/v1/index/reload", headers=reader)
    assert answer.status_code == 403 and answer.json()["error"]["code"] == "forbidden"
    assert client.post("/v1/index/reload", headers=admin).status_code == 200


def test_health_metrics_and_preview_need_no_token(client):
    for route in ("/v1/health", "/metrics", "/preview", "/openapi.json"):
        assert client.get(route).status_code == 200, route


def test_a_token_added_while_serving_works_at_once_and_a_broken_file_keeps_the_old_ones(private_copy):
    tokens = private_copy["folder"] / "tokens.json"
    first = add_token(tokens, "first", "reader")
    client = TestClient(create_app(settings_for({**private_copy, "tokens": tokens})))
    assert client.get("/v1/index", headers={"Authorization": f"Bearer {first}"}).status_code == 200
    second = add_token(tokens, "second", "admin")
    assert client.post("/v1/index/reload", headers={"Authorization": f"Bearer {second}"}).status_code == 200
    tokens.write_text("{not json")
    assert client.get("/v1/index", headers={"Authorization": f"Bearer {first}"}).status_code == 200
    # a token removed from the file stops working
    entries = [{"name": "second", "role": "admin", "sha256": "0" * 64, "created": "2026-04-01T00:00:00Z"}]
    tokens.write_text(json.dumps({"format": 1, "tokens": entries}))
    assert client.get("/v1/index", headers={"Authorization": f"Bearer {first}"}).status_code == 401


def test_the_service_does_not_start_without_a_readable_tokens_file(private_copy):
    with pytest.raises(InputError, match="tokens file"):
        create_app(settings_for({**private_copy, "tokens": private_copy["folder"] / "absent.json"}))

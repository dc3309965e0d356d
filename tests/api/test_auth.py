"""Bearer tokens through HTTP: 401 without or with a wrong token, 403 for the wrong role."""

from __future__ import annotations

import json
import os
import time

import pytest

from api.app import create_app
from rankrec.errors import InputError
from rankrec.tokens import add_token, revoke_token
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


def _refused_within(client, token: str, seconds: float) -> float | None:
    """Seconds until ``token`` is refused (polling), or None if it still works after ``seconds``."""
    started = time.monotonic()
    while time.monotonic() - started < seconds:
        if client.get("/v1/index", headers={"Authorization": f"Bearer {token}"}).status_code == 401:
            return time.monotonic() - started
        time.sleep(0.05)
    return None


def test_a_revoked_token_is_refused_by_the_running_service(private_copy):
    # issue finding 7: removing a token did not revoke it until a restart (OWASP API Security Top 10
    # 2023, API2 "Broken Authentication": credentials must be revocable)
    tokens = private_copy["folder"] / "tokens.json"
    kept, gone = add_token(tokens, "kept", "reader"), add_token(tokens, "gone", "reader")
    with TestClient(create_app(settings_for({**private_copy, "tokens": tokens}))) as client:
        assert client.get("/v1/index", headers={"Authorization": f"Bearer {gone}"}).status_code == 200
        revoke_token(tokens, "gone")
        waited = _refused_within(client, gone, 5.0)
        assert waited is not None and waited < 2.0
        assert client.get("/v1/index", headers={"Authorization": f"Bearer {kept}"}).status_code == 200


def test_an_edit_that_keeps_the_size_and_times_of_the_file_is_noticed(private_copy):
    # file times tick coarsely: an in-place edit of the same size with the old modification time
    # restored (as a second edit within one tick looks) must still be read
    tokens = private_copy["folder"] / "tokens.json"
    token = add_token(tokens, "edited", "reader")
    client = TestClient(create_app(settings_for({**private_copy, "tokens": tokens})))
    assert client.get("/v1/index", headers={"Authorization": f"Bearer {token}"}).status_code == 200
    before = tokens.stat()
    text = tokens.read_text()
    digest = json.loads(text)["tokens"][0]["sha256"]
    with open(tokens, "r+") as handle:  # same inode, same size
        handle.write(text.replace(digest, "0" * 64))
    os.utime(tokens, ns=(before.st_atime_ns, before.st_mtime_ns))
    assert (tokens.stat().st_size, tokens.stat().st_mtime_ns) == (before.st_size, before.st_mtime_ns)
    waited = _refused_within(client, token, 5.0)
    assert waited is not None and waited < 2.0

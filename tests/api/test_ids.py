"""Ids are bounded at every HTTP entry, by the one id check (issue finding 9: POST /v1/views stored a
300,000-character user id that DELETE /v1/users/{user}/views could then not erase).

The bound: 1 to 256 characters, no control characters or line separators
(:func:`rankrec.sources.check_id`). A refused id answers 422 quoting at most a short prefix of it
(common practice: never echo unbounded input), before any lookup.
"""

from __future__ import annotations

from urllib.parse import quote

import httpx
import pytest

from api.app import create_app
from rankrec.sources import ID_MAX_CHARS
from rankrec.store import Store
from tests._serving import serve_in_thread

from .conftest import TestClient, settings_for


@pytest.fixture
def world(demo, tmp_path):
    """The demo service with a store of this test's own."""
    wiki = tmp_path / "wiki.db"
    with Store(demo["wiki"], create=False) as source, Store(wiki) as copy:
        source.connection.backup(copy.connection)
        page = copy.scalar(
            "SELECT page FROM pages WHERE present = 1 AND id NOT IN (SELECT page_id FROM page_groups) "
            "ORDER BY page LIMIT 1"
        )
    app = create_app(settings_for(demo, wiki=wiki))
    yield {**demo, "wiki": wiki, "page": page, "client": TestClient(app)}
    app.state.service.close()


def _bearer(token: str) -> dict:
    return {"Authorization": f"Bearer {token}"}


def _users(world) -> list[str]:
    with Store(world["wiki"], create=False) as store:
        return [row[0] for row in store.connection.execute("SELECT user FROM users")]


def test_a_huge_user_id_is_refused_at_post_views_with_a_short_message(world):
    huge = "u" * 300_000
    answer = world["client"].post(
        "/v1/views",
        json={"views": [{"user": huge, "page": world["page"], "timestamp": 1_000_000}]},
        headers=_bearer(world["reader"]),
    )
    assert answer.status_code == 422 and answer.json()["error"]["code"] == "invalid_view"
    assert len(answer.text) < 400 and "u" * 40 not in answer.text  # a short prefix at most
    assert "256" in answer.json()["error"]["message"]
    assert huge not in _users(world)


@pytest.mark.parametrize(
    "user", ["line\nbreak", "nul\x00byte", "tab\there", "sep\u2028arator", "del\x7f"], ids=repr
)
def test_ids_with_control_characters_are_refused_at_post_views(world, user):
    answer = world["client"].post(
        "/v1/views",
        json={"views": [{"user": user, "page": world["page"], "timestamp": 1_000_000}]},
        headers=_bearer(world["reader"]),
    )
    assert answer.status_code == 422 and "control character" in answer.json()["error"]["message"]
    assert user not in _users(world)


def test_the_longest_id_accepted_can_be_erased_through_http(world):
    # through a real server: whatever POST /v1/views stores, DELETE can name again in its path
    longest = "é/" * (ID_MAX_CHARS // 2)  # non-ASCII and '/', 256 characters, 384 UTF-8 bytes
    assert len(longest) == ID_MAX_CHARS
    app = world["client"].app
    with serve_in_thread(app) as base, httpx.Client(base_url=base) as http:
        stored = http.post(
            "/v1/views",
            json={"views": [{"user": longest, "page": world["page"], "timestamp": 1_000_000}]},
            headers=_bearer(world["reader"]),
        )
        assert stored.status_code == 200 and stored.json()["stored"] == 1
        erased = http.delete(f"/v1/users/{quote(longest, safe='')}/views", headers=_bearer(world["admin"]))
    assert erased.status_code == 200 and erased.json() == {"user": longest, "deleted": 1}
    assert longest not in _users(world)


@pytest.mark.parametrize(
    "route",
    [
        "/v1/pages/{id}/related",
        "/v1/users/{id}/recommendations",
        "/v1/teams/{id}/landing",
        "/v1/pages?prefix=&viewer={id}",
        "/v1/users/{id}/views",
    ],
)
def test_paths_and_queries_refuse_ids_over_the_bound_before_any_lookup(world, route):
    too_long = "p" * (ID_MAX_CHARS + 1)
    method = "DELETE" if route.endswith("/views") else "GET"
    answer = world["client"].request(method, route.format(id=too_long), headers=_bearer(world["admin"]))
    assert answer.status_code == 422 and answer.json()["error"]["code"] == "invalid_request"
    assert "p" * 40 not in answer.text and "256" in answer.text
    control = world["client"].request(method, route.format(id="a%0Ab"), headers=_bearer(world["admin"]))
    # a line break: refused by the id check, or (in a {name:path} segment) matching no route at all
    assert control.status_code in (404, 422) and control.json()["error"]["code"] != "unknown_page"

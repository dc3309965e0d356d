"""POST /v1/views, DELETE /v1/users/{user}/views and POST /v1/admin/retention: every answer, every error."""

from __future__ import annotations

import threading
import time
from datetime import UTC, datetime
from urllib.parse import quote

import pytest

from api.app import create_app
from api.settings import ServiceSettings
from rankrec.privacy import new_key, pseudonym
from rankrec.store import Store

from .conftest import TestClient

NOW = time.time()


@pytest.fixture(scope="module")
def pages(demo) -> list[str]:
    with Store(demo["wiki"], create=False) as store:
        # pages everyone may see (a restricted page is refused for its non-members)
        sql = "SELECT page FROM pages WHERE present = 1 AND id NOT IN (SELECT page_id FROM page_groups)"
        return sorted(row[0] for row in store.connection.execute(sql))


@pytest.fixture
def world(demo, pages, tmp_path):
    """The demo service's paths with a store of this test's own (the index is shared, read-only)."""
    wiki = tmp_path / "wiki.db"
    with Store(demo["wiki"], create=False) as source, Store(wiki) as copy:
        source.connection.backup(copy.connection)  # SQLite online backup: a consistent copy, WAL included
    return {**demo, "wiki": wiki, "pages": pages}


def _client(world, **overrides) -> TestClient:
    settings = ServiceSettings(
        index=world["index"],
        tokens=world["tokens"],
        wiki=world["wiki"],
        watch_seconds=0,
        **overrides,
    )
    return TestClient(create_app(settings))


def _auth(token: str) -> dict:
    return {"Authorization": f"Bearer {token}"}


def _count(world, sql: str = "SELECT count(*) FROM views", parameters: tuple = ()) -> int:
    with Store(world["wiki"], create=False) as store:
        return store.scalar(sql, parameters)


def _views_of(world, user: str) -> list[tuple[str, float]]:
    with Store(world["wiki"], create=False) as store:
        return store.connection.execute(
            "SELECT page, timestamp FROM views JOIN users ON users.id = user_id "
            "JOIN pages ON pages.id = page_id WHERE user = ? ORDER BY timestamp",
            (user,),
        ).fetchall()


def _post(client, world, views, token=None):
    return client.post("/v1/views", json={"views": views}, headers=_auth(token or world["reader"]))


# -- storing ---------------------------------------------------------------------------------------
def test_batch_is_stored_with_timestamps_converted(world):
    first, second = world["pages"][:2]
    views = [
        # RFC 3339 section 5.8: 1996-12-19T16:39:57-08:00 is 1996-12-20T00:39:57Z, Unix 851042397
        {"user": "hv-ines", "page": first, "timestamp": "1996-12-19T16:39:57-08:00"},
        {"user": "hv-ines", "page": second, "timestamp": 851042398, "dwell": 30},
        {"user": "hv-ines", "page": first, "timestamp": "851042399.5"},  # digits only: Unix seconds
    ]
    with _client(world) as client:
        answer = _post(client, world, views)
    assert answer.status_code == 200
    assert answer.json() == {"received": 3, "stored": 3, "duplicates": 0}
    assert _views_of(world, "hv-ines") == [(first, 851042397.0), (second, 851042398.0), (first, 851042399.5)]


def test_posting_again_is_idempotent(world):
    page = world["pages"][0]
    views = [{"user": "hv-tomas", "page": page, "timestamp": NOW - 60}] * 2  # repeated inside the batch too
    with _client(world) as client:
        before = _count(world)
        assert _post(client, world, views).json() == {"received": 2, "stored": 1, "duplicates": 1}
        assert _post(client, world, views).json() == {"received": 2, "stored": 0, "duplicates": 2}
        assert _post(client, world, []).json() == {"received": 0, "stored": 0, "duplicates": 0}
    assert _count(world) == before + 1


def test_admin_tokens_may_post_too(world):
    with _client(world) as client:
        answer = _post(
            client, world, [{"user": "hv-a", "page": world["pages"][0], "timestamp": 1}], world["admin"]
        )
    assert answer.status_code == 200 and answer.json()["stored"] == 1


def test_stored_views_counter_counts_new_views_only(world):
    page = world["pages"][3]
    with _client(world) as client:
        for _ in range(2):
            _post(client, world, [{"user": "hv-m", "page": page, "timestamp": t} for t in (1, 2, 3)])
        text = client.get("/metrics", headers=_auth(world["admin"])).text
    # Prometheus text exposition format: a counter named x is exposed as x_total
    assert "rankrec_views_stored_total 3.0" in text


def test_concurrent_batches_all_arrive(world):
    page = world["pages"][5]
    with _client(world) as client:
        before = _count(world)

        def send(number: int) -> None:
            views = [{"user": f"hv-thread{number}", "page": page, "timestamp": t} for t in range(1, 26)]
            assert _post(client, world, views).json()["stored"] == 25

        threads = [threading.Thread(target=send, args=(n,)) for n in range(6)]
        for thread in threads:
            thread.start()
        for thread in threads:
            thread.join()
    assert _count(world) == before + 6 * 25


# -- refusals --------------------------------------------------------------------------------------
BAD_RECORDS = [
    ({"timestamp": "soon"}, "neither ISO 8601 nor Unix seconds"),
    ({"timestamp": NOW + 3600}, "in the future"),
    ({"timestamp": "2026-02-30T10:00:00Z"}, "neither ISO 8601 nor Unix seconds"),
    ({"timestamp": -5}, "before 1970"),
    ({"timestamp": True}, "timestamp must be text or a number, not bool"),
    ({"timestamp": None}, "timestamp must be text or a number, not NoneType"),
    ({"user": "   "}, "empty user id"),
    ({"user": ["a"]}, "user must be a string, not list"),
    ({"page": "no/such-page"}, "unknown page 'no/such-page'"),
    ({"dwell": -1}, "negative dwell"),
    ({"referrer": "search"}, "referrer: Extra inputs are not permitted"),
]


@pytest.mark.parametrize(("change", "reason"), BAD_RECORDS, ids=[reason for _, reason in BAD_RECORDS])
def test_one_bad_record_refuses_the_whole_batch(world, change, reason):
    good = [{"user": "hv-batch", "page": page, "timestamp": NOW - 10} for page in world["pages"][:5]]
    bad = {**good[3], **change}
    with _client(world) as client:
        before = _count(world)
        answer = _post(client, world, good[:3] + [bad] + good[4:])
    assert answer.status_code == 422
    error = answer.json()["error"]
    assert error["code"] == "invalid_view"
    assert error["details"]["index"] == 3
    assert reason in error["details"]["reason"]
    assert _count(world) == before  # nothing of the batch was stored


def test_missing_field_names_the_record(world):
    with _client(world) as client:
        answer = _post(
            client, world, [{"user": "hv-x", "page": world["pages"][0], "timestamp": 1}, {"user": "hv-x"}]
        )
    error = answer.json()["error"]
    assert answer.status_code == 422 and error["code"] == "invalid_view"
    assert error["details"]["index"] == 1 and "page" in error["details"]["reason"]


@pytest.mark.parametrize(
    "body", [{}, {"views": "all of them"}, {"views": [], "source": "x"}, [1, 2], None], ids=str
)
def test_a_body_that_is_not_a_batch_is_an_invalid_request(world, body):
    with _client(world) as client:
        answer = client.post("/v1/views", json=body, headers=_auth(world["reader"]))
    assert answer.status_code == 422
    assert answer.json()["error"]["code"] == "invalid_request"


def test_not_json_is_an_invalid_request(world):
    with _client(world) as client:
        answer = client.post(
            "/v1/views",
            content=b"user,page\n",
            headers={**_auth(world["reader"]), "Content-Type": "text/csv"},
        )
    assert answer.status_code == 422 and answer.json()["error"]["code"] == "invalid_request"


def test_batch_over_the_limit_is_too_large(world):
    views = [{"user": "hv-big", "page": world["pages"][0], "timestamp": t} for t in range(1, 5)]
    with _client(world, max_batch=3) as client:
        assert _post(client, world, views[:3]).status_code == 200
        answer = _post(client, world, views)
    assert answer.status_code == 413
    assert (
        answer.json()["error"]["code"] == "too_large"
        and "at most 3 views" in answer.json()["error"]["message"]
    )
    assert _count(world, "SELECT count(*) FROM views WHERE timestamp = 4") == 0


def test_body_over_the_byte_limit_is_too_large(world):
    views = [{"user": "hv-big", "page": world["pages"][0], "timestamp": t} for t in range(1, 200)]
    with _client(world, max_body_bytes=2_000) as client:
        answer = _post(client, world, views)
    assert answer.status_code == 413 and answer.json()["error"]["code"] == "too_large"


@pytest.mark.parametrize(
    ("method", "path"),
    [("POST", "/v1/views"), ("DELETE", "/v1/users/hv-x/views"), ("POST", "/v1/admin/retention")],
)
@pytest.mark.parametrize("token", [None, "not-a-token"])
def test_calls_without_a_valid_token_are_unauthorised(world, method, path, token):
    headers = {} if token is None else _auth(token)
    with _client(world, retention_days=30) as client:
        answer = client.request(method, path, json={"views": []}, headers=headers)
    assert answer.status_code == 401 and answer.json()["error"]["code"] == "unauthorised"


@pytest.mark.parametrize(
    ("method", "path"), [("DELETE", "/v1/users/hv-x/views"), ("POST", "/v1/admin/retention")]
)
def test_reader_tokens_may_not_erase_or_apply_retention(world, method, path):
    with _client(world, retention_days=30) as client:
        answer = client.request(method, path, headers=_auth(world["reader"]))
    assert answer.status_code == 403 and answer.json()["error"]["code"] == "forbidden"


def test_no_live_index_and_no_store_setting_is_unavailable(world, tmp_path):
    settings = ServiceSettings(index=tmp_path / "none", tokens=world["tokens"], watch_seconds=0)
    with TestClient(create_app(settings)) as client:
        answer = _post(client, world, [{"user": "hv-x", "page": world["pages"][0], "timestamp": 1}])
    assert answer.status_code == 503 and answer.json()["error"]["code"] == "no_index"


def _wait_briefly(store: Store) -> int:
    store.connection.execute("PRAGMA busy_timeout = 50")
    return 0


def test_a_store_that_cannot_take_writes_is_unavailable_not_a_failure(world):
    with _client(world) as client, Store(world["wiki"], create=False) as other:
        other.connection.execute("PRAGMA busy_timeout = 0")
        other.connection.execute("BEGIN IMMEDIATE")  # another writer (an import, say) holds the lock
        try:
            client.app.state.views.write(_wait_briefly)  # not the usual 5 s before giving up
            answer = _post(client, world, [{"user": "hv-x", "page": world["pages"][0], "timestamp": 1}])
        finally:
            other.connection.execute("ROLLBACK")
    assert answer.status_code == 503 and answer.json()["error"]["code"] == "store_unavailable"
    assert "wiki.db" not in answer.text  # no internal paths in answers


# -- erasing one reader ----------------------------------------------------------------------------
def test_admin_erases_one_reader_and_nobody_else(world):
    page = world["pages"][0]
    with _client(world) as client:
        _post(
            client,
            world,
            [{"user": u, "page": page, "timestamp": t} for u in ("hv-e1", "hv-e2") for t in (1, 2)],
        )
        answer = client.delete("/v1/users/hv-e1/views", headers=_auth(world["admin"]))
        assert answer.status_code == 200 and answer.json() == {"user": "hv-e1", "deleted": 2}
        again = client.delete("/v1/users/hv-e1/views", headers=_auth(world["admin"]))
        assert again.json() == {"user": "hv-e1", "deleted": 0}
    assert _views_of(world, "hv-e1") == [] and len(_views_of(world, "hv-e2")) == 2
    assert _count(world, "SELECT count(*) FROM users WHERE user = 'hv-e1'") == 0


def test_user_ids_with_slashes_round_trip(world):
    user = "hv/contractors/ines"
    with _client(world) as client:
        _post(client, world, [{"user": user, "page": world["pages"][0], "timestamp": 5}])
        answer = client.delete(f"/v1/users/{quote(user, safe='')}/views", headers=_auth(world["admin"]))
    assert answer.json() == {"user": user, "deleted": 1}


def test_erasing_an_empty_user_id_is_refused(world):
    with _client(world) as client:
        answer = client.delete("/v1/users/%20/views", headers=_auth(world["admin"]))
    assert answer.status_code == 422


# -- pseudonyms ------------------------------------------------------------------------------------
def test_with_a_key_only_pseudonyms_reach_the_store(world, tmp_path):
    key_path = tmp_path / "pseudonym.key"
    key = new_key(key_path)
    page = world["pages"][0]
    with _client(world, pseudonym_key=key_path) as client:
        assert (
            _post(client, world, [{"user": "hv-private", "page": page, "timestamp": 7}]).json()["stored"] == 1
        )
        assert _views_of(world, "hv-private") == []
        assert _views_of(world, pseudonym(key, "hv-private")) == [(page, 7.0)]
        answer = client.delete("/v1/users/hv-private/views", headers=_auth(world["admin"]))
    assert answer.json() == {"user": "hv-private", "deleted": 1}  # erased by the plain id the caller knows
    assert _views_of(world, pseudonym(key, "hv-private")) == []


def test_with_a_key_erasure_also_takes_history_stored_under_the_plain_id(world, tmp_path):
    key_path = tmp_path / "pseudonym.key"
    key = new_key(key_path)
    page = world["pages"][0]
    with _client(world) as client:  # before the key: the plain id is stored
        _post(client, world, [{"user": "hv-before", "page": page, "timestamp": 3}])
    with _client(world, pseudonym_key=key_path) as client:
        _post(client, world, [{"user": "hv-before", "page": page, "timestamp": 4}])
        answer = client.delete("/v1/users/hv-before/views", headers=_auth(world["admin"]))
    assert answer.json()["deleted"] == 2
    assert _views_of(world, "hv-before") == [] and _views_of(world, pseudonym(key, "hv-before")) == []


# -- retention -------------------------------------------------------------------------------------
def _old_and_new(client, world, user: str) -> None:
    page = world["pages"][0]
    old, recent = NOW - 40 * 86400, NOW - 5 * 86400
    assert (
        _post(
            client, world, [{"user": user, "page": page, "timestamp": t} for t in (old, recent)]
        ).status_code
        == 200
    )


def test_retention_call_deletes_only_views_older_than_the_setting(world):
    with _client(world, retention_days=30) as client:
        _old_and_new(client, world, "hv-r")
        answer = client.post("/v1/admin/retention", headers=_auth(world["admin"]))
    assert answer.status_code == 200
    body = answer.json()
    assert body["days"] == 30
    cutoff = datetime.strptime(body["cutoff"], "%Y-%m-%dT%H:%M:%SZ").replace(tzinfo=UTC).timestamp()
    assert abs(cutoff - (time.time() - 30 * 86400)) < 60
    assert [ts for _, ts in _views_of(world, "hv-r")] == [pytest.approx(NOW - 5 * 86400)]
    assert _count(world, "SELECT count(*) FROM views WHERE timestamp < ?", (cutoff,)) == 0


def test_retention_call_without_a_setting_is_a_conflict(world):
    with _client(world) as client:
        _old_and_new(client, world, "hv-r")
        answer = client.post("/v1/admin/retention", headers=_auth(world["admin"]))
    assert answer.status_code == 409 and answer.json()["error"]["code"] == "retention_off"
    assert len(_views_of(world, "hv-r")) == 2


def test_retention_runs_at_startup(world):
    with _client(world) as client:  # no retention: both views stay
        _old_and_new(client, world, "hv-s")
    assert len(_views_of(world, "hv-s")) == 2
    with _client(world, retention_days=30):
        deadline = time.monotonic() + 5
        while len(_views_of(world, "hv-s")) == 2 and time.monotonic() < deadline:
            time.sleep(0.05)
    assert [ts for _, ts in _views_of(world, "hv-s")] == [pytest.approx(NOW - 5 * 86400)]


def test_openapi_documents_the_views_models(world):
    with _client(world) as client:
        schema = client.get("/openapi.json").json()
    batch = schema["components"]["schemas"]["ViewBatch"]
    assert batch["additionalProperties"] is False
    assert schema["components"]["schemas"]["ViewIn"]["additionalProperties"] is False
    assert "422" in schema["paths"]["/v1/views"]["post"]["responses"]


def test_closing_waits_for_the_write_in_progress(world):
    # regression: shutting down while the startup retention ran closed the connection under it (a crash)
    with _client(world) as client:
        keeper = client.app.state.views
        started, results = threading.Event(), []

        def slow_write(store: Store) -> int:
            started.set()
            time.sleep(0.3)
            return store.scalar("SELECT count(*) FROM views")

        writer = threading.Thread(target=lambda: results.append(keeper.write(slow_write)))
        writer.start()
        started.wait(5)
        keeper.close_store()  # must block until slow_write is done
        assert results and results[0] == _count(world)
        writer.join()


def test_a_failed_retention_run_is_logged_and_the_service_stays_up(world, tmp_path, caplog):
    settings = ServiceSettings(
        index=tmp_path / "none", tokens=world["tokens"], watch_seconds=0, retention_days=30
    )
    with caplog.at_level("ERROR", logger="rankrec.api"), TestClient(create_app(settings)) as client:
        deadline = time.monotonic() + 5
        while "retention run failed" not in caplog.text and time.monotonic() < deadline:
            time.sleep(0.05)
        assert client.get("/v1/health").status_code == 503  # still answering (no index yet)
    assert "retention run failed: no index is live" in caplog.text

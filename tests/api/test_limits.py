"""Rate and concurrency limits of the expensive routes (issue finding 2: one client could stall everyone).

429 Too Many Requests is RFC 6585 section 4, which says it may carry Retry-After; Retry-After as
delay-seconds is RFC 9110 section 10.2.3. The token bucket is common practice (a refill rate and a
burst capacity); so is answering a client over its limit after a pause.
"""

from __future__ import annotations

import threading
import time
from concurrent.futures import ThreadPoolExecutor
from urllib.parse import quote

import httpx
import pytest

import api.lists
from api.app import create_app
from api.limits import Limits
from api.settings import ServiceSettings
from rankrec.store import Store
from rankrec.tokens import add_token
from tests._serving import serve_in_thread

from .conftest import TestClient, settings_for

ROUTES = ("related", "recommendations", "landing", "search")


@pytest.fixture(scope="module")
def paths(demo, tmp_path_factory):
    tokens = tmp_path_factory.mktemp("limits") / "tokens.json"
    made = {name: add_token(tokens, name, "admin") for name in ("first", "second")}
    with Store(demo["wiki"], create=False) as store:
        page = store.scalar(
            "SELECT page FROM pages WHERE present = 1 AND id NOT IN (SELECT page_id FROM page_groups) "
            "ORDER BY page LIMIT 1"
        )
    return {"index": demo["index"], "tokens": tokens, "made": made, "page": page}


def _route(paths, which: str) -> str:
    return {
        "related": f"/v1/pages/{quote(paths['page'], safe='')}/related",
        "recommendations": "/v1/users/u00003/recommendations",
        "landing": "/v1/teams/site-reliability/landing",
        "search": "/v1/pages?prefix=o",
    }[which]


def _as(paths, name: str) -> dict:
    return {"Authorization": f"Bearer {paths['made'][name]}"}


def test_the_bucket_refills_at_its_rate_up_to_its_burst():
    now = [0.0]
    limits = Limits(
        ServiceSettings(index="i", tokens="t", rate_per_second=2, rate_burst=4), clock=lambda: now[0]
    )
    assert [limits.take("a") for _ in range(4)] == [None] * 4
    assert limits.take("a") == pytest.approx(0.5)  # one request's worth comes back in 1 / rate s
    assert limits.take("b") is None  # every token has a bucket of its own
    now[0] = 0.5
    assert limits.take("a") is None and limits.take("a") is not None
    now[0] = 100.0  # a long pause fills the bucket to its burst, no further
    assert [limits.take("a") for _ in range(5)].count(None) == 4


@pytest.mark.parametrize("which", ROUTES)
def test_a_token_over_its_rate_gets_429_with_retry_after(paths, which):
    settings = settings_for(paths, rate_per_second=0.5, rate_burst=2, limit_pause_seconds=0)
    client = TestClient(create_app(settings))
    route = _route(paths, which)
    answers = [client.get(route, headers=_as(paths, "first")) for _ in range(3)]
    assert all(answer.status_code in (200, 409) for answer in answers[:2])  # within the burst
    refused = answers[2]
    assert refused.status_code == 429 and refused.json()["error"]["code"] == "rate_limited"
    assert refused.headers["retry-after"].isdigit() and int(refused.headers["retry-after"]) >= 1
    assert client.get(route, headers=_as(paths, "second")).status_code != 429  # others are not slowed
    assert client.get("/v1/health").status_code == 200  # cheap routes are not limited
    assert client.get("/v1/index", headers=_as(paths, "first")).status_code == 200


def test_a_refusal_waits_out_the_pause_first(paths):
    settings = settings_for(paths, rate_per_second=0.5, rate_burst=1, limit_pause_seconds=0.4)
    client = TestClient(create_app(settings))
    route = _route(paths, "search")
    assert client.get(route, headers=_as(paths, "first")).status_code == 200
    started = time.perf_counter()
    refused = client.get(route, headers=_as(paths, "first"))
    waited = time.perf_counter() - started
    assert refused.status_code == 429 and 0.4 <= waited < int(refused.headers["retry-after"]) + 0.5


def _slow_related(monkeypatch, release: threading.Event, entered: threading.Semaphore) -> None:
    original = api.lists.related

    def slow(*args, **kwargs):
        entered.release()
        release.wait(10)
        return original(*args, **kwargs)

    monkeypatch.setattr(api.lists, "related", slow)


def test_concurrent_expensive_requests_are_bounded_per_token_and_in_all(paths, monkeypatch):
    release, entered = threading.Event(), threading.Semaphore(0)
    _slow_related(monkeypatch, release, entered)
    settings = settings_for(paths, max_concurrent=3, max_concurrent_per_token=2, limit_pause_seconds=0)
    app = create_app(settings)
    route = _route(paths, "related")
    with serve_in_thread(app) as base, ThreadPoolExecutor(4) as pool:

        def get(name):
            with httpx.Client(base_url=base, timeout=20) as http:
                return http.get(route, headers=_as(paths, name))

        held = [pool.submit(get, "first") for _ in range(2)]
        assert all(entered.acquire(timeout=10) for _ in held)  # both run, waiting inside the route
        third = get("first")  # the token's third at once
        assert third.status_code == 429 and third.json()["error"]["code"] == "too_many_concurrent"
        assert third.headers["retry-after"] == "1"
        other = pool.submit(get, "second")  # another token still has a place
        assert entered.acquire(timeout=10)
        fourth = get("second")  # but not past the bound in all
        assert fourth.status_code == 429
        release.set()
        assert [future.result().status_code for future in (*held, other)] == [200, 200, 200]
        assert app.state.service.limits.running == 0  # every place given back
        assert get("first").status_code == 200


@pytest.mark.parametrize(
    "options",
    [
        {"rate_per_second": -1},
        {"rate_per_second": float("inf")},
        {"rate_burst": 0},
        {"max_concurrent": 0},
        {"max_concurrent": 4, "max_concurrent_per_token": 5},
        {"limit_pause_seconds": -0.5},
        {"viewer_max_ttl": 0},
        {"viewer_max_ttl": 86_400},
    ],
    ids=lambda options: ",".join(options),
)
def test_bad_limit_settings_are_refused(options):
    with pytest.raises(ValueError, match=list(options)[-1]):
        ServiceSettings(index="i", tokens="t", **options)


def test_limit_settings_come_from_the_environment():
    settings = ServiceSettings.from_environment(
        {
            "RANKREC_SERVE_INDEX": "ix",
            "RANKREC_SERVE_TOKENS": "t.json",
            "RANKREC_SERVE_RATE_PER_SECOND": "50",
            "RANKREC_SERVE_RATE_BURST": "80",
            "RANKREC_SERVE_MAX_CONCURRENT_PER_TOKEN": "4",
            "RANKREC_SERVE_VIEWER_MAX_TTL": "120",
        }
    )
    assert (settings.rate_per_second, settings.rate_burst, settings.max_concurrent_per_token) == (50, 80, 4)
    assert (
        settings.viewer_max_ttl == 120
        and ServiceSettings.from_environment(settings.environment()) == settings
    )


def test_places_are_given_back_whatever_the_answer(paths, demo):
    # refused viewers, unknown pages and bad queries end inside or after the limited dependency
    app = create_app(settings_for(paths, limit_pause_seconds=0))
    client = TestClient(app)
    headers = _as(paths, "first")
    answers = [
        client.get(_route(paths, "related"), headers={**headers, "X-Rankrec-Viewer": "forged.1.x"}),
        client.get("/v1/pages/no-such-page/related", headers=headers),
        client.get(_route(paths, "related"), params={"k": 0}, headers=headers),
        client.get("/v1/teams/no-such-team/landing", headers=headers),
    ]
    assert [answer.status_code for answer in answers] == [403, 404, 422, 404]
    assert app.state.service.limits.running == 0


def test_an_unknown_page_costs_more_of_the_bucket(paths):
    # 1 + 3 requests' worth: after one unknown page a burst of 4 leaves nothing for a fifth request
    settings = settings_for(paths, rate_per_second=0.01, rate_burst=5, unknown_cost=4, limit_pause_seconds=0)
    client = TestClient(create_app(settings))
    headers = _as(paths, "first")
    assert client.get("/v1/pages/no-such-page/related", headers=headers).status_code == 404
    assert client.get(_route(paths, "search"), headers=headers).status_code == 200
    assert client.get(_route(paths, "search"), headers=headers).status_code == 429


def test_the_place_is_given_back_before_the_answer_is_sent(paths, monkeypatch):
    # else a client sending its next request on receiving an answer could find its own last request
    # still counted, and be refused as concurrent with itself
    app = create_app(settings_for(paths))
    events = []
    leave = Limits.leave
    monkeypatch.setattr(Limits, "leave", lambda self, name: (events.append("given back"), leave(self, name)))

    async def recording(scope, receive, send):
        async def sending(message):
            if message["type"] == "http.response.start":
                events.append("answer sent")
            await send(message)

        await app(scope, receive, sending)

    assert TestClient(recording).get(_route(paths, "search"), headers=_as(paths, "first")).status_code == 200
    assert events == ["given back", "answer sent"]

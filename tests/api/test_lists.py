"""The list routes through HTTP: the same lists as the library and the CLI, page ids, every error path."""

from __future__ import annotations

import dataclasses
import json
from urllib.parse import quote

import httpx
import numpy as np
import pytest
from fastapi import FastAPI, Request

from api.app import create_app
from api.errors import install_error_handlers
from api.middleware import BodyLimitMiddleware
from rankrec.cli import main
from rankrec.index import load_index
from rankrec.recommend import landing, reader_from_store, recommend, related, team_from_store
from rankrec.store import Store
from tests._serving import serve_in_thread
from tests.api.conftest import ODD_PAGES, TestClient, settings_for


def _url(page: str, **query) -> str:
    """Percent-encode a page id as one path segment (RFC 3986 section 2.1: '/' becomes %2F)."""
    return f"/v1/pages/{quote(page, safe='')}/related"


def _rows(body: dict) -> list[dict]:
    return [{key: value for key, value in item.items() if key != "pagerank"} for item in body["items"]]


@pytest.fixture(scope="module")
def facts(demo) -> dict:
    """Pages, groups and users of the demo store, read straight from SQLite."""
    with Store(demo["wiki"], create=False) as store:
        sql = store.connection.execute
        restricted = dict(
            sql("SELECT page, group_concat(name) FROM page_groups JOIN pages ON id = page_id GROUP BY page")
        )
        members = dict(
            sql(
                "SELECT user, group_concat(name) FROM memberships JOIN users ON users.id = user_id "
                "WHERE kind = 'group' GROUP BY user"
            )
        )
        public = [row[0] for row in sql("SELECT page FROM pages WHERE present = 1 ORDER BY page")]
        readers = [row[0] for row in sql("SELECT user FROM users ORDER BY user")]
    public = [page for page in public if page not in restricted]
    insider = sorted(members)[0]
    insider_groups = set(members[insider].split(","))
    secret = next(
        page for page, names in sorted(restricted.items()) if insider_groups & set(names.split(","))
    )
    return {
        "restricted": restricted,
        "members": members,
        "public": public,
        "readers": readers,
        "insider": insider,
        "secret": secret,
    }


def _cli_json(capsys, *argv) -> list[dict]:
    assert main(list(argv)) == 0
    return json.loads(capsys.readouterr().out)


# -- same lists as the CLI and the library ------------------------------------------------------------
@pytest.mark.parametrize(
    "options",
    [{}, {"k": 5}, {"exclude_linked": True}, {"lift": 0.0, "k": 7}, {"per_space": 1, "k": 4}],
    ids=["defaults", "k5", "exclude-linked", "lift0", "per-space"],
)
def test_related_equals_the_cli(client, reader, demo, facts, capsys, options):
    page = facts["public"][3]
    argv = ["related", page, "--index", str(demo["index"]), "--format", "json"]
    for name, value in options.items():
        flag = "--" + name.replace("_", "-") if name != "k" else "-k"
        argv += [flag] if value is True else [flag, str(value)]
    answer = client.get(_url(page), params=options, headers=reader)
    assert answer.status_code == 200
    assert _rows(answer.json()) == _cli_json(capsys, *argv)
    assert answer.json()["subject"] == page


def test_related_for_a_viewer_equals_the_cli_and_shows_their_restricted_pages(
    client, reader, as_viewer, demo, facts, capsys
):
    insider, secret = facts["insider"], facts["secret"]
    with Store(demo["wiki"], create=False) as store:
        page = min(source for source, target, _ in store.link_rows() if target == secret)
    argv = [
        "related",
        page,
        "--index",
        str(demo["index"]),
        "--viewer",
        insider,
        "-k",
        "50",
        "--format",
        "json",
    ]
    answer = client.get(_url(page), params={"k": 50}, headers=as_viewer(insider))
    assert answer.status_code == 200 and answer.json()["viewer"] == insider
    assert _rows(answer.json()) == _cli_json(capsys, *argv)
    public = client.get(_url(page), params={"k": 50}, headers=reader).json()
    assert secret not in {row["page"] for row in _rows(public)}
    # the seed of a restricted page is served to a member of its group
    assert client.get(_url(secret), headers=as_viewer(insider)).status_code == 200


def test_recommendations_and_landing_equal_the_library(client, reader, as_viewer, admin, demo):
    index = load_index(demo["index"])
    with Store(demo["wiki"], create=False) as store:
        user = "u00003"
        expected = recommend(index, reader_from_store(store, index, user), k=8)
        team = team_from_store(store, index, "site-reliability")
        public_team = dataclasses.replace(team, visible=team.visible & index.visible(None))
        expected_landing = landing(index, public_team, k=6)
    for headers in (as_viewer(user), admin):
        body = client.get(f"/v1/users/{user}/recommendations", params={"k": 8}, headers=headers).json()
        assert _rows(body) == expected.rows()
        assert body["error_bound"] == pytest.approx(expected.error_bound)
    body = client.get("/v1/teams/site-reliability/landing", params={"k": 6}, headers=reader).json()
    assert _rows(body) == expected_landing.rows() and body["kind"] == "landing"


def test_landing_equals_the_cli_for_teams_that_see_only_public_pages(client, reader, demo, capsys):
    index = load_index(demo["index"])
    eligible_restricted = ~index.visible(None) & ~np.asarray(index.archived)
    compared = 0
    for team in index.team_names:
        cli = _cli_json(capsys, "landing", team, "--index", str(demo["index"]), "--format", "json")
        body = client.get(f"/v1/teams/{team}/landing", headers=reader).json()
        with Store(demo["wiki"], create=False) as store:
            found = team_from_store(store, index, team)
        if (found.visible & eligible_restricted).any():  # the API, without a viewer, keeps public pages only
            assert all(index.public[index.page_number(row["page"])] for row in _rows(body))
        else:
            assert _rows(body) == cli
            compared += 1
    assert compared >= 1


# -- page ids ------------------------------------------------------------------------------------------
def test_page_ids_round_trip_percent_encoded(odd):
    # through a real server: the test client decodes paths twice, so '%25' would not survive it
    app = create_app(settings_for(odd))
    headers = {"Authorization": f"Bearer {_token(odd)}"}
    index = load_index(odd["index"])
    with serve_in_thread(app) as base, httpx.Client(base_url=base, headers=headers) as http:
        for page in ODD_PAGES:
            answer = http.get(_url(page))
            assert answer.status_code == 200, (page, answer.text)
            assert answer.json()["subject"] == page
            assert _rows(answer.json()) == related(index, page, k=10).rows()
            assert all(item["page"] in ODD_PAGES for item in answer.json()["items"])
        # a '/' may also travel unencoded: the route takes the rest of the path up to the last /related
        assert http.get("/v1/pages/a/b/c/related").json()["subject"] == "a/b/c"
        assert http.get("/v1/pages/x/related/related").json()["subject"] == "x/related"
    app.state.service.close()


def _token(paths) -> str:
    from rankrec.tokens import add_token

    return add_token(paths["tokens"], f"odd-{id(paths)}", "reader")


# -- errors --------------------------------------------------------------------------------------------
def _error(answer, status: int, code: str) -> dict:
    assert answer.status_code == status, answer.text
    body = answer.json()
    assert set(body) == {"error"} and body["error"]["code"] == code
    assert (
        "Traceback" not in answer.text and "/tmp" not in answer.text and str(answer.text).count("/home") == 0
    )
    return body["error"]


def test_unknown_page_suggests_only_public_pages(client, reader, facts):
    page = facts["public"][0]
    error = _error(client.get(_url(page[:-2]), headers=reader), 404, "unknown_page")
    assert all(name not in facts["restricted"] for name in error.get("details", {}).get("closest", []))
    assert page in error["details"]["closest"]


def test_a_restricted_page_is_answered_like_an_unknown_one(client, reader, as_viewer, facts):
    # the same answer as for an absent page (tests/api/test_hidden_pages.py compares the two bodies):
    # close ids among the pages the caller may see, never a restricted one
    secret = facts["secret"]
    outsider = next(user for user in facts["readers"] if user not in facts["members"])
    for headers in (reader, as_viewer(outsider)):
        error = _error(client.get(_url(secret), headers=headers), 404, "unknown_page")
        assert error["message"] == f"unknown page {secret!r}"
        assert not set(error.get("details", {}).get("closest", [])) & set(facts["restricted"])


def test_unknown_viewer_sees_public_pages_only(client, reader, as_viewer, facts):
    page = facts["public"][5]
    public = client.get(_url(page), params={"k": 30}, headers=reader).json()
    stranger = client.get(_url(page), params={"k": 30}, headers=as_viewer("nobody-here")).json()
    # named as asserted, as a known viewer is: the answer does not say whether the store knows them
    assert _rows(stranger) == _rows(public) and stranger["viewer"] == "nobody-here"


@pytest.mark.parametrize(
    "query",
    [
        {"k": 0},
        {"k": 101},
        {"k": "ten"},
        {"lift": -1},
        {"lift": "nan"},
        {"lift": "inf"},
        {"per_space": 0},
        {"viewer": ""},
        {"exclude_linked": "maybe"},
    ],
    ids=lambda query: "-".join(f"{key}={value}" for key, value in query.items()),
)
def test_bad_query_values_answer_422(client, reader, facts, query):
    error = _error(client.get(_url(facts["public"][0]), params=query, headers=reader), 422, "invalid_request")
    assert error["details"]["problems"][0]["where"].startswith("query.")


def test_personal_lists_are_served_to_their_own_viewer_or_an_admin(client, reader, as_viewer, admin):
    # OWASP API Security Top 10 2023, API1: a user's list is that user's object
    user, route = "u00003", "/v1/users/u00003/recommendations"
    _error(client.get(route, headers=reader), 403, "forbidden")
    _error(client.get(route, headers=as_viewer("u00002")), 403, "forbidden")
    _error(client.get(route, params={"viewer": user}, headers=reader), 403, "viewer_unsigned")
    _error(client.get(route, params={"viewer": "u00002"}, headers=admin), 403, "forbidden")
    assert client.get(route, headers=as_viewer(user)).status_code == 200
    assert client.get(route, params={"viewer": user}, headers=admin).status_code == 200


def test_unknown_team(client, reader):
    error = _error(client.get("/v1/teams/site-reliabilty/landing", headers=reader), 404, "unknown_team")
    assert "site-reliability" in error["details"]["closest"]


def test_a_team_too_small_is_refused_without_naming_members(client, reader, demo):
    with Store(demo["wiki"], create=False) as store:
        members = [
            row[0]
            for row in store.connection.execute(
                "SELECT user FROM memberships JOIN users ON users.id = user_id WHERE name = 'talent'"
            )
        ]
    answer = client.get("/v1/teams/talent/landing", headers=reader)
    error = _error(answer, 409, "group_too_small")
    assert error["details"]["minimum"] == 5 and not any(member in answer.text for member in members)


def test_no_index_answers_503(demo, tmp_path, reader):
    paths = {"index": tmp_path / "missing", "tokens": demo["tokens"]}
    app = create_app(settings_for(paths))
    client = TestClient(app)
    _error(client.get(_url("anything"), headers=reader), 503, "no_index")
    _error(client.get("/v1/index", headers=reader), 503, "no_index")
    health = client.get("/v1/health")
    assert health.status_code == 503 and health.json()["status"] == "no_index"
    assert "missing" not in health.text  # the reason names no folder


def test_unknown_route_method_and_large_body(client, reader, admin):
    _error(client.get("/v1/nothing-here", headers=reader), 404, "not_found")
    _error(client.delete("/v1/index", headers=admin), 405, "method_not_allowed")
    big = b"x" * 1_048_577
    _error(client.post("/v1/index/reload", content=big, headers=admin), 413, "too_large")


def test_the_body_limit_counts_streamed_bytes():
    app = FastAPI()
    install_error_handlers(app)
    app.add_middleware(BodyLimitMiddleware, limit=100_000)

    @app.post("/echo")
    async def echo(request: Request) -> dict:
        return {"length": len(await request.body())}

    def chunks(count):  # no content-length header: sent chunked
        for _ in range(count):
            yield b"y" * 10_000

    client = TestClient(app)
    assert client.post("/echo", content=chunks(10)).json() == {"length": 100_000}
    _error(client.post("/echo", content=chunks(11)), 413, "too_large")


# -- search, index, health, metrics, preview ----------------------------------------------------------------
def test_page_search_lists_visible_pages_by_prefix(client, reader, as_viewer, facts):
    prefix = facts["secret"].split("/")[0] + "/"
    found = client.get("/v1/pages", params={"prefix": prefix, "limit": 100}, headers=reader).json()["pages"]
    ids = [match["page"] for match in found]
    assert ids and ids == sorted(ids) and all(page.startswith(prefix) for page in ids)
    assert not set(ids) & set(facts["restricted"])
    insider = client.get(
        "/v1/pages", params={"prefix": facts["secret"]}, headers=as_viewer(facts["insider"])
    ).json()["pages"]
    assert [match["page"] for match in insider][:1] == [facts["secret"]]
    assert client.get("/v1/pages", params={"prefix": "zzz-none"}, headers=reader).json() == {"pages": []}


def test_index_manifest_names_no_path(client, reader, demo):
    body = client.get("/v1/index", headers=reader).json()
    manifest = json.loads((demo["index"] / "manifest.json").read_text())
    assert body["fingerprint"] == manifest["fingerprint"] and body["counts"] == manifest["counts"]
    assert body["serving"] == manifest["serving"] and body["serving"]["vector_epsilon"] > 0
    assert body["store"] == "wiki.db" and str(demo["folder"]) not in json.dumps(body)
    assert body["index"] == demo["index"].resolve().name


def test_health_reports_the_live_index(client, demo):
    body = client.get("/v1/health").json()
    assert body["status"] == "ok" and body["index"] == demo["index"].resolve().name
    assert body["pages"] == json.loads((demo["index"] / "manifest.json").read_text())["counts"]["pages"]
    assert 0 <= body["age_seconds"] < 3600


def _sample(text: str, name: str, **labels) -> float:
    """One sample of the Prometheus text exposition format (its own parser, prometheus_client)."""
    from prometheus_client.parser import text_string_to_metric_families

    for family in text_string_to_metric_families(text):
        for sample in family.samples:
            if sample.name == name and all(sample.labels.get(k) == v for k, v in labels.items()):
                return sample.value
    return 0.0


def test_metrics_count_requests_by_route_template_and_status(client, reader, facts):
    route = "/v1/pages/{page:path}/related"
    before = client.get("/metrics").text
    for page in facts["public"][:3]:
        client.get(_url(page), headers=reader)
    client.get(_url("no-such-page"), headers=reader)
    after = client.get("/metrics").text
    ok = _sample(after, "rankrec_http_requests_total", route=route, status="200")
    assert ok - _sample(before, "rankrec_http_requests_total", route=route, status="200") == 3
    assert _sample(after, "rankrec_http_requests_total", route=route, status="404") >= 1
    timed = _sample(after, "rankrec_http_request_seconds_count", route=route)
    assert timed - _sample(before, "rankrec_http_request_seconds_count", route=route) == 4
    assert "no-such-page" not in after  # ids never become label values
    assert 0 <= _sample(after, "rankrec_index_age_seconds") < 3600


def test_preview_page_has_the_stable_element_ids(client):
    answer = client.get("/preview")
    assert answer.status_code == 200 and answer.headers["content-type"].startswith("text/html")
    for element in ('id="token"', 'id="page"', 'id="viewer"', 'id="show"', '<ol id="results"', 'id="error"'):
        assert element in answer.text
    assert "sessionStorage" in answer.text and "encodeURIComponent" in answer.text

"""Access control through HTTP, on random viewers, pages and options (hypothesis).

The ground truth is the store's own tables (page_groups, memberships), read with SQL, not the
index: a page with access groups may be shown only to a member of one of them; a list for no
viewer, or for a viewer the store does not know, holds only pages without groups. Viewers are
named as the front end names them, in signed viewer assertions. A reader token never gets another
user's personal list.
"""

from __future__ import annotations

import re
from urllib.parse import quote, unquote

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from api.app import create_app
from rankrec.build import build_index
from rankrec.store import Store
from rankrec.tokens import add_token, add_viewer_key
from tests.api.conftest import TestClient, settings_for, signed_headers
from tests.test_index import make_wiki

SETTINGS = settings(
    max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)


@pytest.fixture(scope="module")
def guarded(tmp_path_factory):
    """A random wiki with many restricted pages (seeded), its service and the store's access tables."""
    folder = tmp_path_factory.mktemp("access")
    wiki = make_wiki(folder / "wiki.db", pages=80, seed=11, groups=3, restricted=0.4, users=14, views=12)
    with Store(wiki, create=False) as store:
        build_index(store, folder / "index", hubs=4, k_related=30)
        sql = store.connection.execute
        page_groups: dict[str, set[str]] = {}
        for page, name in sql("SELECT page, name FROM page_groups JOIN pages ON id = page_id"):
            page_groups.setdefault(page, set()).add(name)
        user_groups: dict[str, set[str]] = {}
        for user, name in sql(
            "SELECT user, name FROM memberships JOIN users ON users.id = user_id WHERE kind = 'group'"
        ):
            user_groups.setdefault(user, set()).add(name)
        pages = [row[0] for row in sql("SELECT page FROM pages WHERE present = 1 ORDER BY page")]
        users = [row[0] for row in sql("SELECT user FROM users ORDER BY user")]
        teams = [row[0] for row in sql("SELECT DISTINCT name FROM memberships WHERE kind = 'team'")]
        reads: dict[str, set[str]] = {}
        for user, page in sql(
            "SELECT user, page FROM views JOIN users ON users.id = user_id JOIN pages ON pages.id = page_id"
        ):
            reads.setdefault(user, set()).add(page)
    tokens = folder / "tokens.json"
    paths = {"index": folder / "index", "tokens": tokens}
    token = add_token(tokens, "frontend", "reader")
    key = add_viewer_key(tokens, "frontend")
    headers = {"Authorization": f"Bearer {token}"}
    app = create_app(settings_for(paths))
    yield {
        "client": TestClient(app),
        "headers": headers,
        "as": lambda viewer: headers if viewer is None else signed_headers(token, key, "frontend", viewer),
        "page_groups": page_groups,
        "user_groups": user_groups,
        "pages": pages,
        "users": users,
        "teams": teams,
        "reads": reads,
    }
    app.state.service.close()


def _may_see(facts, viewer, page) -> bool:
    groups = facts["page_groups"].get(page)
    return not groups or bool(groups & facts["user_groups"].get(viewer, set()))


@st.composite
def _viewers(draw, facts):
    return draw(st.one_of(st.none(), st.sampled_from(facts["users"]), st.just("stranger-0")))


@SETTINGS
@given(data=st.data())
def test_related_lists_never_show_a_page_the_viewer_may_not_see(guarded, data):
    facts = guarded
    viewer = data.draw(_viewers(facts), label="viewer")
    page = data.draw(st.sampled_from(facts["pages"]), label="page")
    params = {
        "k": data.draw(st.integers(1, 40), label="k"),
        "exclude_linked": data.draw(st.booleans(), label="exclude_linked"),
    }
    if data.draw(st.booleans(), label="per_space?"):
        params["per_space"] = data.draw(st.integers(1, 5), label="per_space")
    answer = facts["client"].get(
        f"/v1/pages/{quote(page, safe='')}/related", params=params, headers=facts["as"](viewer)
    )
    if not _may_see(facts, viewer, page):
        assert answer.status_code == 404 and answer.json()["error"]["code"] == "unknown_page"
        return
    assert answer.status_code == 200
    shown = [item["page"] for item in answer.json()["items"]]
    assert all(_may_see(facts, viewer, item) for item in shown)
    assert page not in shown and len(shown) <= params["k"]


@SETTINGS
@given(data=st.data())
def test_landing_and_search_never_show_a_page_the_viewer_may_not_see(guarded, data):
    facts = guarded
    viewer = data.draw(_viewers(facts), label="viewer")
    team = data.draw(st.sampled_from(facts["teams"]), label="team")
    params = {"k": data.draw(st.integers(1, 60), label="k")}
    answer = facts["client"].get(f"/v1/teams/{team}/landing", params=params, headers=facts["as"](viewer))
    assert answer.status_code in (200, 409)
    if answer.status_code == 200:
        assert all(_may_see(facts, viewer, item["page"]) for item in answer.json()["items"])
    prefix = data.draw(st.sampled_from(["", "s0/", "s1/page-1", "s2/"]), label="prefix")
    found = (
        facts["client"]
        .get("/v1/pages", params={**params, "prefix": prefix, "limit": 100}, headers=facts["as"](viewer))
        .json()["pages"]
    )
    assert all(_may_see(facts, viewer, match["page"]) for match in found)


@SETTINGS
@given(data=st.data())
def test_a_reader_token_gets_only_the_viewers_own_list(guarded, data):
    facts = guarded
    user = data.draw(st.sampled_from(facts["users"]), label="user")
    viewer = data.draw(st.one_of(st.none(), st.sampled_from(facts["users"])), label="viewer")
    answer = facts["client"].get(
        f"/v1/users/{user}/recommendations", params={"k": 20}, headers=facts["as"](viewer)
    )
    if viewer != user:
        assert answer.status_code == 403 and user not in answer.text.replace(f"/v1/users/{user}", "")
        assert "items" not in answer.json()
        return
    assert answer.status_code == 200
    assert all(_may_see(facts, user, item["page"]) for item in answer.json()["items"])


def test_members_do_get_restricted_pages(guarded):
    """The filter is not vacuous: members of a group see its pages in some related lists."""
    facts = guarded
    insider = max(facts["user_groups"], key=lambda user: len(facts["user_groups"][user]))
    seen_restricted = set()
    for page in facts["pages"][:40]:
        if not _may_see(facts, insider, page):
            continue
        answer = facts["client"].get(
            f"/v1/pages/{quote(page, safe='')}/related", params={"k": 40}, headers=facts["as"](insider)
        )
        seen_restricted |= {item["page"] for item in answer.json()["items"]} & set(facts["page_groups"])
    assert seen_restricted


_TITLE = re.compile(r"\bTitle (\d+)\b")
_USER = re.compile(r"\buser\d\d\b")


@st.composite
def _requests(draw, facts):
    """A route of the service (related, landing, search, personal list of anyone) and its query."""
    kind = draw(st.sampled_from(["related", "landing", "search", "personal"]), label="route")
    if kind == "related":
        page = draw(st.sampled_from(facts["pages"]), label="page")
        return f"/v1/pages/{quote(page, safe='')}/related", {"k": 40, "exclude_linked": draw(st.booleans())}
    if kind == "landing":
        return f"/v1/teams/{draw(st.sampled_from(facts['teams']))}/landing", {"k": 60}
    if kind == "search":
        return "/v1/pages", {"prefix": draw(st.sampled_from(["", "s0/", "s1/", "s2/"])), "limit": 100}
    user = draw(st.one_of(st.sampled_from(facts["users"]), st.just("stranger-0")), label="user")
    return f"/v1/users/{user}/recommendations", {"k": 40, "include_read": draw(st.booleans())}


@SETTINGS
@given(data=st.data())
def test_no_answer_holds_a_hidden_page_or_another_users_reads(guarded, data):
    # OWASP API Security Top 10 2023, API1 and API3: whatever the route and the viewer, a body names
    # only pages the viewer may see (by id or title), names no other reader, and says "you read X"
    # only of a page X the viewer read
    facts = guarded
    viewer = data.draw(_viewers(facts), label="viewer")
    route, params = data.draw(_requests(facts), label="request")
    claimed = viewer is not None and data.draw(st.booleans(), label="viewer= instead of an assertion")
    if claimed:  # a reader token's word is not enough (before: taken as is)
        answer = facts["client"].get(route, params={**params, "viewer": viewer}, headers=facts["headers"])
        assert answer.status_code == 403 and answer.json()["error"]["code"] == "viewer_unsigned"
        viewer = None  # what it may see is what no viewer may see
    else:
        answer = facts["client"].get(route, params=params, headers=facts["as"](viewer))
    text = answer.text
    hidden = {page for page in facts["pages"] if not _may_see(facts, viewer, page)}
    asked = {unquote(route.split("/")[3])} if route.endswith("/related") else set()  # echoed as asked
    mentioned_ids = set(re.findall(r"s\d/page-\d+", text)) - asked
    mentioned_titles = {f"s{int(n) % 3}/page-{n}" for n in _TITLE.findall(text)}
    assert not (mentioned_ids | mentioned_titles) & hidden
    route_user = route.split("/")[3] if route.startswith("/v1/users/") else None
    assert set(_USER.findall(text.replace(f"/v1/users/{route_user}", ""))) <= {viewer, route_user} - {None}
    if route_user is not None and route_user != viewer:
        assert answer.status_code == 403 and "items" not in answer.json()
    elif not claimed:
        assert answer.status_code in (200, 404, 409)
    read = facts["reads"].get(viewer, set())
    for number in re.findall(r"you read Title (\d+)", text):
        assert f"s{int(number) % 3}/page-{number}" in read

"""Access control through HTTP, on random viewers, pages and options (hypothesis).

The ground truth is the store's own tables (page_groups, memberships), read with SQL, not the
index: a page with access groups may be shown only to a member of one of them; a list for no
viewer, or for a viewer the store does not know, holds only pages without groups. A reader token
never gets another user's personal list.
"""

from __future__ import annotations

from urllib.parse import quote

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from api.app import create_app
from rankrec.build import build_index
from rankrec.store import Store
from rankrec.tokens import add_token
from tests.api.conftest import TestClient, settings_for
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
    tokens = folder / "tokens.json"
    paths = {"index": folder / "index", "tokens": tokens}
    headers = {"Authorization": f"Bearer {add_token(tokens, 'frontend', 'reader')}"}
    app = create_app(settings_for(paths))
    yield {
        "client": TestClient(app),
        "headers": headers,
        "page_groups": page_groups,
        "user_groups": user_groups,
        "pages": pages,
        "users": users,
        "teams": teams,
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
    if viewer is not None:
        params["viewer"] = viewer
    answer = facts["client"].get(
        f"/v1/pages/{quote(page, safe='')}/related", params=params, headers=facts["headers"]
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
    if viewer is not None:
        params["viewer"] = viewer
    answer = facts["client"].get(f"/v1/teams/{team}/landing", params=params, headers=facts["headers"])
    assert answer.status_code in (200, 409)
    if answer.status_code == 200:
        assert all(_may_see(facts, viewer, item["page"]) for item in answer.json()["items"])
    prefix = data.draw(st.sampled_from(["", "s0/", "s1/page-1", "s2/"]), label="prefix")
    found = (
        facts["client"]
        .get("/v1/pages", params={**params, "prefix": prefix, "limit": 100}, headers=facts["headers"])
        .json()["pages"]
    )
    assert all(_may_see(facts, viewer, match["page"]) for match in found)


@SETTINGS
@given(data=st.data())
def test_a_reader_token_gets_only_the_viewers_own_list(guarded, data):
    facts = guarded
    user = data.draw(st.sampled_from(facts["users"]), label="user")
    viewer = data.draw(st.one_of(st.none(), st.sampled_from(facts["users"])), label="viewer")
    params = {"k": 20} if viewer is None else {"k": 20, "viewer": viewer}
    answer = facts["client"].get(f"/v1/users/{user}/recommendations", params=params, headers=facts["headers"])
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
            f"/v1/pages/{quote(page, safe='')}/related",
            params={"viewer": insider, "k": 40},
            headers=facts["headers"],
        )
        seen_restricted |= {item["page"] for item in answer.json()["items"]} & set(facts["page_groups"])
    assert seen_restricted

"""The preview page in a real browser: headless Chromium (Debian's chromium and chromium-driver).

The service runs with uvicorn in a thread on a free loopback port; selenium drives Chromium to
fill in the token and a page, click "Show" and read the list. The list shown must be the one the
library gives for the same page and viewer (the service adds nothing and drops nothing).
"""

from __future__ import annotations

from pathlib import Path

import pytest

from rankrec.index import load_index
from rankrec.recommend import reader_from_store, related
from rankrec.store import Store
from tests._serving import serve_in_thread

from .conftest import settings_for

pytestmark = pytest.mark.slow

CHROMIUM = Path("/usr/bin/chromium")
CHROMEDRIVER = Path("/usr/bin/chromedriver")
FLAGS = (
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--disable-dev-shm-usage",
)


@pytest.fixture(scope="module")
def served(demo):
    """The demo service under uvicorn in a thread; yields its base URL."""
    from api.app import create_app

    with serve_in_thread(create_app(settings_for(demo))) as base:
        yield base


@pytest.fixture(scope="module")
def browser(tmp_path_factory):
    missing = [str(path) for path in (CHROMIUM, CHROMEDRIVER) if not path.exists()]
    if missing:
        pytest.skip(
            f"the browser test needs Debian's chromium and chromium-driver; missing {', '.join(missing)} "
            "(apt-get install -y --no-install-recommends chromium chromium-driver)"
        )
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    options = webdriver.ChromeOptions()
    options.binary_location = str(CHROMIUM)
    for flag in FLAGS:
        options.add_argument(flag)
    options.add_argument(f"--user-data-dir={tmp_path_factory.mktemp('chromium-profile')}")
    driver = webdriver.Chrome(options=options, service=Service(executable_path=str(CHROMEDRIVER)))
    driver.set_page_load_timeout(30)
    yield driver
    driver.quit()


@pytest.fixture(scope="module")
def choices(demo):
    """A public page whose related list differs for a reader in an access group (first such pair)."""
    index = load_index(demo["index"])
    with Store(demo["wiki"], create=False) as store:
        pages = [
            row[0]
            for row in store.connection.execute(
                "SELECT page FROM pages WHERE present = 1 AND archived = 0 AND NOT EXISTS "
                "(SELECT 1 FROM page_groups WHERE page_groups.page_id = pages.id) ORDER BY page"
            )
        ]
        viewers = [
            row[0]
            for row in store.connection.execute(
                "SELECT DISTINCT user FROM memberships JOIN users ON users.id = user_id WHERE kind = 'group' "
                "AND EXISTS (SELECT 1 FROM views WHERE views.user_id = users.id) ORDER BY user"
            )
        ]
        for viewer in viewers:
            reader = reader_from_store(store, index, viewer)
            for page in pages:
                public = [item.page for item in related(index, page, k=10).items]
                personal = [item.page for item in related(index, page, reader=reader, k=10).items]
                if personal != public:
                    restricted = {index.pages[n] for n in range(index.size) if not index.public[n]}
                    return {
                        "page": page,
                        "viewer": viewer,
                        "public": public,
                        "personal": personal,
                        "restricted": restricted,
                    }
    pytest.fail("the demo wiki has no page whose related list depends on the viewer")


def _show(browser, base: str, token: str, page: str, viewer: str = "") -> list[str]:
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support.ui import WebDriverWait

    browser.get(base + "/preview")
    for element_id, value in (("token", token), ("page", page), ("viewer", viewer)):
        field = browser.find_element(By.ID, element_id)
        field.clear()
        field.send_keys(value)
    browser.find_element(By.ID, "show").click()
    WebDriverWait(browser, 20).until(
        lambda driver: (
            driver.find_elements(By.CSS_SELECTOR, "#results li")
            or driver.find_element(By.ID, "error").text.strip()
        )
    )
    return [item.get_attribute("data-page") for item in browser.find_elements(By.CSS_SELECTOR, "#results li")]


def test_preview_shows_the_related_list_for_a_page(browser, served, demo, choices):
    from selenium.webdriver.common.by import By

    shown = _show(browser, served, demo["reader"], choices["page"])
    assert shown == choices["public"] and len(shown) > 0
    assert not set(shown) & choices["restricted"]  # no viewer: only pages visible to everyone
    assert browser.find_element(By.ID, "error").text == ""
    reasons = browser.find_elements(By.CSS_SELECTOR, "#results li .reason")
    assert len(reasons) == len(shown) and all(reason.text.strip() for reason in reasons)  # each says why


def test_preview_filters_for_the_chosen_viewer(browser, served, demo, choices):
    # naming a viewer by hand is for admin tokens (operators); a reader token is refused (api.viewers)
    shown = _show(browser, served, demo["admin"], choices["page"], choices["viewer"])
    assert shown == choices["personal"]
    assert set(shown) & choices["restricted"]  # the viewer's group pages appear only for that viewer
    from selenium.webdriver.common.by import By

    assert _show(browser, served, demo["reader"], choices["page"], choices["viewer"]) == []
    assert "viewer_unsigned" in browser.find_element(By.ID, "error").text


def test_preview_keeps_the_token_for_the_tab_only(browser, served, demo, choices):
    from selenium.webdriver.common.by import By

    _show(browser, served, demo["reader"], choices["page"])
    browser.get(served + "/preview")  # the same tab: sessionStorage survives a reload
    assert browser.find_element(By.ID, "token").get_attribute("value") == demo["reader"]
    stored = browser.execute_script("return window.localStorage.length")
    assert stored == 0  # never written to storage that outlives the tab


def test_preview_reports_a_wrong_token(browser, served, choices):
    from selenium.webdriver.common.by import By

    assert _show(browser, served, "not-a-token", choices["page"]) == []
    assert "unauthorised" in browser.find_element(By.ID, "error").text

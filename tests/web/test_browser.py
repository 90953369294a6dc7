"""The web page in a real headless browser (Debian's chromium, driven through chromedriver),
rendered from the running service on the shipped scenario: the overview, a space page and
an advisory page with a screenshot of each, the phone layout, and an acknowledgement given
through the page that arrives as an MQTT event with the user's name.

Set THERMOWARDEN_SCREENSHOTS=DIR to keep the screenshots (the README's comes from here).
"""

from __future__ import annotations

import io
import os
import pathlib
import re

import pytest

from tests.shell.conftest import wait_for
from tests.web.conftest import HAVE_BROWSER, USERS, WebSite

pytestmark = [
    pytest.mark.broker,
    pytest.mark.skipif(not HAVE_BROWSER, reason="Debian's chromium and chromium-driver are "
                       "not installed (apt-get install chromium chromium-driver)"),
]


def screenshot(driver, name: str, width: int = 1200) -> bytes:
    """A full-page PNG, checked to be a real picture of a page (not blank)."""
    from PIL import Image

    height = int(driver.execute_script("return document.documentElement.scrollHeight"))
    driver.set_window_size(width, min(max(height, 600), 6000))
    png = driver.get_screenshot_as_png()
    img = Image.open(io.BytesIO(png)).convert("RGB")
    assert img.width >= width * 0.9
    colours = img.getcolors(maxcolors=1 << 20)
    assert colours is not None and len(colours) > 50, "the page looks blank"
    keep = os.environ.get("THERMOWARDEN_SCREENSHOTS")
    if keep:
        pathlib.Path(keep).mkdir(parents=True, exist_ok=True)
        (pathlib.Path(keep) / f"{name}.png").write_bytes(png)
    return png


def no_sideways_scroll(driver) -> bool:
    return bool(driver.execute_script(
        "return document.documentElement.scrollWidth <= window.innerWidth + 1"))


def test_overview(browser, web_site: WebSite):
    from selenium.webdriver.common.by import By

    browser.get(web_site.base + "/")
    assert "Larkfield Works" in browser.title or "Overview" in browser.title
    cards = browser.find_elements(By.CSS_SELECTOR, "section.card")
    assert {c.get_attribute("data-space") for c in cards} == {
        s["id"] for s in web_site.get("/api/spaces")[1]["spaces"]} >= {
        "office-west", "bakery-floor", "loading-yard", "studio-north"}
    yard = browser.find_element(By.CSS_SELECTOR, 'section.card[data-space="loading-yard"]')
    assert "WBGT" in yard.text and "UTCI" in yard.text and "°C" in yard.text
    live = browser.find_elements(By.CSS_SELECTOR, "ul.adv li")
    assert len(live) == len(web_site.live()) > 0
    assert "Advisory only" in browser.page_source
    # the page's stylesheet applies under its Content-Security-Policy (allowed by its hash)
    assert browser.execute_script(
        "return getComputedStyle(document.querySelector('header')).backgroundColor"
    ) == "rgb(35, 52, 64)"
    screenshot(browser, "overview")
    browser.set_window_size(390, 844)  # a phone
    browser.get(web_site.base + "/")
    assert no_sideways_scroll(browser)
    screenshot(browser, "overview-phone", width=390)
    browser.set_window_size(1200, 900)


def test_space_page(browser, web_site: WebSite):
    from selenium.webdriver.common.by import By

    browser.get(web_site.base + "/")
    browser.find_element(By.LINK_TEXT, "Loading yard (outdoor)").click()
    wait_for(lambda: "/spaces/loading-yard" in browser.current_url, 20, "the space page")
    titles = [f.text for f in browser.find_elements(By.CSS_SELECTOR, "figcaption")]
    assert any("Operative temperature" in t for t in titles)
    assert any("WBGT" in t for t in titles)
    assert any("humidity" in t.lower() for t in titles)
    assert any("dew point" in t for t in titles)
    assert any("Heat index and UTCI" in t for t in titles)
    # every chart drew lines from the stored samples
    for fig in browser.find_elements(By.CSS_SELECTOR, "figure.chart"):
        assert fig.find_elements(By.CSS_SELECTOR, "polyline"), fig.text
    rows = browser.find_elements(By.CSS_SELECTOR, "table tbody tr")
    text = "\n".join(r.text for r in rows)
    # each point's freshness and the age of its last reading ("12 s ago", "2 min ago": which
    # depends on how long ago the recorded day's last reading was sent)
    assert "Natural wet-bulb" in text and "fresh" in text
    assert re.search(r"\d+(\.\d)? (s|min|h) ago", text), text
    screenshot(browser, "space")
    browser.set_window_size(390, 844)
    browser.get(web_site.base + "/spaces/loading-yard")
    assert no_sideways_scroll(browser)
    browser.set_window_size(1200, 900)


def test_advisory_page_and_acknowledge_through_it(browser, web_site: WebSite):
    from selenium.webdriver.common.by import By

    mine = [a for a in web_site.live()
            if a["audience"] in USERS["ana"][1] and a["state"] == "active"]
    assert mine, "the recorded day ends with live safety or facilities advisories"
    target = next((a for a in mine if a["rule"] == "heat_stress.wbgt"), mine[0])
    browser.get(f"{web_site.base}/advisories/{target['id']}")
    body = browser.find_element(By.TAG_NAME, "main").text
    assert target["title"] in body and "What to do" in body and "History" in body
    assert "occupational hygienist" in body  # the cautions
    screenshot(browser, "advisory")
    # not signed in: no way to act, only a way to sign in
    assert not browser.find_elements(By.ID, "acknowledge")
    browser.find_element(By.CSS_SELECTOR, "main a[href^='/login']").click()
    browser.find_element(By.NAME, "name").send_keys("ana")
    browser.find_element(By.NAME, "password").send_keys(USERS["ana"][0])
    browser.find_element(By.ID, "sign-in").click()
    wait_for(lambda: browser.find_elements(By.ID, "acknowledge"), 20,
             "the acknowledge button after signing in")
    # the sign-out form is styled by class, not a style attribute the policy would block
    assert browser.execute_script(
        "return getComputedStyle(document.querySelector('form.inline')).display") == "inline"
    browser.find_element(By.NAME, "note").send_keys("water and shade arranged")
    browser.find_element(By.ID, "acknowledge").click()
    wait_for(lambda: "Acknowledged by ana" in browser.page_source, 20, "the confirmation")

    def acknowledged_event():
        for e in web_site.watcher.events(web_site.prefix):
            a = e.get("advisory") or {}
            if e["event"] == "acknowledged" and a.get("id") == target["id"]:
                return e
        return None

    wait_for(acknowledged_event, 30, "the acknowledged event on MQTT")
    event = acknowledged_event()
    assert event["advisory"]["acknowledged"]["by"] == "ana"
    assert event["advisory"]["acknowledged"]["note"] == "water and shade arranged"
    assert event["advisory"]["history"][-1]["by"] == "ana"
    status, now = web_site.get(f"/api/advisories/{target['id']}")
    assert now["advisory"]["state"] == "acknowledged"
    assert "acknowledged" in browser.find_element(By.TAG_NAME, "main").text

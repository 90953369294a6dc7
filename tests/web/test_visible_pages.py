"""What people see, read through a real browser (Debian's chromium and chromedriver) from
the running service on the shipped site and its recorded day: an office with fans, blinds
and a plane radiant sensor on its window side, a hot-work bakery, an outdoor hot-work yard
with a live heat-stress alert, an outdoor garden that is not hot work, and an advisory
acknowledged here through the API.

Every page's visible text passes the rule of ``tests/web/visible_text.py`` (words, not field
names; a unit beside every number), and what it says of each thing is true: equipment
states as states, sensors as configured, one story of who acknowledged what and what the
sensors show, WBGT only where people work in the heat, nothing cut off on a phone.
"""

from __future__ import annotations

from typing import Any

import pytest

from tests.web.conftest import HAVE_BROWSER, WebSite
from tests.web.visible_text import problems

pytestmark = [
    pytest.mark.broker,
    pytest.mark.skipif(not HAVE_BROWSER, reason="Debian's chromium and chromium-driver are "
                       "not installed (apt-get install chromium chromium-driver)"),
]
PHONE = (390, 844)


def visible(browser) -> str:
    from selenium.webdriver.common.by import By

    return str(browser.find_element(By.TAG_NAME, "body").text)


@pytest.fixture(scope="module")
def acknowledged(web_site: WebSite) -> dict[str, Any]:
    """The staff garden's outdoor-heat advisory, acknowledged by ana with a note (a rule
    whose advice no sensor can see carried out: the page must not claim it was not)."""
    target = next(a for a in web_site.live() if a["space"]["id"] == "staff-garden")
    if target["state"] == "active":
        token = web_site.token("ana")
        status, out = web_site.send("POST", f"/api/advisories/{target['id']}/acknowledge",
                                    {"note": "shade and water set out"},
                                    {"Authorization": f"Bearer {token}"})
        assert status == 200, out
    status, body = web_site.get(f"/api/advisories/{target['id']}")
    assert body["advisory"]["state"] == "acknowledged"
    return dict(body["advisory"])


def cleared_links(browser, web_site: WebSite, space: str) -> list[str]:
    from selenium.webdriver.common.by import By

    browser.get(f"{web_site.base}/spaces/{space}")
    return [str(a.get_attribute("href")).removeprefix(web_site.base)
            for a in browser.find_elements(By.CSS_SELECTOR, "details ul.adv a")]


def test_every_page_reads_as_words_with_units(browser, web_site: WebSite, acknowledged):
    spaces = [s["id"] for s in web_site.get("/api/spaces")[1]["spaces"]]
    urls = ["/", *(f"/spaces/{s}" for s in spaces),
            *(f"/advisories/{a['id']}" for a in web_site.live())]
    # the advice of the day that cleared: the office's blinds and fans among them
    cleared = cleared_links(browser, web_site, "office-west")
    assert cleared, "the office's cleared advisories are listed"
    urls += cleared
    found = []
    for url in urls:
        browser.get(web_site.base + url)
        found += [f"{url}: {p}" for p in problems(visible(browser))]
    assert not found, "\n".join(found)


def test_equipment_states_and_sensors_read_as_configured(browser, web_site: WebSite):
    from selenium.webdriver.common.by import By

    c = web_site.get("/api/spaces/office-west/conditions")[1]
    values = {p["quantity"]: p["value"] for p in c["points"]}
    browser.get(f"{web_site.base}/spaces/office-west")
    rows = {r.find_element(By.CSS_SELECTOR, "td").text: r.text for r in
            browser.find_elements(By.XPATH, "//h2[.='Points']/following::table[1]//tbody/tr")}
    fans = "Fans on" if values["fan_state"] >= 0.5 else "Fans off"
    shading = ("Shading lowered" if values["shading_position"] >= 99.5 else
               "Shading raised" if values["shading_position"] <= 0.5 else "% lowered")
    text = "\n".join(rows.values())
    assert fans in text and shading in text, text
    assert "Occupancy occupied" in text or "Occupancy vacant" in text, text
    # deploy/example-site.yaml configures the plane sensors as side: window and side: room
    assert "Plane radiant temperature (window side)" in rows, rows
    assert "Plane radiant temperature (room side)" in rows, rows
    assert "front" not in text and "back" not in text


def test_an_acknowledged_advisory_tells_one_story(browser, web_site: WebSite, acknowledged):
    from selenium.webdriver.common.by import By

    browser.get(f"{web_site.base}/advisories/{acknowledged['id']}")
    text = visible(browser)
    assert browser.find_element(By.CSS_SELECTOR, "main .badge.state").text == "acknowledged"
    assert "Acknowledged by ana" in text and "shade and water set out" in text
    assert "Not acted on" not in text and "not acted on" not in text
    # the outdoor-heat rule names no sensor for its advice: the page claims nothing of it
    stands = text.split("Where it stands", 1)[1]
    assert stands.index("Acknowledged by") < stands.index("cannot show"), stands[:400]
    assert "acknowledged" in text.split("History", 1)[1]


def test_a_fans_advisory_acted_on_says_so(browser, web_site: WebSite):
    """The office's fans advice of the recorded day: the sensors showed the fans on, and its
    page says it was acted on (and whether the condition cleared), never just "active"."""
    from selenium.webdriver.common.by import By

    fans = None
    for link in cleared_links(browser, web_site, "office-west"):
        a = web_site.get("/api/advisories/" + link.rsplit("/", 1)[1])[1]["advisory"]
        if a["rule"] == "fans.switch_on_fans" and a.get("acted_on"):
            fans = a
    assert fans is not None, "the recorded day has the office's fans switched on as advised"
    browser.get(f"{web_site.base}/advisories/{fans['id']}")
    stands = browser.find_element(By.TAG_NAME, "main").text.split("Where it stands", 1)[1]
    assert "Acted on at" in stands and "min after it was raised" in stands, stands[:300]


def test_the_overview_shows_wbgt_only_where_people_work_in_the_heat(browser,
                                                                      web_site: WebSite):
    from selenium.webdriver.common.by import By

    browser.get(web_site.base + "/")
    hot = {s["id"]: s["hot_work"] for s in web_site.get("/api/spaces")[1]["spaces"]}
    assert set(hot.values()) == {True, False}
    for card in browser.find_elements(By.CSS_SELECTOR, "section.card"):
        space = card.get_attribute("data-space")
        if hot[space]:
            assert "WBGT reference" in card.text, card.text
        else:
            assert "WBGT" not in card.text, card.text


@pytest.mark.parametrize("path", ["/spaces/office-west", "/spaces/loading-yard", "live"])
def test_nothing_is_cut_off_on_a_phone(browser, web_site: WebSite, path):
    if path == "live":
        path = "/advisories/" + next(a["id"] for a in web_site.live()
                                     if a["rule"] == "heat_stress.wbgt")
    browser.set_window_size(*PHONE)
    try:
        browser.get(web_site.base + path)
        # every table cell (the method column too) ends inside the screen, and no table
        # scrolls sideways within its box
        cut = browser.execute_script(
            "const w = document.documentElement.clientWidth;"
            "return [...document.querySelectorAll('main td')]"
            ".filter(td => td.getBoundingClientRect().right > w + 1)"
            ".map(td => td.innerText.slice(0, 60));")
        assert cut == [], cut
        wide = browser.execute_script(
            "return [...document.querySelectorAll('.scroll')]"
            ".filter(d => d.scrollWidth > d.clientWidth + 1).length")
        assert wide == 0
        assert browser.execute_script(
            "return document.documentElement.scrollWidth <= window.innerWidth + 1")
    finally:
        browser.set_window_size(1200, 900)


@pytest.mark.parametrize(("space", "shown", "left_out"), [
    # an office: comfort, no WBGT anywhere (ISO 7243 is for people working in the heat)
    ("office-west", ["PMV, ISO 7730", "Operative temperature and comfort band"],
     ["WBGT", "UTCI", "applies to indoor spaces"]),
    # a garden where people sit outdoors: outdoor heat, neither the indoor comfort indices
    # ("PMV - applies to indoor spaces") nor the WBGT and its references
    ("staff-garden", ["UTCI, outdoor felt temperature", "Heat index (NWS)"],
     ["WBGT", "PMV", "Draught rate", "EN 16798-1 adaptive", "applies to indoor spaces",
      "no reading"]),
    # a hot-work yard outdoors: the WBGT with its workers' reference, and outdoor heat
    ("loading-yard", ["WBGT reference (not acclimatised)", "WBGT and its reference values",
                      "UTCI, outdoor felt temperature"], ["PMV", "applies to indoor spaces"]),
])
def test_a_space_page_shows_what_applies_to_its_kind_of_place(browser, web_site: WebSite,
                                                              space, shown, left_out):
    browser.get(f"{web_site.base}/spaces/{space}")
    text = visible(browser)
    for words in shown:
        assert words in text, (space, words)
    for words in left_out:
        assert words not in text, (space, words, text[:3000])

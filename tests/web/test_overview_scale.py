"""The overview of a site written as a tree, served by the service's web server from what a
real engine published: the roll-up by building and floor counts the live advisories, the
search and the filters narrow the spaces, the pages split them, and a phone shows it
without sideways scrolling (the search also in a real browser)."""

from __future__ import annotations

import re
import socket
import textwrap
import urllib.request
from collections import Counter
from collections.abc import Iterator
from dataclasses import dataclass

import pytest

from tests.shell.conftest import wait_for
from thermowarden.config import load_site
from thermowarden.engine import Engine
from thermowarden.rules import load_rule_packs
from thermowarden.shell.inbox import Inbox
from thermowarden.shell.web import LiveView, build_web
from thermowarden.shell.web.overview_page import PAGE_SIZE
from thermowarden.site_model import build_site_model

PACK = """\
pack: warm
description: rooms warmer than their limits
rules:
  - id: warm
    title: Warm
    audience: facilities
    priority: medium
    needs: [air_temperature]
    condition: air_temperature > 27
    clear: air_temperature < 26
    messages: {title: "{space_name} is warm", advice: "Cool it.", rationale: "Above 27."}
  - id: hot
    title: Hot
    audience: safety
    priority: high
    needs: [air_temperature]
    condition: air_temperature > 30
    clear: air_temperature < 29
    messages: {title: "{space_name} is hot", advice: "Check on people.", rationale: "Above 30."}
"""
BUILDINGS, FLOORS, ROOMS = 3, 2, 100


def site_text(port: int) -> str:
    lines = [f"""\
        site: {{id: big, name: Big Campus, timezone: UTC}}
        output: {{prefix: tw/big}}
        rule_dirs: [packs]
        web: {{enabled: true, port: {port}}}
        defaults:
          occupancy: {{always: true}}
          rule_packs: [warm]
          people: {{met: 1.2, clo: 0.6}}
        templates:
          - {{topic: "big/{{building}}/{{floor}}/{{space}}/ta", quantity: air_temperature}}
        buildings:
        """]
    body = []
    for b in range(1, BUILDINGS + 1):
        body += [f"  - id: b{b}", f"    name: Building {b}", "    floors:"]
        for f in range(1, FLOORS + 1):
            body += [f"      - id: f{f}", f"        name: Floor {f}", "        spaces:"]
            body += [f'          - {{id: b{b}-{f}{r:02d}, topic_name: "{f}{r:02d}", '
                     f"name: Building {b} room {f}{r:02d}}}" for r in range(ROOMS)]
    return textwrap.dedent(lines[0]) + "\n".join(body) + "\n"


@dataclass
class Big:
    base: str
    view: LiveView


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@pytest.fixture(scope="module")
def big(tmp_path_factory) -> Iterator[Big]:
    tmp = tmp_path_factory.mktemp("big")
    (tmp / "packs").mkdir()
    (tmp / "packs" / "warm.yaml").write_text(PACK)
    port = free_port()
    site = tmp / "site.yaml"
    site.write_text(site_text(port))
    config = load_site(site, {})
    packs = load_rule_packs(["warm"], config.rule_dirs, base=site)
    engine = Engine(config, build_site_model(config), packs)
    now = 1_780_000_000.0
    items = []
    for k, s in enumerate(config.spaces):
        value = b"31" if k % 23 == 0 else b"28" if k % 7 == 0 else b"22"
        items.append((f"big/{s.building}/{s.floor}/{s.topic_word}/ta", value, now, False))
    engine.messages(items)
    effects = engine.tick(now + 1)
    view, server, _ = build_web(config, site, packs, Inbox(16), tmp / "store.sqlite",
                                lambda: now + 1)
    view.observe(effects)
    server.start()
    try:
        yield Big(f"http://127.0.0.1:{port}", view)
    finally:
        server.stop()


def get(big: Big, path: str) -> str:
    with urllib.request.urlopen(big.base + path, timeout=20) as r:
        assert r.status == 200
        return r.read().decode()


def cards(html: str) -> list[str]:
    return re.findall(r'<section class="card" data-space="([^"]+)"', html)


def rollup_rows(html: str) -> dict[str, list[int]]:
    """where -> [spaces, urgent, high, medium, low] as the page shows them."""
    out = {}
    for where, row in re.findall(r'<tr class="(?:top|sub)" data-where="([^"]*)">(.*?)</tr>',
                                 html):
        cells = re.findall(r'<td class="num"[^>]*>(.*?)</td>', row)
        out[where] = [int(re.sub(r"<[^>]+>", "", c)) for c in cells]
    return out


def test_rollup_counts_the_live_advisories(big):
    live = big.view.live()
    assert live, "the engine raised advisories"
    html = get(big, "/")
    rows = rollup_rows(html)
    expected: dict[str, Counter[str]] = {}
    for a in live:
        sid = a["space"]["id"]
        b, f = sid.split("-")[0], "f" + sid.split("-")[1][0]
        for key in (b, f"{b}/{f}"):
            expected.setdefault(key, Counter())[a["priority"]] += 1
    assert set(rows) == {f"b{b}" for b in range(1, 4)} | {
        f"b{b}/f{f}" for b in range(1, 4) for f in (1, 2)}
    for where, (n, urgent, high, medium, low) in rows.items():
        assert n == (ROOMS * FLOORS if "/" not in where else ROOMS)
        c = expected.get(where, Counter())
        assert (urgent, high, medium, low) == (c["urgent"], c["high"], c["medium"], c["low"])
    # a page of a site this size is small: the first page of spaces and the counts
    assert len(cards(html)) == PAGE_SIZE and len(html.encode()) < 200_000
    assert f"({BUILDINGS * FLOORS * ROOMS}, 1-{PAGE_SIZE} shown)" in html


def test_search_filters_and_pages(big):
    # words of the name: room 107 is on floor 1 of every building
    assert sorted(cards(get(big, "/?q=room+107"))) == ["b1-107", "b2-107", "b3-107"]
    assert cards(get(big, "/?q=Building+2+room+107")) == ["b2-107"]
    assert cards(get(big, "/?q=nothing-like-this")) == []
    # by priority and audience: the spaces with such a live advisory, and only those
    high = {a["space"]["id"] for a in big.view.live() if a["priority"] == "high"}
    html = get(big, "/?priority=high")
    assert set(cards(html)) == high
    assert all(a in html for a in ("is hot",)) and "is warm" not in html
    facilities = {a["space"]["id"] for a in big.view.live() if a["audience"] == "facilities"}
    seen: list[str] = []
    for page in range(1, 10):
        seen += cards(get(big, f"/?audience=facilities&page={page}"))
    assert sorted(set(seen)) == sorted(facilities)
    assert get(big, "/?state=shelved").count('class="card"') == 0
    # one floor, page by page: every room once; a page past the end shows the last
    floor = [cards(get(big, f"/?where=b2/f1&page={p}")) for p in (1, 2)]
    assert len(floor[0]) == len(floor[1]) == PAGE_SIZE
    assert sorted(floor[0] + floor[1]) == sorted(f"b2-1{r:02d}" for r in range(ROOMS))
    assert cards(get(big, "/?where=b2/f1&page=99")) == floor[1]
    # a building: both its floors
    assert all(c.startswith("b3-") for c in cards(get(big, "/?where=b3&page=4")))
    # unknown filter values are ignored, not errors
    assert len(cards(get(big, "/?priority=extreme&page=abc"))) == PAGE_SIZE


from tests.web.conftest import HAVE_BROWSER  # noqa: E402  (the browser fixture is there too)
from tests.web.test_browser import no_sideways_scroll  # noqa: E402


@pytest.mark.skipif(not HAVE_BROWSER, reason="Debian's chromium and chromium-driver are "
                    "not installed (apt-get install chromium chromium-driver)")
def test_search_in_a_browser(browser, big):
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support.ui import Select

    browser.set_window_size(1200, 900)
    browser.get(big.base + "/")
    box = browser.find_element(By.ID, "q")
    box.send_keys("room 107")
    browser.find_element(By.ID, "search-go").click()
    wait_for(lambda: "q=room+107" in browser.current_url, 20, "the search")
    shown = [c.get_attribute("data-space")
             for c in browser.find_elements(By.CSS_SELECTOR, "section.card")]
    assert sorted(shown) == ["b1-107", "b2-107", "b3-107"]
    # narrow to one place and a priority with the filters
    browser.find_element(By.ID, "q").clear()
    Select(browser.find_element(By.ID, "filter-where")).select_by_value("b1/f1")
    Select(browser.find_element(By.ID, "filter-priority")).select_by_value("high")
    browser.find_element(By.ID, "search-go").click()
    wait_for(lambda: "priority=high" in browser.current_url, 20, "the filtered page")
    high = sorted(a["space"]["id"] for a in big.view.live()
                  if a["priority"] == "high" and a["space"]["id"].startswith("b1-1"))
    shown = sorted(c.get_attribute("data-space")
                   for c in browser.find_elements(By.CSS_SELECTOR, "section.card"))
    assert shown == high and shown
    # the roll-up's link to a floor, then the next page
    browser.get(big.base + "/")
    browser.find_element(By.CSS_SELECTOR, 'tr[data-where="b2/f2"] a').click()
    wait_for(lambda: "where=b2" in browser.current_url, 20, "the floor")
    browser.find_element(By.CSS_SELECTOR, "nav.pager a[rel=next]").click()
    wait_for(lambda: "page=2" in browser.current_url, 20, "the second page")
    assert "51-100 shown" in browser.find_element(By.ID, "space-count").text
    # a phone: the roll-up table and the cards fit without scrolling sideways
    browser.set_window_size(390, 844)
    browser.get(big.base + "/")
    assert no_sideways_scroll(browser)
    # the table's head is folded away and each cell shows its label
    labels = browser.execute_script(
        "return [...document.querySelectorAll('tr[data-where=\"b1/f1\"] td')]"
        ".map(td => getComputedStyle(td, '::before').content)")
    assert labels[:2] == ['"Where"', '"Spaces"'], labels
    assert not browser.find_element(By.CSS_SELECTOR, "table.rollup thead").is_displayed()
    browser.set_window_size(1200, 900)

"""The report's HTML read as a person reads it: opened in a real headless browser (Debian's
chromium through chromedriver), its visible text holds no field name (no snake_case word)
and a unit beside every number (the rule of :mod:`tests.web.visible_text`); on a phone's
width nothing but the wide tables scrolls sideways.

Set THERMOWARDEN_SCREENSHOTS=DIR to keep the screenshots (the README's comes from here)."""

from __future__ import annotations

import os
import pathlib
import subprocess
import sys

import pytest

from tests.conftest import COMMAND_LIMIT_S, REPO
from tests.web.conftest import HAVE_BROWSER
from tests.web.visible_text import problems

pytestmark = pytest.mark.skipif(not HAVE_BROWSER, reason="Debian's chromium and "
                                "chromium-driver are not installed (apt-get install "
                                "chromium chromium-driver)")

SITE = REPO / "deploy" / "example-site.yaml"
FEED = REPO / "simulated_feeds" / "recorded" / "larkfield-day.jsonl.gz"


@pytest.fixture(scope="module")
def report_page(tmp_path_factory) -> pathlib.Path:
    """The shipped day's report, written by ``thermowarden report`` as a person runs it."""
    folder = tmp_path_factory.mktemp("report")
    r = subprocess.run([sys.executable, "-m", "thermowarden.cli", "report", "--config",
                        str(SITE), "--feed", str(FEED)], capture_output=True, text=True,
                       cwd=folder, timeout=COMMAND_LIMIT_S)
    assert r.returncode == 0, r.stderr
    return folder / "larkfield-report.html"


def keep(driver, name: str, width: int) -> None:
    """A full-page screenshot, kept where THERMOWARDEN_SCREENSHOTS says."""
    folder = os.environ.get("THERMOWARDEN_SCREENSHOTS")
    height = int(driver.execute_script("return document.documentElement.scrollHeight"))
    driver.set_window_size(width, min(max(height, 600), 8000))
    png = driver.get_screenshot_as_png()
    assert len(png) > 20_000  # a picture of a page, not a blank
    if folder:
        pathlib.Path(folder).mkdir(parents=True, exist_ok=True)
        (pathlib.Path(folder) / f"{name}.png").write_bytes(png)


def test_report_text_is_words_with_units(browser, report_page):
    from selenium.webdriver.common.by import By

    browser.set_window_size(1100, 900)
    browser.get(report_page.as_uri())
    text = browser.find_element(By.TAG_NAME, "body").text
    assert "Bakery production floor (ovens)" in text and "WBGT" in text
    assert problems(text) == []
    keep(browser, "report", 1100)


def test_report_on_a_phone(browser, report_page):
    """At a phone's width the page itself does not scroll sideways (a wide table scrolls in
    its own box) and the text is the same words with units."""
    from selenium.webdriver.common.by import By

    browser.set_window_size(390, 844)
    browser.get(report_page.as_uri())
    sideways = browser.execute_script(
        "return document.documentElement.scrollWidth - document.documentElement.clientWidth")
    assert sideways <= 1
    assert problems(browser.find_element(By.TAG_NAME, "body").text) == []
    keep(browser, "report-phone", 390)

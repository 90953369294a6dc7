"""Screenshots of the report for the README, taken from the current code.

Writes the shipped day's report with ``thermowarden report --feed`` (the invented Larkfield
Works' recorded summer day) and saves PNGs of parts of it, taken with Debian's headless
chromium (through chromedriver and selenium, as ``make.py`` takes the web page's), next to
this file:

- at laptop width (1280 CSS pixels): ``report-summary-laptop.png`` (the heading, the
  cautions and the summary table), ``report-ahead-laptop.png`` (advice ahead of time,
  measured) and ``report-bakery-laptop.png`` (the bakery's section: operative temperature,
  the 60-minute WBGT against its references with the spot value apart, the timeline of
  advisories level by level, and the advisories' table);
- at phone width (390 CSS pixels, device scale 2): ``report-top-phone.png`` (the first
  screen) and ``report-bakery-phone.png`` (the bakery's section).

Run it with the project's environment from the repository's root::

    .venv/bin/python docs/screenshots/report.py

Needs ``apt-get install chromium chromium-driver`` and the ``test`` extra (selenium).
"""

from __future__ import annotations

import pathlib
import subprocess
import sys
import tempfile
from typing import Any

HERE = pathlib.Path(__file__).resolve().parent
ROOT = HERE.parents[1]
sys.path.insert(0, str(HERE))

from make import DESKTOP_WIDTH, PHONE, browser  # noqa: E402  (the web page's screenshots)

SECTIONS = (("report-summary", "#summary"), ("report-ahead", "#ahead"),
            ("report-bakery", "#space-bakery-floor"))


def whole_page(driver: Any, width: int) -> None:
    """Make the window as tall as the page (an element below the first screen is drawn)."""
    driver.set_window_size(width, 900)
    full = int(driver.execute_script("return document.documentElement.scrollHeight"))
    driver.set_window_size(width, min(full, 12000))


def element(driver: Any, css: str, name: str) -> None:
    from selenium.webdriver.common.by import By

    png = driver.find_element(By.CSS_SELECTOR, css).screenshot_as_png
    (HERE / f"{name}.png").write_bytes(png)
    print(f"saved {HERE / name}.png")


def main() -> int:
    with tempfile.TemporaryDirectory() as tmp:
        page = pathlib.Path(tmp) / "larkfield-report.html"
        subprocess.run([sys.executable, "-m", "thermowarden.cli", "report", "--config",
                        str(ROOT / "deploy" / "example-site.yaml"), "--feed",
                        str(ROOT / "simulated_feeds" / "recorded" / "larkfield-day.jsonl.gz"),
                        "--output", str(page)], check=True, timeout=1800)
        laptop = browser(1.0)
        try:
            laptop.get(page.as_uri())
            whole_page(laptop, DESKTOP_WIDTH)
            for name, css in SECTIONS:
                element(laptop, css, f"{name}-laptop")
        finally:
            laptop.quit()
        phone = browser(2.0)
        try:
            width, height = PHONE
            phone.set_window_size(width, height)
            phone.get(page.as_uri())
            # the inner size exactly the phone's (headless: no toolbar in the outer size)
            inner = phone.execute_script("return [window.innerWidth, window.innerHeight]")
            phone.set_window_size(2 * width - inner[0], 2 * height - inner[1])
            (HERE / "report-top-phone.png").write_bytes(phone.get_screenshot_as_png())
            print(f"saved {HERE / 'report-top-phone.png'}")
            whole_page(phone, 2 * width - inner[0])
            element(phone, "#space-bakery-floor", "report-bakery-phone")
        finally:
            phone.quit()
    return 0


if __name__ == "__main__":
    sys.exit(main())

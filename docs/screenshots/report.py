"""Screenshots of the report for the README, taken from the current code.

Writes the shipped day's report with ``thermowarden report --feed`` (the invented Larkfield
Works' recorded summer day) and saves PNGs of it taken with Debian's headless chromium
(through chromedriver and selenium) next to the README's other pictures, in ``docs/``:

- ``report-summary.png``: the heading, the cautions and the summary table, 1100 pixels wide;
- ``report-bakery.png``: the bakery's section (operative temperature, the 60-minute WBGT
  against its references with the spot value apart, the timeline of advisories level by
  level, and the advisories' table).

Run it with the project's environment from the repository's root::

    .venv/bin/python docs/screenshots/report.py

Needs ``apt-get install chromium chromium-driver`` and the ``test`` extra (selenium).
"""

from __future__ import annotations

import pathlib
import shutil
import subprocess
import sys
import tempfile

ROOT = pathlib.Path(__file__).resolve().parents[2]
DOCS = ROOT / "docs"
WIDTH = 1100
BROWSER_ARGS = ("--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
                "--disable-background-networking", "--disable-component-update",
                "--disable-sync", "--disable-dev-shm-usage", "--hide-scrollbars")


def main() -> int:
    from selenium import webdriver
    from selenium.webdriver.chrome.options import Options
    from selenium.webdriver.chrome.service import Service
    from selenium.webdriver.common.by import By

    with tempfile.TemporaryDirectory() as tmp:
        page = pathlib.Path(tmp) / "larkfield-report.html"
        subprocess.run([sys.executable, "-m", "thermowarden.cli", "report", "--config",
                        str(ROOT / "deploy" / "example-site.yaml"), "--feed",
                        str(ROOT / "simulated_feeds" / "recorded" / "larkfield-day.jsonl.gz"),
                        "--output", str(page)], check=True, timeout=1800)
        opts = Options()
        opts.binary_location = shutil.which("chromium") or "/usr/bin/chromium"
        for a in BROWSER_ARGS:
            opts.add_argument(a)
        opts.add_argument(f"--window-size={WIDTH},900")
        driver = webdriver.Chrome(service=Service(
            executable_path=shutil.which("chromedriver") or "/usr/bin/chromedriver"),
            options=opts)
        try:
            driver.get(page.as_uri())
            height = int(driver.execute_script(
                "return document.documentElement.scrollHeight"))
            driver.set_window_size(WIDTH, min(height, 8000))
            for name, css in (("report-summary", "#summary"),
                              ("report-bakery", "#space-bakery-floor")):
                png = driver.find_element(By.CSS_SELECTOR, css).screenshot_as_png
                (DOCS / f"{name}.png").write_bytes(png)
                print(f"wrote {DOCS / name}.png")
        finally:
            driver.quit()
    return 0


if __name__ == "__main__":
    sys.exit(main())

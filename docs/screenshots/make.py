"""Screenshots of the web page for the README, taken from the current code.

Runs ``thermowarden demo --plain --web-port N`` (the invented Larkfield Works, its simulated
summer day on an embedded broker, the clock then held on the day's last numbers), signs in
as the demo's user to acknowledge one live advisory with a note, and saves PNGs taken with
Debian's headless chromium (through chromedriver and selenium) next to this file:

- ``web-overview-phone.png``, ``web-space-phone.png``: 390 x 844 CSS pixels (a phone), the
  first screen of the overview and of the office's page, at device scale 2;
- ``web-overview-desktop.png``, ``web-advisory-desktop.png``: 1280 pixels wide, whole page.

Run it with the project's environment from the repository's root (the demo takes a few
minutes; a busy machine takes longer)::

    .venv/bin/python docs/screenshots/make.py

Needs ``apt-get install chromium chromium-driver`` and the ``test`` extra (selenium).

``--page URL --password PASSWORD`` takes the pictures of a demo already started with
``--web-port`` whose day is over (its password is on its second line), instead of running
one.
"""

from __future__ import annotations

import json
import pathlib
import re
import shutil
import signal
import socket
import subprocess
import sys
import threading
import time
import urllib.request
from typing import Any

HERE = pathlib.Path(__file__).resolve().parent
PHONE = (390, 844)
DESKTOP_WIDTH = 1280
DAY_TIMEOUT_S = 1800.0
BROWSER_ARGS = ("--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
                "--disable-background-networking", "--disable-component-update",
                "--disable-sync", "--disable-dev-shm-usage", "--hide-scrollbars")


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def call(base: str, method: str, path: str, body: Any = None,
         token: str | None = None) -> Any:
    headers = {"content-type": "application/json"}
    if token:
        headers["Authorization"] = f"Bearer {token}"
    req = urllib.request.Request(base + path, method=method, headers=headers,
                                 data=json.dumps(body).encode() if body is not None else None)
    with urllib.request.urlopen(req, timeout=30) as r:
        raw = r.read()
        return json.loads(raw) if raw else None


def start_demo(port: int) -> tuple[subprocess.Popen[str], str]:
    """The demo serving its page on ``port``, once its day is over; and the password."""
    proc = subprocess.Popen([sys.executable, "-m", "thermowarden.cli", "demo", "--plain",
                             "--web-port", str(port)],
                            stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    lines: list[str] = []
    assert proc.stdout is not None
    threading.Thread(target=lambda: lines.extend(iter(proc.stdout.readline, "")),
                     daemon=True).start()
    deadline = time.monotonic() + DAY_TIMEOUT_S
    while not any("the day is over" in x for x in lines):
        if proc.poll() is not None or time.monotonic() > deadline:
            proc.kill()
            sys.exit("the demo stopped or took too long:\n" + "".join(lines[-30:]))
        time.sleep(0.5)
    password = next(m.group(1) for x in lines
                    if (m := re.search(r"sign in as demo, password (\S+?)\)", x)))
    return proc, password


def acknowledge_one(base: str, password: str) -> str | None:
    """Acknowledge the first live safety advisory as the demo's user, with a note."""
    live = call(base, "GET", "/api/advisories")["advisories"]
    target = next((a for a in live if a["audience"] == "safety" and a["state"] == "active"),
                  None)
    if target is None:
        return None
    token = call(base, "POST", "/api/session", {"name": "demo", "password": password})["token"]
    call(base, "POST", f"/api/advisories/{target['id']}/acknowledge",
         {"note": "water and shade arranged"}, token)
    return str(target["id"])


def browser(scale: float) -> Any:
    from selenium import webdriver
    from selenium.webdriver.chrome.options import Options
    from selenium.webdriver.chrome.service import Service

    opts = Options()
    opts.binary_location = shutil.which("chromium") or "/usr/bin/chromium"
    for a in BROWSER_ARGS:
        opts.add_argument(a)
    opts.add_argument(f"--force-device-scale-factor={scale:g}")
    driver = webdriver.Chrome(service=Service(
        executable_path=shutil.which("chromedriver") or "/usr/bin/chromedriver"), options=opts)
    driver.set_page_load_timeout(60)
    return driver


def shoot(driver: Any, url: str, name: str, width: int, height: int | None) -> None:
    """A PNG of ``url``: the first screen at ``width`` x ``height``, or with ``height``
    None the whole page."""
    driver.set_window_size(width, height or 900)
    driver.get(url)
    if height is None:
        full = int(driver.execute_script("return document.documentElement.scrollHeight"))
        driver.set_window_size(width, min(full, 8000))
    else:
        # the window's outer size includes no toolbar in headless mode; make the inner
        # size exactly the phone's
        inner = driver.execute_script("return [window.innerWidth, window.innerHeight]")
        driver.set_window_size(2 * width - inner[0], 2 * height - inner[1])
    (HERE / f"{name}.png").write_bytes(driver.get_screenshot_as_png())
    print(f"saved {HERE / (name + '.png')}")


def main() -> int:
    import argparse

    ap = argparse.ArgumentParser(description="Screenshots of the web page for the README.")
    ap.add_argument("--page", metavar="URL", help="a running demo's page (its day over)")
    ap.add_argument("--password", help="that demo's password for the user demo")
    args = ap.parse_args()
    if args.page:
        if not args.password:
            ap.error("--page needs --password")
        shoot_all(args.page.rstrip("/"), args.password)
        return 0
    port = free_port()
    base = f"http://127.0.0.1:{port}"
    proc, password = start_demo(port)
    try:
        shoot_all(base, password)
    finally:
        proc.send_signal(signal.SIGINT)
        try:
            proc.wait(60)
        except subprocess.TimeoutExpired:
            proc.kill()
    return 0


def shoot_all(base: str, password: str) -> None:
    """Acknowledge one advisory, then take every picture."""
    advisory = acknowledge_one(base, password)
    phone = browser(2.0)
    try:
        shoot(phone, base + "/", "web-overview-phone", *PHONE)
        shoot(phone, base + "/spaces/office-west", "web-space-phone", *PHONE)
    finally:
        phone.quit()
    desk = browser(1.0)
    try:
        shoot(desk, base + "/", "web-overview-desktop", DESKTOP_WIDTH, None)
        if advisory:
            shoot(desk, f"{base}/advisories/{advisory}", "web-advisory-desktop",
                  DESKTOP_WIDTH, None)
    finally:
        desk.quit()


if __name__ == "__main__":
    sys.exit(main())

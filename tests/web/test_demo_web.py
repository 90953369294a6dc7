"""`thermowarden demo --web-port`: the page on the demo's embedded broker, kept after the day
until Ctrl-C."""

from __future__ import annotations

import json
import signal
import subprocess
import sys
import threading
import urllib.request

from tests.shell.conftest import free_port, wait_for


def test_demo_serves_the_page_and_stops_on_ctrl_c():
    port = free_port()
    proc = subprocess.Popen([sys.executable, "-m", "thermowarden.cli", "demo", "--plain",
                             "--duration", "8", "--web-port", str(port)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    lines: list[str] = []
    reader = threading.Thread(target=lambda: lines.extend(iter(proc.stdout.readline, "")),
                              daemon=True)
    reader.start()
    try:
        wait_for(lambda: any("the day is over" in x for x in lines) or proc.poll() is not None,
                 180, "the demo to finish its day")
        assert proc.poll() is None, proc.stderr.read()[-3000:]
        assert any(f"http://127.0.0.1:{port}/" in x and "sign in as demo" in x for x in lines)
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/api/spaces", timeout=10) as r:
            spaces = json.load(r)["spaces"]
        assert len(spaces) >= 4 and all(s["conditions_at"] for s in spaces)
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/", timeout=10) as r:
            assert "Larkfield Works" in r.read().decode()
        proc.send_signal(signal.SIGINT)
        assert proc.wait(60) == 0
        reader.join(10)
        assert any("demo summary" in x for x in lines)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(10)
        proc.stdout.close()
        proc.stderr.close()

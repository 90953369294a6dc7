"""The deployment samples work as shipped: the Mosquitto configuration starts (with only
its paths and port changed) and serves the service under the sample ACL; the container
file's build context holds everything the package needs; the systemd unit verifies and
carries its hardening; the container health check asks /readyz."""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
import zipfile

import pytest

from tests.shell.conftest import MOSQUITTO, REPO, ServiceProcess, free_port, port_open, wait_for
from tests.shell.test_security import _site

DEPLOY = REPO / "deploy"


@pytest.mark.broker
def test_sample_mosquitto_conf_starts_and_serves_the_service(tmp_path):
    users = {"thermowarden": "tw-secret", "gateway": "gw-secret"}
    pw = tmp_path / "passwd"
    for i, (u, p) in enumerate(users.items()):
        subprocess.run(["mosquitto_passwd", "-b"] + (["-c"] if i == 0 else []) +
                       [str(pw), u, p], check=True, capture_output=True)
    port = free_port()
    text = (DEPLOY / "broker" / "mosquitto.conf").read_text()
    for old, new in (("/etc/mosquitto/passwd", str(pw)),
                     ("/etc/mosquitto/thermowarden.acl",
                      str(DEPLOY / "broker" / "thermowarden.acl")),
                     ("listener 1883 127.0.0.1", f"listener {port} 127.0.0.1"),
                     ("/var/lib/mosquitto/", f"{tmp_path}/")):
        assert old in text, old
        text = text.replace(old, new)
    for line in text.splitlines():  # mosquitto takes a '#' after a value as part of it
        assert line.startswith("#") or "#" not in line, line
    assert re.search(r"^max_packet_size \d+$", text, re.M)
    assert re.search(r"^max_queued_messages \d+$", text, re.M)
    conf = tmp_path / "mosquitto.conf"
    conf.write_text(("user root\n" if os.geteuid() == 0 else "") + text)
    log = open(tmp_path / "mosquitto.log", "wb")  # noqa: SIM115
    broker = subprocess.Popen([MOSQUITTO, "-c", str(conf)], stdout=log, stderr=log)
    svc = None
    try:
        wait_for(lambda: port_open(port) or broker.poll() is not None, 10, "mosquitto")
        assert broker.poll() is None, (tmp_path / "mosquitto.log").read_text()
        site = _site(tmp_path, f"mqtt://127.0.0.1:{port}")
        svc = ServiceProcess(site, tmp_path / "state", env={
            "THERMOWARDEN_BROKER__USERNAME": "thermowarden",
            "THERMOWARDEN_BROKER__PASSWORD": users["thermowarden"]}).start()
        code, _ = svc.get("/readyz")
        assert code == 200
    finally:
        if svc is not None:
            svc.stop()
        broker.terminate()
        broker.wait(10)
        log.close()


def test_containerfile_context_builds_the_package(tmp_path):
    """Build the wheel from exactly what the Containerfile copies (offline, no isolation)."""
    text = (DEPLOY / "Containerfile").read_text()
    ctx = tmp_path / "ctx"
    ctx.mkdir()
    copies = re.findall(r"^COPY\s+(?!--)(.+)$", text, re.M)
    assert copies
    for line in copies:
        *sources, _dest = line.split()
        for src in sources:
            path = REPO / src
            if path.is_dir():
                shutil.copytree(path, ctx / src, ignore=shutil.ignore_patterns(
                    "__pycache__", "*.egg-info"))
            else:
                shutil.copy2(path, ctx / src)
    out = tmp_path / "wheels"
    res = subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps",
                          "--no-build-isolation", "--no-index", "-q", "-w", str(out), str(ctx)],
                         capture_output=True, text=True, timeout=300)
    assert res.returncode == 0, res.stderr[-3000:]
    (wheel,) = out.glob("thermowarden-*.whl")
    names = set(zipfile.ZipFile(wheel).namelist())
    for needed in ("thermowarden/deploy/thermowarden.service",
                   "thermowarden/deploy/broker/mosquitto.conf",
                   "thermowarden/deploy/example-site.yaml",
                   "thermowarden/rulepacks/sensor_health.yaml",
                   "thermowarden/schemas/event.v1.json",
                   "thermowarden/shell/service.py",
                   "thermowarden/engine/advisories.py"):
        assert needed in names, needed
    # every package of the source tree ships (pyproject lists them one by one)
    for init in sorted((REPO / "daemon").rglob("__init__.py")):
        module = init.relative_to(REPO / "daemon").as_posix()
        assert module in names, f"{module} is not in the wheel (pyproject packages)"
    assert "/readyz" in re.search(r"^HEALTHCHECK .*$", text, re.M).group(0)


UNIT_OPTIONS = ("After=network-online.target time-sync.target", "CapabilityBoundingSet=\n",
                "ProtectClock=yes", "ProtectKernelLogs=yes", "ProtectProc=invisible",
                "SystemCallFilter=@system-service", "UMask=0077", "MemoryMax=",
                "StateDirectoryMode=0700", "RestartPreventExitStatus=78", "NoNewPrivileges=yes")


def test_systemd_unit_is_hardened_and_verifies(tmp_path):
    text = (DEPLOY / "thermowarden.service").read_text()
    for option in UNIT_OPTIONS:
        assert option in text, option
    analyze = shutil.which("systemd-analyze")
    if analyze is None:
        pytest.skip("systemd-analyze is not installed")
    unit = tmp_path / "thermowarden.service"
    unit.write_text(text.replace("/usr/local/bin/thermowarden", shutil.which("true") or
                                 "/bin/true"))
    res = subprocess.run([analyze, "verify", str(unit)], capture_output=True, text=True,
                         timeout=60)
    assert res.returncode == 0, res.stderr
    assert "Unknown key" not in res.stderr and "Failed to parse" not in res.stderr, res.stderr


def test_a_refused_site_stops_run_with_the_status_the_unit_does_not_restart_on(tmp_path):
    """A misspelt key: `run` names the file, line and key and exits 78, the status the
    unit's RestartPreventExitStatus names, so a mistake only a person can fix does not loop."""
    site = tmp_path / "site.yaml"
    text = (DEPLOY / "example-site.yaml").read_text()
    assert "  prefix: " in text
    site.write_text(text.replace("  prefix: ", "  prefx: ", 1))
    line = next(i for i, ln in enumerate(site.read_text().splitlines(), 1) if "prefx:" in ln)
    r = subprocess.run([sys.executable, "-m", "thermowarden.cli", "run", "--config", str(site),
                        "--state-dir", str(tmp_path / "state")],
                       capture_output=True, text=True, timeout=120)
    assert r.returncode == 78
    assert f"{site}:{line}:" in r.stderr and "did you mean 'prefix'" in r.stderr
    assert "RestartPreventExitStatus=78" in (DEPLOY / "thermowarden.service").read_text()
    assert not (tmp_path / "state").exists() or not any((tmp_path / "state").iterdir())

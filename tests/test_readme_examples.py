"""The site snippets the README shows for point trust and delivery are valid: each YAML
block is loaded as (part of) a site file by the same loader as ``check``."""

from __future__ import annotations

import re

import yaml

from tests.conftest import REPO
from thermowarden.config import load_site
from thermowarden.site_model import build_site_model


def _blocks(section: str, level: str = "##") -> list[str]:
    text = (REPO / "README.md").read_text(encoding="utf-8")
    start = text.index(f"\n{level} {section}\n")
    end = text.index("\n## ", start + 1)
    return re.findall(r"```yaml\n(.*?)```", text[start:end], flags=re.S)


def _load(tmp_path, snippet: str):
    data = {"site": {"id": "readme", "timezone": "Europe/London"}, **yaml.safe_load(snippet)}
    path = tmp_path / "site.yaml"
    path.write_text(yaml.safe_dump(data), encoding="utf-8")
    return load_site(path, {})


def test_point_trust_snippet(tmp_path):
    (block,) = _blocks("Trusting each point")
    point = _load(tmp_path, block).spaces[0].points[0]
    assert (point.offset, point.scale, point.plausible_min, point.plausible_max,
            point.max_change_per_min, point.stuck_after_s) == (-1.5, 1.0, 5, 40, 2, 7200)


def test_delivery_snippet(tmp_path):
    (block,) = _blocks("Reaching people: webhook and e-mail")
    # its recipients per building name a building of the site (the tree snippet's)
    (tree,) = _blocks("A site as a tree", "###")
    config = _load(tmp_path, block + tree)
    safety = config.delivery.audiences["safety"]
    assert safety.webhook is not None and safety.email is not None
    assert safety.quiet_hours == "21:00-06:30"
    assert safety.email.to == ["safety-lead@example.org", "site-supervisor@example.org"]
    north = safety.buildings["north"]
    assert north.email is not None and north.email.to == ["north-duty@example.org"]
    assert safety.escalation is not None and safety.escalation.after_s == 600
    assert safety.escalation.email is not None
    assert safety.escalation.email.to == ["site-manager@example.org"]


def test_clustered_broker_snippet(tmp_path):
    (block,) = [b for b in _blocks("Running the service") if b.startswith("broker:")]
    config = _load(tmp_path, block)
    assert config.broker.fallback_urls == ["mqtt://10.0.0.12:1883", "mqtt://10.0.0.13:1883"]
    assert (config.broker.protocol, config.broker.subscribe_qos) == ("3.1.1", 0)
    assert config.broker.persistent_session
    assert config.output.rule_topic_separator == "/"


def test_site_tree_snippet(tmp_path):
    (block,) = _blocks("A site as a tree", "###")
    config = _load(tmp_path, block)
    by_id = {s.id: s for s in config.spaces}
    assert (by_id["north-201"].building, by_id["north-201"].floor) == ("north", "f2")
    assert config.parameters(by_id["north-201"]) == {"comfort_limit_c": 26}
    assert config.people(by_id["south-101"]).met == 1.4
    assert by_id["yard-dock"].area == "yard" and config.occupancy(by_id["yard-dock"]).always
    topics = {p.topic for p in build_site_model(config).points}
    assert {"ashgrove/north/f2/201/ta", "ashgrove/south/f1/101/ta",
            "ashgrove/north/f2/desk-201/rh"} <= topics


def test_web_snippet(tmp_path):
    (block,) = _blocks("The web page and HTTP API")
    config = _load(tmp_path, block)
    assert config.web.enabled and config.web.users_file == "web-users.yaml"
    assert not config.web.sign_in_to_read
    assert config.web.public_url == "https://comfort.example.org"
def test_windows_snippet(tmp_path):
    (block,) = _blocks("Advice ahead of time")
    data = {"site": {"id": "readme", "timezone": "Europe/London", "latitude": 52.2,
                     "longitude": -1.5}, **yaml.safe_load(block)}
    path = tmp_path / "site.yaml"
    path.write_text(yaml.safe_dump(data), encoding="utf-8")
    (window,) = load_site(path, {}).spaces[0].windows
    assert (window.facade_azimuth, window.tilt, window.transmittance) == (270, 90, 0.4)
    assert window.overhang is not None and window.overhang.glazing_height_m == 1.6
    assert window.shading_point == "larkfield/office-west/blinds"


def test_group_snippets(tmp_path):
    nats, postgres = [b for b in _blocks("Running the service") if b.startswith("group:")]
    config = _load(tmp_path, nats)
    assert config.group is not None and config.group.store.kind == "nats"
    assert config.group.store.stream_replicas == 3 and config.group.lease_ttl_s == 15
    assert config.group.margin == 3.0  # a fifth of the TTL
    config = _load(tmp_path, postgres)
    assert config.group is not None and config.group.store.kind == "postgres"
    assert config.group.store.table_schema == "thermowarden"


def test_the_readmes_commands_work_without_activating_the_environment():
    """Every command of the README that runs this checkout's programs names them through
    ``.venv/bin/`` (nothing to activate), the first-run and test times are given as
    measured figures, and the check command runs as written (``.venv/bin/`` standing for
    the folder of the interpreter running this test)."""
    import pathlib
    import subprocess
    import sys

    text = (REPO / "README.md").read_text(encoding="utf-8")
    blocks = re.findall(r"```sh\n(.*?)```", text, flags=re.S)
    checkout = [ln for b in blocks for ln in b.splitlines()
                if re.search(r"\b(deploy|simulated_feeds)/", ln) or "pip install -e" in ln]
    assert checkout
    for line in checkout:
        for cmd in re.split(r"\s*&&\s*", line.strip()):
            assert cmd.startswith((".venv/bin/", "python3 -m venv ")), line
    intro = text.split("\n---\n", 1)[0]
    # measured, with the machine they were measured on
    assert re.search(r"`\.ci/run` took \d+ minutes", intro)
    assert re.search(r"compil\w+ the comfort models[^.]*\d+ s\s+measured", intro, flags=re.S)
    assert re.search(r"demo's day[^.]*measured[^.]*took\s+\d+ min \d+ s", intro, flags=re.S)
    check = next(ln for ln in checkout if " check " in ln).strip()
    bindir = pathlib.Path(sys.executable).parent
    argv = [str(bindir / check.split()[0].removeprefix(".venv/bin/")), *check.split()[1:]]
    r = subprocess.run(argv, cwd=REPO, capture_output=True, text=True, timeout=600)
    assert r.returncode == 0 and ": valid (5 spaces" in r.stderr, r.stderr[-2000:]

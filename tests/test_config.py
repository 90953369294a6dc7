"""Site configuration: the sample loads, errors point at file, line and column."""

from __future__ import annotations

import pathlib
import textwrap

import pytest

from tests.conftest import REPO
from thermowarden.config import ConfigError, load_site

MINIMAL = """\
site:
  id: test-site
spaces:
  - id: room-1
    points:
      - topic: t/room-1/temp
        quantity: air_temperature
"""


def write(tmp_path: pathlib.Path, text: str, name: str = "site.yaml") -> pathlib.Path:
    p = tmp_path / name
    p.write_text(textwrap.dedent(text), encoding="utf-8")
    return p


def issues(path: pathlib.Path, environ: dict[str, str] | None = None) -> list[str]:
    with pytest.raises(ConfigError) as exc:
        load_site(path, environ or {})
    return [str(i) for i in exc.value.issues]


def test_every_sample_config_in_the_repo_loads():
    samples = sorted((REPO / "deploy").glob("*.yaml")) + sorted(
        (REPO / "simulated_feeds").glob("**/*.yaml"))
    assert samples, "no sample configs found"
    for path in samples:
        if path.name.startswith(("mosquitto", "broker")):
            continue
        config = load_site(path, {})
        assert config.spaces, path


def test_example_site_content():
    c = load_site(REPO / "deploy" / "example-site.yaml", {})
    ids = [s.id for s in c.spaces]
    assert ids == ["office-west", "bakery-floor", "loading-yard", "staff-garden", "studio-north"]
    bakery = c.spaces[1]
    assert bakery.hot_work and c.people(bakery).acclimatised
    assert c.site.timezone == "Europe/London"


def test_misspelt_key_points_at_line_and_suggests(tmp_path):
    p = write(tmp_path, MINIMAL.replace("    points:", "    hot_wrok: true\n    points:"))
    (msg,) = issues(p)
    assert msg.startswith(f"{p}:5:5: ")
    assert "unknown key 'hot_wrok'" in msg and "did you mean 'hot_work'" in msg


def test_bad_value_names_value_and_expectation(tmp_path):
    p = write(tmp_path, MINIMAL.replace("quantity: air_temperature",
                                        "quantity: air_temperature\n        unit: furlongs"))
    (msg,) = issues(p)
    assert f"{p}:8:" in msg
    assert "'furlongs' does not fit a temperature" in msg


def test_unknown_quantity(tmp_path):
    p = write(tmp_path, MINIMAL.replace("quantity: air_temperature", "quantity: air_temp"))
    (msg,) = issues(p)
    assert f"{p}:7:19" in msg and "air_temp" in msg


def test_yaml_syntax_error_has_position(tmp_path):
    p = write(tmp_path, "site:\n  id: [unclosed\n")
    (msg,) = issues(p)
    assert msg.startswith(f"{p}:") and "not valid YAML" in msg


def test_password_in_file_is_refused(tmp_path):
    p = write(tmp_path, MINIMAL + "broker:\n  password: hunter2\n")
    (msg,) = issues(p)
    assert "THERMOWARDEN_BROKER__PASSWORD" in msg and f"{p}:9:3" in msg


def test_environment_overrides_and_secret(tmp_path):
    p = write(tmp_path, MINIMAL)
    c = load_site(p, {"THERMOWARDEN_BROKER__URL": "mqtt://10.1.2.3:1884",
                      "THERMOWARDEN_BROKER__PASSWORD": "s3cret",
                      "THERMOWARDEN_EVALUATION__TICK_S": "5"})
    assert c.broker.url == "mqtt://10.1.2.3:1884"
    assert c.broker.password is not None and c.broker.password.get_secret_value() == "s3cret"
    assert c.evaluation.tick_s == 5
    assert "s3cret" not in repr(c)


def test_bad_environment_override_is_named(tmp_path):
    p = write(tmp_path, MINIMAL)
    (msg,) = issues(p, {"THERMOWARDEN_BROKER__URL": "http://x"})
    assert "THERMOWARDEN_BROKER__URL" in msg


def test_duplicate_space_and_template_checks(tmp_path):
    p = write(tmp_path, MINIMAL + "  - id: room-1\n")
    assert any("appears twice" in m for m in issues(p))
    p = write(tmp_path, MINIMAL + "templates:\n  - topic: t/{room}/x\n    quantity: air_speed\n")
    assert any("unknown placeholder {room}" in m for m in issues(p))


def test_csv_spaces_with_row_positions(tmp_path):
    write(tmp_path, "id,name,kind,work_class,clo,rule_packs\n"
                    "bay-1,Bay 1,indoor,moderate,0.6,comfort;humidity\n"
                    "bay-2,Bay 2,sideways,low,0.6,comfort\n", "spaces.csv")
    p = write(tmp_path, "site: {id: s}\nspaces_csv: spaces.csv\n")
    (msg,) = issues(p)
    assert msg.startswith(f"{tmp_path / 'spaces.csv'}:3:3") and "sideways" in msg


def test_csv_unknown_column_suggests(tmp_path):
    write(tmp_path, "id,wrok_class\nbay-1,low\n", "spaces.csv")
    p = write(tmp_path, "site: {id: s}\nspaces_csv: spaces.csv\n")
    (msg,) = issues(p)
    assert "unknown column 'wrok_class'" in msg and "work_class" in msg


def test_sided_point_needs_side(tmp_path):
    p = write(tmp_path, MINIMAL.replace("quantity: air_temperature",
                                        "quantity: plane_radiant_temperature"))
    (msg,) = issues(p)
    assert "needs the side it faces" in msg


def test_clustered_broker_settings_are_checked_with_their_line(tmp_path):
    p = write(tmp_path, MINIMAL + textwrap.dedent("""\
        broker:
          url: mqtt://a:1883
          fallback_urls: [mqtt://b:1883, "http://c:80"]
          subscribe_qos: 2
        output: {prefix: x, rule_topic_separator: "-"}
        """))
    msgs = issues(p)
    assert len(msgs) == 3, msgs
    text = "\n".join(msgs)
    assert f"{p}:10:" in text and "'http://c:80' is not mqtt://host[:port]" in text
    assert f"{p}:11:" in text and "subscribe_qos" in text
    assert f"{p}:12:" in text and "rule_topic_separator" in text


def test_group_section_is_checked_with_its_line(tmp_path):
    p = write(tmp_path, MINIMAL + textwrap.dedent("""\
        group:
          store: {kind: postgres, dsn: "host=db password=secret"}
          lease_ttl_s: 1
          shard_buckets: 0
        """))
    msgs = issues(p)
    text = "\n".join(msgs)
    assert f"{p}:9:" in text and "PGPASSWORD" in text  # no password in the site file
    assert f"{p}:10:" in text and "lease_ttl_s" in text
    assert f"{p}:11:" in text and "shard_buckets" in text
    p = write(tmp_path, MINIMAL + textwrap.dedent("""\
        group:
          store: {kind: nats, servers: ["mqtt://a:1883"]}
        """))
    assert "'mqtt://a:1883' is not a nats://host:port URL" in "\n".join(issues(p))
    p = write(tmp_path, MINIMAL + textwrap.dedent("""\
        group:
          store: {kind: nats, servers: ["nats://a:4222"]}
          lease_ttl_s: 6
          margin_s: 5
        """))
    (msg,) = issues(p)
    assert f"{p}:9:" in msg and "margin_s must be shorter than two thirds" in msg


def test_group_section_and_declared_shards_load(tmp_path):
    p = write(tmp_path, MINIMAL.replace("  - id: room-1\n", "  - id: room-1\n    area: "
                                        "north-wing\n") + textwrap.dedent("""\
        group:
          name: works
          store: {kind: nats, servers: ["nats://10.0.0.1:4222"]}
        """))
    config = load_site(p, {})
    assert config.group is not None and config.group.name == "works"
    assert config.group.lease_ttl_s == 10 and config.group.replicas == 1
    assert config.spaces[0].area == "north-wing"

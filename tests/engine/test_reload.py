"""Hot reload at the engine: a reload that changes one space's threshold and another
space's points keeps the other spaces' windows (the 60-minute WBGT) and live advisories,
compared with an engine that was never reloaded and was fed the same readings."""

from __future__ import annotations

import math
import textwrap

import numpy as np
import pytest

from thermowarden.config import load_site
from thermowarden.effects import Publish
from thermowarden.engine import Engine
from thermowarden.rules import load_rule_packs
from thermowarden.shell.reloading import ReloadRefused, reload_engine
from thermowarden.site_check import check_site
from thermowarden.site_model import build_site_model

T0 = 1_784_000_000.0
PACK = """\
pack: reloadtest
description: a threshold rule with an on-delay
rules:
  - id: hot
    title: Hot
    audience: safety
    needs: [air_temperature]
    condition: air_temperature > limit
    clear: air_temperature < limit - 1
    on_delay_s: 300
    parameters: {limit: 30}
    messages: {title: "{space_name} hot", advice: "Cool it.", rationale: "Above {limit:.0f}."}
"""


def site(*, limit_a: float = 30, globe_b: str = "r/b/tg", extra: str = "") -> str:
    return textwrap.dedent(f"""\
        site: {{id: reload, timezone: UTC}}
        rule_dirs: [packs]
        defaults: {{occupancy: {{always: true}}, rule_packs: [reloadtest]}}
        templates:
          - {{topic: "r/{{space}}/ta", quantity: air_temperature}}
          - {{topic: "r/{{space}}/tnw", quantity: natural_wet_bulb}}
        spaces:
          - id: a
            parameters: {{limit: {limit_a}}}
            points: [{{topic: r/a/tg, quantity: globe_temperature}}]
          - id: b
            points: [{{topic: {globe_b}, quantity: globe_temperature}}]
          - id: c
            points: [{{topic: r/c/tg, quantity: globe_temperature}}]
        """) + extra


def write(tmp_path, text):
    (tmp_path / "packs").mkdir(exist_ok=True)
    (tmp_path / "packs" / "reloadtest.yaml").write_text(PACK)
    path = tmp_path / "site.yaml"
    path.write_text(text)
    return path


def loader(path):
    def load():
        config = load_site(path, {})
        names = {n for s in config.spaces for n in config.rule_packs(s)}
        return config, load_rule_packs(names, config.rule_dirs, base=path)
    return load


def engine(path) -> Engine:
    config, packs = loader(path)()
    return Engine(config, build_site_model(config), packs, start=T0)


def feed(e: Engine, minute: int, globe_b: str = "r/b/tg") -> list:
    t = T0 + 60 * minute
    for space, ta in (("a", 26.0), ("b", 25.0), ("c", 33.0)):
        wobble = 0.1 * math.sin(minute / 7)  # changing values: nothing looks stuck
        e.message(f"r/{space}/ta", f"{ta + wobble:.2f}".encode(), t)
        e.message(f"r/{space}/tnw", f"{24.0 + wobble:.2f}".encode(), t)
    e.message("r/a/tg", b"34.0", t)
    e.message(globe_b, b"35.0", t)
    e.message("r/c/tg", f"{36.0 + minute / 100:.2f}".encode(), t)
    return e.tick(t + 1)


def raised(effects) -> list[tuple[str, str]]:
    return [(e.payload["advisory"]["space"]["id"], e.payload["event"]) for e in effects
            if isinstance(e, Publish) and "/events/" in e.topic and e.payload]


def test_reload_keeps_unchanged_windows_and_advisories(tmp_path):
    (tmp_path / "control").mkdir()
    control = engine(write(tmp_path / "control", site()))
    path = write(tmp_path, site())
    running = engine(path)
    for minute in range(70):
        feed(control, minute)
        feed(running, minute)
    now = T0 + 60 * 69 + 1
    twa = running.state.wbgt_time_weighted(now)
    assert np.isfinite(twa).all()  # an hour of WBGT in every space
    (adv_c,) = [a for a in running.live_advisories() if running.model.space_ids[a.space] == "c"]

    # a's threshold goes down to 25 (it becomes hot); b's globe moves to another topic;
    # a new space d appears first in the list (every index shifts)
    write(tmp_path, site(limit_a=25, globe_b="r/b/globe2").replace(
        "spaces:\n", "spaces:\n  - id: d\n    points: [{topic: r/d/tg, quantity: "
        "globe_temperature}]\n", 1))
    result = reload_engine(running, loader(path))
    new = result.engine
    assert new.model.space_ids == ["d", "a", "b", "c"]
    assert "reload: kept the windows of 2 of 4 space(s)" in result.notes[0]
    after = new.state.wbgt_time_weighted(now)
    ids = new.model.space_index
    assert after[ids["c"]] == twa[running.model.space_index["c"]]
    assert after[ids["a"]] == twa[running.model.space_index["a"]]  # points unchanged
    assert math.isnan(after[ids["b"]])  # its globe changed: its window starts again
    assert math.isnan(after[ids["d"]])
    # c's live advisory is the same advisory, still active, not raised again
    live_c = [a for a in new.live_advisories() if new.model.space_ids[a.space] == "c"]
    assert [a.id for a in live_c] == [adv_c.id]
    assert result.effects == []
    # the per-quantity reading counters go on from where they were (the service's metrics
    # only go up)
    assert new.ingest.accepted_by_quantity == running.ingest.accepted_by_quantity
    assert sum(new.ingest.accepted_by_quantity.values()) > 0
    assert new.ingest.missed_by_quantity == running.ingest.missed_by_quantity
    # the old engine was left as it was (a failed swap would keep running it)
    assert adv_c.space == running.model.space_index["c"] == 2
    assert running.live_advisories() == [adv_c]

    events = []
    for minute in range(70, 80):
        events += raised(feed(new, minute, globe_b="r/b/globe2"))
        feed(control, minute)
    # c: the same conditions as the engine never reloaded, to the last digit
    t = T0 + 60 * 79 + 1
    cond_new = new.conditions_payload(ids["c"])
    cond_ctl = control.conditions_payload(control.model.space_index["c"])
    assert cond_new["indices"] == cond_ctl["indices"]
    assert cond_new["indices"]["wbgt_time_weighted"]["value"] is not None
    assert new.state.wbgt_time_weighted(t)[ids["c"]] == \
        control.state.wbgt_time_weighted(t)[control.model.space_index["c"]]
    # a: the new threshold raises after its on-delay; c raises nothing again
    assert events == [("a", "raised")]
    assert not [a for a in control.live_advisories()
                if control.model.space_ids[a.space] == "a"]


def test_reload_continues_the_event_count_of_a_live_advisory(tmp_path):
    """Its next event after a reload gets the next number (an id is never used twice: the
    count was not carried before, and the clear after a reload reused the raise's id)."""
    path = write(tmp_path, site())
    running = engine(path)
    events = []
    for minute in range(10):
        events += feed(running, minute)
    new = reload_engine(running, loader(path)).engine
    t = T0 + 60 * 10
    for space in ("a", "b", "c"):
        new.message(f"r/{space}/ta", b"20.0", t)
    events += new.tick(t + 1) + new.tick(t + 400)
    ids = [e.payload["event_id"] for e in events
           if isinstance(e, Publish) and "/events/" in e.topic and e.payload]
    kinds = [e.payload["event"] for e in events
             if isinstance(e, Publish) and "/events/" in e.topic and e.payload]
    assert kinds == ["raised", "cleared"]
    assert len(set(ids)) == 2 and ids[1].endswith(".2")


def test_reload_withdraws_advisories_of_removed_spaces(tmp_path):
    path = write(tmp_path, site())
    running = engine(path)
    for minute in range(10):
        feed(running, minute)
    (adv_c,) = running.live_advisories()
    text = site()
    write(tmp_path, text[:text.index("  - id: c")])
    result = reload_engine(running, loader(path))
    assert result.engine.live_advisories() == []
    (publish, persist) = result.effects
    assert isinstance(publish, Publish) and publish.payload is None and publish.retain
    assert publish.topic.endswith("/spaces/c/advisories/reloadtest.hot")
    assert persist.record is None
    assert any(f"advisory {adv_c.id} (c, reloadtest.hot) withdrawn" in n for n in result.notes)


@pytest.mark.parametrize(("name", "edit", "expected"), [
    ("site.yaml", lambda t: t.replace("  - id: b\n", "  - id: b\n    hot_wrok: true\n"),
     "unknown key 'hot_wrok'; did you mean 'hot_work'?"),
    ("site.yaml", lambda t: t.replace("timezone: UTC", "timezone: Mars/Olympus"),
     "unknown time zone"),
    ("packs/reloadtest.yaml", lambda t: t.replace("air_temperature > limit",
                                                  "air_temperature >> limit"),
     "reloadtest.yaml"),
])
def test_invalid_reload_refused_with_checks_messages(tmp_path, name, edit, expected):
    path = write(tmp_path, site())
    running = engine(path)
    feed(running, 0)
    target = tmp_path / name
    target.write_text(edit(target.read_text()))
    with pytest.raises(ReloadRefused) as exc:
        reload_engine(running, loader(path))
    report = check_site(str(path))
    assert report.issues
    assert exc.value.lines == [str(i) for i in report.issues]
    assert any(expected in line for line in exc.value.lines), exc.value.lines
    # the running engine is untouched and goes on
    assert running.model.space_ids == ["a", "b", "c"]
    feed(running, 1)


def test_restart_only_settings_refused(tmp_path):
    path = write(tmp_path, site())
    running = engine(path)
    path.write_text(site().replace("site: {id: reload, timezone: UTC}",
                                   "site: {id: reload, timezone: UTC}\noutput: {prefix: other}"))
    with pytest.raises(ReloadRefused) as exc:
        reload_engine(running, loader(path))
    assert exc.value.lines == ["output changed: that needs a restart (systemctl restart "
                               "thermowarden)"]

"""The engine under faults: a computation failing for one space, commands sent to the wrong
audience, repeated shelving, acknowledged urgent alerts, event identity, retained values
without a time, missed readings and a wall clock stepped back."""

from __future__ import annotations

import json

import pytest

from tests.engine.conftest import validate_effects
from tests.engine.test_engine import command, events, run
from thermowarden.config import load_site
from thermowarden.effects import Persist, Publish
from thermowarden.engine import Engine
from thermowarden.engine.index_rows import COMPUTATION_FAILED
from thermowarden.rules import load_rule_packs
from thermowarden.site_model import build_site_model

FOUNDRY = """\
site: {id: foundry, timezone: UTC}
output: {prefix: tw/foundry}
defaults:
  occupancy: {always: true}
  rule_packs: [heat_stress, sensor_health]
templates:
  - {topic: "foundry/{space}/ta", quantity: air_temperature, interval_s: 60}
  - {topic: "foundry/{space}/rh", quantity: relative_humidity, interval_s: 60}
  - {topic: "foundry/{space}/tg", quantity: globe_temperature, interval_s: 60}
  - {topic: "foundry/{space}/va", quantity: air_speed, interval_s: 60}
  - {topic: "foundry/{space}/tnw", quantity: natural_wet_bulb, interval_s: 60}
spaces:
"""


def foundry(tmp_path, postures, conditions_every_s=60):
    text = FOUNDRY + "".join(
        f"  - id: bay-{k}\n    hot_work: true\n"
        f"    people: {{work_class: moderate, clo: 0.6, acclimatised: true, posture: {p}}}\n"
        for k, p in enumerate(postures))
    site = tmp_path / "site.yaml"
    site.write_text(text)
    config = load_site(site, {})
    names = {n for s in config.spaces for n in config.rule_packs(s)}
    model = build_site_model(config)
    return Engine(config, model, load_rule_packs(names, config.rule_dirs, base=site),
                  conditions_every_s=conditions_every_s, start=0.0)


def hot_bays(engine, t, n):
    for k in range(n):
        for q, v in (("ta", 34.0), ("rh", 45.0), ("tg", 42.0), ("va", 0.4), ("tnw", 27.0)):
            engine.message(f"foundry/bay-{k}/{q}", str(v).encode(), t)


def test_a_failing_computation_stays_in_its_space(tmp_path, monkeypatch):
    # Fault injection: the PHS computation raises for the inputs of one space (as
    # pythermalcomfort 4.8's ISO 7933 PHS did for a posture it did not know); the two
    # others must go on. The posture itself is now mapped, so the fault is injected.
    import thermowarden.engine.evaluation as evaluation
    import thermowarden.engine.index_rows as index_rows

    real = evaluation.compute_phs

    def failing(inputs):
        if any(p == "crouching" for p in inputs.posture):
            raise ValueError("posture 'crouching' is not understood by the PHS model")
        return real(inputs)

    monkeypatch.setattr(evaluation, "compute_phs", failing)
    monkeypatch.setattr(index_rows, "compute_phs", failing)  # distinct rows
    engine = foundry(tmp_path, ["standing", "crouching", "standing"])
    effects = []
    for t in range(0, 700, 60):
        hot_bays(engine, float(t), 3)
        effects += engine.tick(float(t))
    validate_effects(effects)
    assert set(engine.evaluation.failures) == {1}
    group, error = engine.evaluation.failures[1]
    assert group == "phs" and "posture" in error
    conds = {i: engine.conditions_payload(i)["indices"] for i in range(3)}
    for i in (0, 2):
        assert conds[i]["phs_rectal_temperature"]["value"] > 36.0  # computed
    assert conds[1]["phs_rectal_temperature"] == {
        "value": None, "unit": "°C", "method": conds[0]["phs_rectal_temperature"]["method"],
        "reason": COMPUTATION_FAILED}
    assert conds[1]["wbgt"]["value"] == conds[0]["wbgt"]["value"]  # the rest of the space
    raised = [p for e in effects if isinstance(e, Publish) and "/events/" in e.topic
              for p in [e.payload] if p["event"] == "raised"]
    failed = [p["advisory"] for p in raised if p["advisory"]["rule"] == "sensor_health.phs_failed"]
    assert [a["space"]["id"] for a in failed] == ["bay-1"]
    assert failed[0]["audience"] == "integrator"
    assert "bay-1" in failed[0]["title"] and "PHS" in failed[0]["title"]
    # heat-stress rules still run for the other bays (WBGT over the reference value)
    assert any(p["advisory"]["rule"].startswith("heat_stress.") for p in raised)


def test_a_failing_computation_stays_in_its_space_and_ticks_in_a_batch(tmp_path, monkeypatch):
    # Fault injection: every index computation raises while bay-1's air temperature reads
    # 41 °C (minutes 5 to 9). Evaluated one tick at a time and as one batch of ticks (as
    # replay does), only bay-1 fails, only at those ticks, and both give the same events.
    import thermowarden.engine.evaluation as evaluation
    import thermowarden.engine.index_rows as index_rows

    real = evaluation.compute_indices

    def failing(inputs, with_phs=False):
        if (inputs.air_temperature == 41.0).any():
            raise ValueError("the air temperature 41 °C breaks this computation")
        return real(inputs, with_phs=with_phs)

    monkeypatch.setattr(evaluation, "compute_indices", failing)
    monkeypatch.setattr(index_rows, "compute_indices", failing)  # distinct rows

    def feed(engine, t):
        hot_bays(engine, t, 3)
        if 300 <= t < 600:
            engine.message("foundry/bay-1/ta", b"41.0", t)

    times = [float(t) for t in range(0, 1260, 60)]
    live = foundry(tmp_path, ["standing"] * 3, conditions_every_s=0)
    live_effects, live_failed = [], []
    for t in times:
        feed(live, t)
        live_effects += live.tick(t)
        live_failed.append(dict(live.evaluation.failures))
    batched = foundry(tmp_path, ["standing"] * 3, conditions_every_s=0)
    caps = []
    for t in times:
        feed(batched, t)
        caps.append(batched.capture(t))
    batch_effects = batched.tick_many(caps)
    validate_effects(batch_effects)

    assert [set(f) for f in live_failed] == [{1} if 300 <= t < 600 else set() for t in times]
    assert live_failed[5][1][0] == "indices" and "41 °C" in live_failed[5][1][1]
    assert batched.evaluation.failures == {}  # bay-1 recovered at the last tick
    _, table = batched.last_batch
    n = 3
    wbgt = table["wbgt"]
    for j, t in enumerate(times):
        reasons = [wbgt.reasons[c] for c in wbgt.codes[j * n:(j + 1) * n]]
        assert reasons[1] == (COMPUTATION_FAILED if 300 <= t < 600 else ""), (t, reasons)
        assert reasons[0] == reasons[2] == "", (t, reasons)
        assert wbgt.values[j * n] > 25.0  # the other bays computed at every tick

    def sent(effects):
        return [(e.payload["event"], e.payload["advisory"]["rule"],
                 e.payload["advisory"]["space"]["id"], e.payload["at"])
                for e in effects if isinstance(e, Publish) and "/events/" in e.topic
                and e.payload]

    assert sent(batch_effects) == sent(live_effects)
    failed = [x for x in sent(batch_effects) if x[1] == "sensor_health.indices_failed"]
    assert [x[:3] for x in failed][:1] == [("raised", "sensor_health.indices_failed", "bay-1")]
    assert {x[2] for x in failed} == {"bay-1"}


def test_every_event_has_its_own_identity_kept_across_a_restore(lab, tmp_path):
    effects = run(lab, 0, 200, **{"room-1": 36, "room-2": 31})
    adv = next(a for a in lab.live_advisories() if a.rule == "testpack.levels")
    _, eff = command(lab, "acknowledge", 210, advisory_id=adv.id, by="Ana")
    effects += eff
    effects += run(lab, 220, 500, **{"room-1": 36, "room-2": 25})  # room-2 clears
    sent = [e.payload for e in effects if isinstance(e, Publish) and "/events/" in e.topic]
    stored = [e.record for e in effects if isinstance(e, Persist) and e.kind == "event"]
    ids = [p["event_id"] for p in sent]
    assert len(ids) == len(set(ids)) >= 3
    assert "cleared" in {p["event"] for p in sent}
    assert {p["event_id"] for p in stored} == set(ids)
    # after a restart the next event of the advisory does not reuse an identity
    records = [e.record for e in effects if isinstance(e, Persist) and e.kind == "advisory"
               and e.key.endswith("testpack.levels") and e.record]
    packs = load_rule_packs(["testpack"], lab.config.rule_dirs, base=tmp_path / "site.yaml")
    fresh = Engine(lab.config, lab.model, packs, start=0.0)
    fresh.restore([records[-1]])
    _, eff = command(fresh, "shelve", 300, advisory_id=adv.id, by="Ana", reason="drill",
                     duration_s=60)
    new = [e.payload["event_id"] for e in eff if isinstance(e, Publish) and "/events/" in e.topic]
    assert new and not set(new) & set(ids)


def test_commands_must_go_to_the_advisory_audience(lab):
    run(lab, 0, 70, **{"room-1": 31})
    adv = next(a for a in lab.live_advisories() if a.rule == "testpack.hot")
    reply, eff = lab.command("acknowledge", json.dumps({"advisory_id": adv.id, "by": "x"})
                             .encode(), 80, audience="safety")
    assert not reply["ok"] and "tw/lab/commands/facilities/acknowledge" in reply["error"]
    assert eff == [] and adv.acknowledged is None
    reply, eff = lab.command("acknowledge", json.dumps({"advisory_id": adv.id, "by": "Ana"})
                             .encode(), 81, audience="facilities", identity="ana.k")
    assert reply["ok"]
    assert adv.acknowledged["identity"] == "ana.k" and adv.history[-1]["identity"] == "ana.k"
    validate_effects(eff)


@pytest.mark.long
def test_repeated_shelving_never_exceeds_the_rules_daily_limit(lab):
    # the urgent level of "levels" (max_shelve_s 600): a script that shelves it again
    # every time it comes back gets 600 s of silence a day in total, not more
    t = 0.0
    run(lab, 0, 70, **{"room-1": 38})
    adv = next(a for a in lab.live_advisories() if a.rule == "testpack.levels")
    assert adv.priority == "urgent"
    shelved_s = 0.0
    granted = refused = 0
    t = 80.0
    while t < 6 * 3600:
        state = adv.state.name
        if state == "SHELVED":
            shelved_s += 10
        else:
            reply, _ = command(lab, "shelve", t, advisory_id=adv.id, by="script",
                               reason="again", duration_s=300)
            if reply["ok"]:
                granted += 1
            else:
                refused += 1
                assert "in any 24 h" in reply["error"]
        run(lab, t, t, **{"room-1": 38})
        t += 10
    assert granted == 2 and refused > 100
    assert shelved_s <= 600
    # unshelving early gives the unused time back to the budget of that day
    t = 90_000.0  # more than 24 h after the last shelving ended
    run(lab, 6 * 3600, t, step=600, **{"room-1": 38})
    reply, _ = command(lab, "shelve", t, advisory_id=adv.id, by="lead", reason="drill",
                       duration_s=600)
    assert reply["ok"]  # a new day
    reply, _ = command(lab, "unshelve", t + 100, advisory_id=adv.id, by="lead")
    assert reply["ok"]
    reply, _ = command(lab, "shelve", t + 110, advisory_id=adv.id, by="lead", reason="x",
                       duration_s=500)
    assert reply["ok"]
    reply, _ = command(lab, "unshelve", t + 120, advisory_id=adv.id, by="lead")
    reply, _ = command(lab, "shelve", t + 130, advisory_id=adv.id, by="lead", reason="x",
                       duration_s=500)
    assert not reply["ok"] and "490 s are left" in reply["error"]


def test_acknowledged_urgent_alert_is_renotified_on_escalation_and_while_it_lasts(lab):
    run(lab, 0, 70, **{"room-1": 36})
    adv = next(a for a in lab.live_advisories() if a.rule == "testpack.levels")
    assert adv.priority == "high"
    reply, _ = command(lab, "acknowledge", 80, advisory_id=adv.id, by="safety lead")
    assert reply["ok"]
    quiet = run(lab, 90, 600, **{"room-1": 36})
    assert not events(quiet, rule="testpack.levels")  # acknowledged, nothing new
    e = run(lab, 610, 620, **{"room-1": 38})
    assert ("escalated", "testpack.levels", "urgent") in events(e)
    assert adv.state.name == "ACTIVE" and adv.acknowledged is None  # needs a new ack
    reply, _ = command(lab, "acknowledge", 630, advisory_id=adv.id, by="safety lead")
    assert reply["ok"]
    e = run(lab, 640, 630 + 1800 - 20, **{"room-1": 38})
    assert not events(e, rule="testpack.levels")
    e = run(lab, 630 + 1800 - 10, 630 + 3600, **{"room-1": 38})
    reminders = [x for x in events(e, rule="testpack.levels") if x[0] == "renotified"]
    assert reminders == [("renotified", "testpack.levels", "urgent")] * 2
    assert adv.state.name == "ACKNOWLEDGED"  # a reminder, not a new acknowledgement needed


def test_retained_value_without_a_time_is_of_unknown_age(lab):
    rej = lab.message("lab/room-1/ta", b"31", 100.0, retained=True)
    assert [r.reason for r in rej] == ["retained_without_time"]
    assert lab.ingest.accepted == 0


def test_gaps_count_missed_readings(lab):
    for t in (0.0, 60.0, 120.0, 360.0):  # interval 60 s: 180, 240 and 300 are missing
        assert lab.message("lab/room-2/ta", b"22", t) == []
    assert lab.ingest.missed_by_quantity["air_temperature"] == 3
    assert lab.ingest.accepted_by_quantity["air_temperature"] == 4


@pytest.mark.parametrize("step", [-3600.0, 3600.0])
def test_readings_after_a_clock_step(lab, step):
    assert lab.message("lab/room-2/ta", b"22", 10_000.0) == []
    lab.tick(10_000.0)
    now = 10_000.0 + step + 5
    lab.clock_stepped(now, step)
    assert lab.message("lab/room-2/ta", b"23", now) == []
    lab.tick(now)
    assert lab.conditions_payload(1)["inputs"]["air_temperature"]["fresh"] is True


@pytest.mark.parametrize("step", [-7200.0, 3600.0])
def test_shelving_budget_and_conditions_keep_monotonic_time_across_a_step(lab, step):
    # an urgent advisory shelved for 60 s at t = 100; the wall clock is stepped at t = 130
    # (engine time 130 + step from then on): the shelving ends 30 s later, not 30 s + step
    # later (back) or at once (forward); the daily budget counts the 60 s used, and the
    # conditions schedule (every 60 s) goes on
    run(lab, 0, 70, **{"room-1": 38})
    adv = next(a for a in lab.live_advisories() if a.rule == "testpack.levels")
    assert adv.priority == "urgent"
    reply, _ = command(lab, "shelve", 100, advisory_id=adv.id, by="lead", reason="drill",
                       duration_s=60)
    assert reply["ok"] and adv.state.name == "SHELVED"
    run(lab, 110, 120, **{"room-1": 38})
    effects = lab.clock_stepped(130 + step, step)
    validate_effects(effects)
    # the store keeps the moved timer (a restart goes on from it)
    stored = [e.record for e in effects if isinstance(e, Persist) and e.kind == "advisory"
              and e.record and e.record["rule"] == "testpack.levels"]
    assert [r["shelved_until"] for r in stored] == [160.0 + step]
    run(lab, 130 + step, 150 + step, **{"room-1": 38})
    assert adv.state.name == "SHELVED"  # 50 s of the 60 used
    e = run(lab, 160 + step, 160 + step, **{"room-1": 38})
    assert adv.state.name == "ACTIVE"
    assert ("unshelved", "testpack.levels", "urgent") in events(e)
    after = [x for t in range(170, 400, 10) for x in run(lab, t + step, t + step,
                                                          **{"room-1": 38})]
    conditions = [x for x in after if isinstance(x, Publish) and x.topic.endswith("/conditions")]
    assert len(conditions) >= 2 * 3  # both spaces, at least three times in 230 s
    # the report samples (every 300 s, the first at t = 0) go on: one at about t = 300
    samples = [x for x in after if isinstance(x, Persist) and x.kind == "sample"]
    assert len(samples) == 1 and 290 <= float(samples[0].record["t"]) - step <= 310
    # the budget (max_shelve_s 600 for the urgent level) counts the 60 s used
    reply, _ = command(lab, "shelve", 400 + step, advisory_id=adv.id, by="lead", reason="x",
                       duration_s=600)
    assert not reply["ok"] and "540 s are left" in reply["error"]

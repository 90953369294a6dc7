"""A hypothesis state machine drives the engine with sensor values (including silence),
ticks and commands in any order, and checks the lifecycle invariants after every step."""

from __future__ import annotations

import json
import pathlib
import tempfile
import textwrap

import pytest
from hypothesis import HealthCheck, settings
from hypothesis import strategies as st
from hypothesis.stateful import RuleBasedStateMachine, invariant, rule

from tests.engine.conftest import PACK, SITE, validate_effects
from thermowarden.config import load_site
from thermowarden.core.lifecycle import EVENTS, State
from thermowarden.effects import Publish
from thermowarden.engine import Engine
from thermowarden.rules import load_rule_packs
from thermowarden.site_model import build_site_model

_DIR = pathlib.Path(tempfile.mkdtemp(prefix="tw-machine-"))
(_DIR / "packs").mkdir()
(_DIR / "packs" / "testpack.yaml").write_text(PACK)
(_DIR / "site.yaml").write_text(textwrap.dedent(SITE))


class EngineMachine(RuleBasedStateMachine):
    def __init__(self) -> None:
        super().__init__()
        config = load_site(_DIR / "site.yaml", {})
        packs = load_rule_packs(["testpack"], config.rule_dirs, base=_DIR / "site.yaml")
        self.engine = Engine(config, build_site_model(config), packs, conditions_every_s=0,
                             start=0.0)
        self.t = 0.0
        self.retained: dict[str, dict | None] = {}
        self.last_events: list[dict] = []

    def _apply(self, effects) -> None:
        validate_effects(effects)
        for e in effects:
            if isinstance(e, Publish):
                if "/advisories/" in e.topic:
                    self.retained[e.topic] = e.payload
                if "/events/" in e.topic:
                    assert e.payload["event"] in EVENTS
                    self.last_events.append(e.payload)

    @rule(space=st.sampled_from(["room-1", "room-2"]), value=st.sampled_from(
        [25.0, 29.5, 31.0, 34.0, 36.0, 38.0]))
    def reading(self, space, value):
        self.engine.message(f"lab/{space}/ta", str(value).encode(), self.t)

    @rule(dt=st.sampled_from([10.0, 60.0, 200.0, 900.0]))
    def tick(self, dt):
        self.t += dt
        self._apply(self.engine.tick(self.t))

    @rule(verb=st.sampled_from(["acknowledge", "shelve", "unshelve"]),
          pick=st.integers(0, 5), duration=st.sampled_from([60, 300, 5000]),
          by=st.sampled_from(["Ana", "", None]))
    def command(self, verb, pick, duration, by):
        live = self.engine.live_advisories()
        adv_id = live[pick % len(live)].id if live else "missing"
        before = {a.id: (a.state, len(a.history)) for a in live}
        body = {"advisory_id": adv_id, "by": by, "reason": "test", "duration_s": duration}
        if verb != "shelve":
            body = {"advisory_id": adv_id, "by": by}
        reply, effects = self.engine.command(verb, json.dumps(body).encode(), self.t)
        self._apply(effects)
        if not reply["ok"]:
            assert effects == []
            after = {a.id: (a.state, len(a.history)) for a in self.engine.live_advisories()}
            assert after == before  # a refused command changes nothing

    @invariant()
    def one_advisory_per_space_and_rule(self):
        keys = [(a.space, a.rule) for a in self.engine.live_advisories()]
        assert len(keys) == len(set(keys))

    @invariant()
    def arrays_and_records_agree(self):
        for rt in self.engine.rules:
            for i, adv in rt.advisories.items():
                assert State(rt.state[i]) == adv.state
                assert adv.state >= State.ACTIVE
            for i in range(len(rt.state)):
                if rt.state[i] >= State.ACTIVE:
                    assert i in rt.advisories

    @invariant()
    def retained_topics_match_live_advisories(self):
        live = {f"tw/lab/spaces/{self.engine.model.space_ids[a.space]}/advisories/{a.rule}"
                for a in self.engine.live_advisories()}
        published = {t for t, p in self.retained.items() if p is not None}
        assert published == live


EngineMachine.TestCase.settings = settings(max_examples=60, stateful_step_count=40,
                                           deadline=None,
                                           suppress_health_check=[HealthCheck.too_slow])
TestEngineLifecycle = pytest.mark.long(EngineMachine.TestCase)

"""The engine: one site's state, evaluation and advisories, fed with ``now``; returns effects.

The data's path, one module per step::

    message -> ingest -> state (windows, freshness)          engine/ingest.py, engine/state.py
    tick(now) -> snapshot -> indices -> rule truths          engine/evaluation.py, health.py
              -> lifecycle per (space, rule)                 engine/advisories.py, texts.py
              -> payloads, topics, records (effects)         engine/publication.py

It does no I/O and reads no clock, so a whole day of a site replays in a test. One thread
only: the service's engine thread, or the replay loop.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any, Final

from thermowarden.config import SiteConfig
from thermowarden.core.indices import IndexTable
from thermowarden.effects import Effect, Persist
from thermowarden.engine.advisories import Advisories, Advisory, RuleRuntime
from thermowarden.engine.evaluation import Evaluation, rule_truths
from thermowarden.engine.health import PointHealth
from thermowarden.engine.ingest import IMPLAUSIBLE_REASONS, Ingestor, Rejection
from thermowarden.engine.publication import Publication
from thermowarden.engine.state import SiteState, Snapshot
from thermowarden.engine.texts import Texts
from thermowarden.rules import CompiledPack
from thermowarden.site_model import SITE, SiteModel

SAMPLE_EVERY_S: Final = 300.0
"""Every 5 minutes the key indices of every space are stored for reports."""


class Engine:
    """Evaluates a site; see the module docstring."""

    def __init__(self, config: SiteConfig, model: SiteModel, packs: Mapping[str, CompiledPack],
                 *, conditions_every_s: float = 60.0, start: float | None = None,
                 sample_every_s: float = SAMPLE_EVERY_S) -> None:
        self.config = config
        self.model = model
        self.n = model.n_spaces
        self.prefix = config.output.prefix
        self.start = start
        self.state = SiteState(model)
        self.ingest = Ingestor(model, self.state)
        self.health = PointHealth(model, self.state)
        self.evaluation = Evaluation(self.state, self.health)
        self.publication = Publication(config, model, conditions_every_s)
        self.advisories = Advisories(config, model, packs, self.publication,
                                     Texts(config, model))
        self.sample_every_s = sample_every_s
        self.last_sample = -math.inf
        self.last_table: IndexTable | None = None
        self.last_snapshot: Snapshot | None = None
        self.ticks = 0

    @property
    def rules(self) -> list[RuleRuntime]:
        return self.advisories.rules

    # ------------------------------------------------------------------ input
    def message(self, topic: str, payload: bytes, now: float,
                retained: bool = False) -> list[Rejection]:
        """A sensor message received at ``now``; returns its rejections (already counted).
        ``retained``: kept by the broker from before; without a timestamp it is refused as
        of unknown age."""
        before = self.ingest.accepted
        rejections = self.ingest.ingest(topic, payload, now, retained)
        if self.ingest.accepted != before:
            for pid in self.ingest.last_points:
                space = self.model.points[pid].space
                if space != SITE:
                    self.publication.touched[space] = True
        for r in rejections:
            if r.reason in IMPLAUSIBLE_REASONS:
                self.health.note_implausible(r.point, now)
        return rejections

    # ------------------------------------------------------------------ tick
    def tick(self, now: float) -> list[Effect]:
        """Evaluate every space at ``now`` and return what to publish and store."""
        if self.start is None:
            self.start = now
        effects: list[Effect] = []
        known_days = len(self.state.daily_means)
        snap = self.state.snapshot(now)
        if len(self.state.daily_means) != known_days and self.state.daily_means:
            effects.append(Persist("daily_means", "outdoor",
                                   {"newest_first": list(self.state.daily_means)}))
        table = self.evaluation.indices(snap, now)
        self.last_table = table
        self.last_snapshot = snap
        book = self.advisories
        env = self.evaluation.environment(snap, table, now, self.start, book.unknown_long(now))
        book.begin(env, table, lambda i: self._text_fields(snap, table, now, i))
        for rt in book.rules:
            if not rt.mask.any() and not rt.advisories:
                continue
            truths = rule_truths(rt.rule, rt.params, rt.mask, env, self.n)
            book.step(rt, truths, now, effects)
        book.flush_summaries(now, effects)
        effects.extend(self.publication.conditions_due(snap, table, now))
        if self.sample_every_s > 0 and now - self.last_sample >= self.sample_every_s:
            self.last_sample = now
            effects.append(Persist("sample", str(int(now)),
                                   self.publication.sample(table, now, snap.occupied,
                                                           snap=snap)))
        effects.extend(book.refresh_due(now))
        self.ticks += 1
        return effects

    def _text_fields(self, snap: Snapshot, table: IndexTable, now: float, i: int
                     ) -> dict[str, object]:
        """Words for the messages of space ``i`` that are not numbers: which sensors the
        health columns are about, which rules cannot be evaluated and why, and what a WBGT
        rests on."""
        fields: dict[str, object] = dict(self.health.details(i, snap))
        twa = table.get("wbgt_time_weighted")
        fields["wbgt_basis"] = (
            "the 60-minute time-weighted mean" if twa is not None and bool(twa.present[i])
            else "the spot value (the 60-minute mean is not complete yet)")
        unknown = self.advisories.unknown_detail(i, now)
        if unknown:
            fields["rules_unknown_detail"] = unknown
        return fields

    def republish_all(self) -> None:
        """Send every space's conditions and every live advisory at the next evaluation
        (after a reconnect, where retained messages may have been lost)."""
        self.publication.republish_conditions()
        self.advisories.last_refresh = -math.inf

    # ------------------------------------------------------------------ commands, restore
    def command(self, verb: str, body: bytes, now: float, audience: str | None = None,
                identity: str | None = None) -> tuple[dict[str, Any], list[Effect]]:
        """Acknowledge, shelve or unshelve an advisory; see :meth:`Advisories.command`."""
        return self.advisories.command(verb, body, now, audience, identity)

    def clock_stepped(self, now: float, step_s: float) -> None:
        """The wall clock was corrected by ``step_s`` (negative: back). After a step back,
        readings are no longer refused as older than the latest one taken before it."""
        if step_s < 0:
            self.state.clock_stepped_back(now)

    def restore(self, records: list[dict[str, Any]]) -> list[str]:
        """Bring back stored live advisories; see :meth:`Advisories.restore`."""
        return self.advisories.restore(records)

    def digest(self, now: float, since: float) -> list[Effect]:
        """The daily digest per audience; see :meth:`Advisories.digest`."""
        return self.advisories.digest(now, since)

    # ------------------------------------------------------------------ queries
    def conditions_payload(self, i: int) -> dict[str, Any]:
        """The latest published form of space ``i``'s conditions."""
        assert self.last_table is not None and self.last_snapshot is not None
        return self.publication.conditions_payload(self.last_snapshot, self.last_table, i)

    def advisory_payload(self, adv: Advisory) -> dict[str, Any]:
        return self.publication.advisory_payload(adv)

    def live_advisories(self) -> list[Advisory]:
        return self.advisories.live()

    def active_counts(self) -> dict[tuple[str, str], int]:
        """(rule, priority) -> live advisories, for metrics."""
        out: dict[tuple[str, str], int] = {}
        for adv in self.live_advisories():
            out[(adv.rule, adv.priority)] = out.get((adv.rule, adv.priority), 0) + 1
        return out

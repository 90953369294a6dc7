"""Ahead-of-time advisories and the advisories they foresee (a rule's ``foresees``).

When the foreseen advisory of the same space is live at the foreseen priority or higher,
the ahead-of-time advisory has turned into it: it ends at once, its retained message is
emptied and its ``cleared`` event is stored with a history entry naming the advisory it
turned into (``turned_into``), but not sent to the audience: the advisory it turned into is
the message of that moment (alarm-management practice: every notification carries
something new). It is not raised again while that advisory stands. Withdrawal (the trend
turned, the day clouded over) is the ahead-of-time rule's own ``clear`` condition, and is
sent."""

from __future__ import annotations

import dataclasses

import numpy as np

from thermowarden.config.rule_packs import PRIORITIES
from thermowarden.core.columns import BoolArray
from thermowarden.core.lifecycle import State, Trigger
from thermowarden.effects import Effect, Publish
from thermowarden.engine.advisories import Advisories
from thermowarden.engine.rule_runtime import RuleRuntime
from thermowarden.engine.rule_truths import RuleTruths


class Crossings:
    """The links of one engine's rules: ahead-of-time rule -> (foreseen rule, priority)."""

    def __init__(self, book: Advisories) -> None:
        self.book = book
        by_key = {rt.rule.key: rt for rt in book.rules}
        self.links: dict[int, tuple[RuleRuntime, RuleRuntime, int]] = {}
        for rt in book.rules:
            f = rt.rule.config.foresees
            if f is None or f.rule not in by_key:
                continue
            level = PRIORITIES.index(f.priority) if f.priority is not None else 0
            self.links[id(rt)] = (rt, by_key[f.rule], level)

    def __bool__(self) -> bool:
        return bool(self.links)

    def reached(self, ahead: RuleRuntime) -> BoolArray | None:
        """Per space: the advisory ``ahead`` foresees is live at its priority (None: ``ahead``
        foresees nothing)."""
        link = self.links.get(id(ahead))
        if link is None:
            return None
        _, target, level = link
        out: BoolArray = (target.state >= State.ACTIVE) & (target.level >= level)
        return out

    def hold(self, ahead: RuleRuntime, truths: RuleTruths) -> RuleTruths:
        """``truths`` with raising held back where the foreseen advisory already stands."""
        reached = self.reached(ahead)
        if reached is None or not reached.any():
            return truths
        return dataclasses.replace(truths, hold=truths.hold | reached)

    def settle(self, now: float, effects: list[Effect]) -> None:
        """End every ahead-of-time advisory whose foreseen advisory is now live."""
        for ahead, target, _ in self.links.values():
            if not ahead.advisories:
                continue
            reached = self.reached(ahead)
            assert reached is not None
            for i in [i for i in ahead.advisories if bool(reached[i])]:
                into = target.advisories.get(i)
                ahead_id = ahead.advisories[i].id
                audience = ahead.rule.config.audience
                flood = self.book.floods.flood[audience]
                counted = len(flood)
                before = len(effects)
                self.book.apply(ahead, i, Trigger.OFF_DELAY_ELAPSED, now, effects,
                                 extra={"turned_into": into.id if into is not None else None})
                ahead.pending_since[i] = np.nan
                sent = [e for e in effects[before:]
                        if isinstance(e, Publish) and "/events/" in e.topic]
                if sent:
                    effects[before:] = [e for e in effects[before:] if e not in sent]
                    if len(flood) > counted:
                        flood.pop()  # not sent: not counted against the flood limit
                else:
                    held = self.book.floods.suppressed[audience]
                    if held and held[-1].get("event") == "cleared" \
                            and held[-1]["advisory"]["id"] == ahead_id:
                        held.pop()  # held back for a flood summary: not summarised either

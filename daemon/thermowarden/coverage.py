"""Rule coverage of a replay: which rules fired, how often, and why the others never did.

A replay's ``on_batch`` hook hands :class:`Coverage` each batch of ticks; it evaluates each
rule's raise condition over the batch (as the engine does: :func:`rule_truths` on the
batch's inputs and indices) and counts, per rule, the space-ticks at which the rule
applied, its condition was known, its space occupied, and its condition held, and the
longest time it held without a break in one space. With the replay's events it then says
per rule whether it raised an advisory, how many and in how many spaces, the notifications
its audience received for it, and for a rule that never raised one the first reason in this
order: no space enables its pack, it applies to no space (``applies_to``), every space it
applies to lacks an input it needs (which), its inputs were never known, its spaces were
never occupied (an ``occupied_only`` rule), its condition never held, or it held for less
than its ``on_delay_s``.

Each rule has a notification allowance (:func:`allowance_per_space`): what one space may
send its audience for it in one day of feed, read from the rule's own settings. A rule over
its allowance chatters; the figure is printed beside what it sent.

Counts are in space-ticks (one space at one evaluation), times in seconds of feed time.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import numpy.typing as npt

from thermowarden.config import SiteConfig
from thermowarden.config.rule_packs import RuleConfig
from thermowarden.engine import Engine
from thermowarden.engine.rule_truths import rule_truths
from thermowarden.rules import (
    CompiledPack,
    missing_inputs,
    provided_inputs,
    rule_applies,
)
from thermowarden.site_model import SiteModel

EPISODE_NOTIFICATIONS = 3
"""Notifications one advisory episode sends at its lowest level: raised, cleared and one
follow-up (advice followed that had no effect). One episode per rule and space a day is
the expectation on a day of ordinary weather (common practice, no source): a rule that
raises, clears and raises again in the same space within a day sends more, and is over."""
LEVEL_STEP_NOTIFICATIONS = 2
"""Per level above a levelled rule's lowest: one escalation and one step back down."""
DAY_S = 86_400.0
FloatArray = npt.NDArray[np.float64]


def allowance_per_space(rule: RuleConfig, feed_s: float) -> int:
    """Notifications a rule may send for one space over ``feed_s`` seconds of feed (at
    least one day): per day, :data:`EPISODE_NOTIFICATIONS`, plus
    :data:`LEVEL_STEP_NOTIFICATIONS` per level above its lowest, plus the reminders its
    shortest ``renotify_s`` (the rule's or a level's) allows over the whole feed (an
    advisory standing from the first minute to the last)."""
    days = max(1.0, feed_s / DAY_S)
    steps = max(0, len(rule.levels) - 1)
    per_day = EPISODE_NOTIFICATIONS + LEVEL_STEP_NOTIFICATIONS * steps
    intervals = [x for x in [rule.renotify_s, *(lv.renotify_s for lv in rule.levels)]
                 if x is not None and x > 0]
    reminders = int(feed_s // min(intervals)) if intervals else 0
    return int(per_day * days) + reminders


@dataclass
class RuleCoverage:
    """One rule's figures over a replay (see the module's docstring)."""

    rule: str
    pack: str
    audience: str
    title: str
    occupied_only: bool
    spaces_enabled: list[str] = field(default_factory=list)
    """Spaces whose rule packs include the rule's pack and that its ``applies_to`` fits."""
    spaces_evaluated: list[str] = field(default_factory=list)
    """... of those, the ones with a point (or an assumption) for every input it needs."""
    missing: dict[str, list[str]] = field(default_factory=dict)
    """Space -> the inputs it needs that the space has no point for."""
    ticks: int = 0
    ticks_known: int = 0
    ticks_occupied: int = 0
    ticks_true: int = 0
    longest_true_s: float = 0.0
    raised: int = 0
    spaces_raised: list[str] = field(default_factory=list)
    notifications: int = 0
    allowance: int = 0
    """Notifications allowed: :func:`allowance_per_space` times the spaces it raised in."""
    why_not: str | None = None

    def as_dict(self) -> dict[str, Any]:
        return {"rule": self.rule, "audience": self.audience, "title": self.title,
                "fired": self.raised > 0, "raised": self.raised,
                "spaces_raised": self.spaces_raised, "notifications": self.notifications,
                "allowance": self.allowance,
                "spaces_enabled": len(self.spaces_enabled),
                "spaces_evaluated": len(self.spaces_evaluated),
                "space_ticks": self.ticks, "space_ticks_known": self.ticks_known,
                "space_ticks_occupied": self.ticks_occupied,
                "space_ticks_true": self.ticks_true,
                "longest_true_s": round(self.longest_true_s, 1),
                "missing_inputs": self.missing, "why_not": self.why_not}


class Coverage:
    """Collects rule coverage from a replay: pass :meth:`on_batch` as ``replay``'s
    ``on_batch`` and, after the replay, call :meth:`finish` with its events."""

    def __init__(self) -> None:
        self.rules: dict[str, RuleCoverage] = {}
        self.ids: list[str] = []
        self.config: SiteConfig | None = None
        self._pending: dict[str, FloatArray] = {}
        self._longest: dict[str, FloatArray] = {}
        self._configs: dict[str, RuleConfig] = {}

    def _setup(self, config: SiteConfig, model: SiteModel,
               packs: Mapping[str, CompiledPack]) -> None:
        """Which spaces enable each rule and which inputs they lack (as the engine's own
        masks: the pack enabled, ``applies_to`` fits, a point for every input)."""
        self.config = config
        ids = [s.id for s in config.spaces]
        self.ids = ids
        provided = provided_inputs(model)
        for pack_name in sorted(packs):
            pack = packs[pack_name]
            lacking: dict[tuple[str, int], list[str]] = {}
            enabled = [i for i, s in enumerate(config.spaces)
                       if pack_name in config.rule_packs(s)]
            for i in enabled:
                for rule_id, names in missing_inputs(pack, model, i, provided):
                    lacking[(rule_id, i)] = names
            for rule in pack.rules:
                cov = RuleCoverage(rule.key, pack_name, rule.config.audience,
                                   rule.config.title, rule.config.occupied_only)
                for i in enabled:
                    if not rule_applies(rule.config, config.spaces[i]):
                        continue
                    cov.spaces_enabled.append(ids[i])
                    if (rule.config.id, i) in lacking:
                        cov.missing[ids[i]] = lacking[(rule.config.id, i)]
                    else:
                        cov.spaces_evaluated.append(ids[i])
                self.rules[rule.key] = cov
                self._configs[rule.key] = rule.config
                self._pending[rule.key] = np.full(len(ids), np.nan)
                self._longest[rule.key] = np.zeros(len(ids))

    def on_batch(self, engine: Engine, _result: object) -> None:
        """Count one batch of ticks (``engine.last_batch``)."""
        if self.config is None:
            self._setup(engine.config, engine.model, engine.packs)
        if engine.last_batch is None:
            return
        snap, table = engine.last_batch
        k, n = snap.k, len(self.ids)
        if n == 0 or k == 0:
            return
        env = engine.evaluation.environment(snap, table, engine.start or 0.0)
        times = np.asarray(snap.times, dtype=np.float64)
        occupied = np.asarray(env["occupied"], dtype=bool)
        for rt in engine.rules:
            cov = self.rules.get(rt.rule.key)
            if cov is None or not rt.mask.any():
                continue
            mask = np.tile(rt.mask, k)
            params = {p: np.tile(v, k) for p, v in rt.params.items()}
            truths = rule_truths(rt.rule, params, mask, env, k * n)
            known = truths.raise_.known & ~truths.lacking & mask
            true = (truths.raise_.true & mask).reshape(k, n)
            cov.ticks += int(mask.sum())
            cov.ticks_known += int(known.sum())
            cov.ticks_occupied += int((occupied & mask).sum())
            cov.ticks_true += int(true.sum())
            start, longest = self._pending[rt.rule.key], self._longest[rt.rule.key]
            for j in range(k):
                row = true[j]
                start = np.where(row & np.isnan(start), times[j], start)
                longest = np.maximum(longest, np.where(row, times[j] - start, 0.0))
                start = np.where(row, start, np.nan)
            self._pending[rt.rule.key], self._longest[rt.rule.key] = start, longest
            cov.longest_true_s = float(longest.max())

    def finish(self, raised_events: list[dict[str, Any]], sent_events: list[dict[str, Any]],
               feed_s: float) -> list[RuleCoverage]:
        """Per rule (in pack and rule order) its figures and, for a rule that never raised
        an advisory, why; from the engine's own events (``ReplayResult.raised_events``)
        and what the audiences received (``ReplayResult.events``), in either form, over
        ``feed_s`` seconds of feed."""
        raised: Counter[str] = Counter()
        spaces: dict[str, set[str]] = {}
        for e in raised_events:
            rule, space, kind = _fields(e)
            if kind == "raised" and rule is not None:
                raised[rule] += 1
                spaces.setdefault(rule, set()).add(space or "")
        sent: Counter[str] = Counter(r for e in sent_events if (r := _fields(e)[0]))
        out = []
        for key, cov in self.rules.items():
            cov.raised = raised[key]
            cov.spaces_raised = sorted(spaces.get(key, ()))
            cov.notifications = sent[key]
            cov.allowance = (allowance_per_space(self._configs[key], feed_s)
                             * len(cov.spaces_raised))
            cov.why_not = None if cov.raised else self._why_not(cov, key)
            out.append(cov)
        return out

    def _why_not(self, cov: RuleCoverage, key: str) -> str:
        config = self.config
        if config is None or not any(cov.pack in config.rule_packs(s) for s in config.spaces):
            return "no space enables its pack"
        if not cov.spaces_enabled:
            return "applies to no space of the site (applies_to)"
        if not cov.spaces_evaluated:
            detail = "; ".join(f"{s}: {', '.join(m)}" for s, m in sorted(cov.missing.items()))
            return f"inputs missing in every space it applies to ({detail})"
        if cov.ticks_known == 0:
            return "its inputs were never known together"
        if cov.occupied_only and cov.ticks_occupied == 0:
            return "its spaces were never occupied (it holds only in occupied spaces)"
        if cov.ticks_true == 0:
            return "its condition never held"
        return (f"its condition held for at most {cov.longest_true_s:.0f} s in one space, "
                "not long enough to raise an advisory (on_delay_s, hold-back or flood)")


def _fields(e: dict[str, Any]) -> tuple[str | None, str | None, str]:
    """(rule, space, event) of an event as published or as one line."""
    if "advisory" in e:
        adv = e["advisory"]
        return adv["rule"], adv["space"]["id"], e["event"]
    return e.get("rule"), e.get("space"), e["event"]


FLOOD_10_MIN = 10
"""An audience's notifications in its busiest 10 minutes should stay at or below this: EEMUA
191 and ANSI/ISA-18.2 call more than 10 alarms in 10 minutes a flood (from memory)."""


def audience_figures(rules: list[RuleCoverage], summary: dict[str, Any]
                     ) -> list[dict[str, Any]]:
    """Per audience: notifications sent (``summarise``'s figure, flood summaries included),
    the sum of its rules' allowances, and the busiest 10 minutes against
    :data:`FLOOD_10_MIN`."""
    out = []
    audiences = summary["audiences"]
    for aud in sorted({r.audience for r in rules} | set(audiences)):
        a = audiences.get(aud, {})
        out.append({"audience": aud, "notifications": a.get("notifications", 0),
                    "allowance": sum(r.allowance for r in rules if r.audience == aud),
                    "busiest_10_min": a.get("busiest_10_min", 0),
                    "busiest_10_min_limit": FLOOD_10_MIN})
    return out


def format_coverage(figures: Mapping[str, Any]) -> str:
    """:func:`thermowarden.replay.replay_coverage`'s figures as tables a person reads."""
    rules = figures["rules"]
    fired = [r for r in rules if r["fired"]]
    hours = figures.get("feed_hours")
    span = f"{hours:g} h of feed" if hours is not None else "the feed"
    lines = [f"Rule coverage over {span}: {len(fired)} of {len(rules)} rules raised "
             "an advisory", ""]
    width = max([len(f"{r['rule']} ({r['title']})") for r in rules] + [10])
    lines.append(f"  {'rule':<{width}}  {'audience':<11} {'raised':>6} {'spaces':>6} "
                 f"{'sent':>5} {'allowed':>7}")
    for r in fired:
        over = "  over its allowance" if r["notifications"] > r["allowance"] else ""
        name = f"{r['rule']} ({r['title']})"
        lines.append(f"  {name:<{width}}  {r['audience']:<11} {r['raised']:>6} "
                     f"{len(r['spaces_raised']):>6} {r['notifications']:>5} "
                     f"{r['allowance']:>7}{over}")
    silent = [r for r in rules if not r["fired"]]
    if silent:
        lines += ["", "Rules that raised nothing, and why:"]
        for r in silent:
            lines.append(f"  {r['rule']} ({r['title']}): {r['why_not']}")
    lines += ["", "Notifications per audience",
              f"  {'audience':<11} {'sent':>5} {'allowed':>7} {'busiest 10 min':>15}"]
    for a in figures["audiences"]:
        flags = []
        if a["notifications"] > a["allowance"]:
            flags.append("over the sum of its rules' allowances")
        if a["busiest_10_min"] > a["busiest_10_min_limit"]:
            flags.append(f"a flood (over {a['busiest_10_min_limit']} in 10 minutes)")
        lines.append(f"  {a['audience']:<11} {a['notifications']:>5} {a['allowance']:>7} "
                     f"{a['busiest_10_min']:>15}" + ("  " + "; ".join(flags) if flags else ""))
    lines += ["", "Allowed: per space a rule raised in and day of feed, "
              f"{EPISODE_NOTIFICATIONS} notifications (raised, cleared, one follow-up), "
              f"{LEVEL_STEP_NOTIFICATIONS} more per level above its lowest, and the "
              "reminders its shortest renotify_s allows over the feed."]
    return "\n".join(lines)

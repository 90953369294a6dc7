"""Advice acted on: when the sensors show the equipment in the state the advice asks for
(blinds lowered, fans on), the record of it (the target quantity then and the value the
advice predicts), the checks of that quantity at the rule's ``effect.checks_s``, the notice
that it has not helped once the expected time has passed with the condition still true, and
on clearing whether it helped."""

from __future__ import annotations

import math
from typing import Any

from thermowarden.core.json_values import iso, num
from thermowarden.core.lifecycle import State
from thermowarden.engine.advisory import Advisory
from thermowarden.engine.rule_runtime import EFFECT_WAIT_S, RuleRuntime
from thermowarden.engine.texts import RenderContext, number_at


def record(rt: RuleRuntime, adv: Advisory, shown: Advisory, now: float,
           ctx: RenderContext) -> dict[str, Any]:
    """The record of ``adv``'s advice acted on at ``now``: the target quantity and the
    value the advice predicts (read from ``shown``, rendered with this moment's numbers)."""
    rec: dict[str, Any] = {"at": iso(now), "cleared_after": None,
                           "cleared_after_min": None, "helped": None,
                           "minutes_after_raised": round((now - adv.raised_at) / 60, 1),
                           "effect": None, "_t": now}
    eff = rt.rule.config.effect
    if eff is not None and rt.rule.effect_quantity is not None:
        value = number_at(rt.rule.effect_quantity, ctx.base, rt.params, adv.space)
        predicted = (shown.benefit.get(eff.predicted, {}).get("value")
                     if eff.predicted else None)
        rec["effect"] = {
            "quantity": eff.quantity, "value_then": num(value), "predicted": predicted,
            "predicted_change": (num(predicted - value) if predicted is not None
                                 and math.isfinite(value) else None),
            "realised_change": None, "checks": []}
    return rec


def follow(rt: RuleRuntime, adv: Advisory, now: float, ctx: RenderContext) -> int | None:
    """Record the target quantity at the rule's check times after the action; once the
    expected time has passed with the rule's condition still true, mark the advice as not
    having helped and return the minutes waited (the caller says so, once).

    Not while the condition is known to be false (between the raise and the clear
    thresholds, or during the off-delay): the action has at least brought it back
    there, and "no effect" would contradict the numbers; nor while it is unknown (a
    reading missing: the notice would have no numbers). Should it be true again with
    the equipment still as asked, the notice comes then."""
    rec = adv.acted_on
    assert rec is not None  # (and not settled: the step does not call it then)
    eff = rt.rule.config.effect
    t0 = float(rec.get("_t", adv.updated_at))
    wait_s = eff.wait_s if eff is not None else EFFECT_WAIT_S
    done: set[float] = set()
    quantity = rt.rule.effect_quantity
    checked = eff is not None and rec.get("effect") is not None and quantity is not None
    if checked and eff is not None and quantity is not None:
        done = {c["after_min"] for c in rec["effect"]["checks"]}
        for after in eff.checks_s:
            if now - t0 >= after and after / 60 not in done:
                v = number_at(quantity, ctx.base, rt.params, adv.space)
                rec["effect"]["checks"].append({"after_min": after / 60, "value": num(v)})
                then = rec["effect"]["value_then"]
                if then is not None and math.isfinite(v):
                    rec["effect"]["realised_change"] = num(v - then)
    i = adv.space
    if (not adv.effect_overdue and now - t0 >= wait_s and rt.acted_now[i]
            and rt.raise_true[i] and State(rt.state[i]) in (State.ACTIVE, State.ACKNOWLEDGED)):
        adv.effect_overdue = True
        rec["helped"] = False
        return round((now - t0) / 60)
    checks_s = eff.checks_s if checked and eff is not None else ()
    if adv.effect_overdue and all(after / 60 in done or now - t0 >= after
                                  for after in checks_s):
        # said, and every check taken (before or just now): nothing more to do for it
        rt.settled[i] = rec
    return None


def close(rt: RuleRuntime, rec: dict[str, Any], i: int, now: float,
          ctx: RenderContext) -> None:
    """The advisory of space ``i`` cleared at ``now``: whether the advice acted on helped
    (it cleared within the expected time) and the change it brought."""
    t0 = float(rec.get("_t", now))
    rec["cleared_after"] = True
    rec["cleared_after_min"] = round((now - t0) / 60, 1)
    eff = rt.rule.config.effect
    wait_s = eff.wait_s if eff is not None else EFFECT_WAIT_S
    rec["helped"] = bool(now - t0 <= wait_s)
    if rec.get("effect") is not None and rt.rule.effect_quantity is not None \
            and ctx.table is not None:
        v = number_at(rt.rule.effect_quantity, ctx.base, rt.params, i)
        then = rec["effect"]["value_then"]
        if then is not None and math.isfinite(v):
            rec["effect"]["realised_change"] = num(v - then)

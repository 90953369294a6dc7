"""Commands on advisories (acknowledge, shelve, unshelve) and who may give them: the
command is checked in full (its fields, the advisory live and of the audience the command
was sent to, the rule's shelving limits per space and day) before anything changes; the
reply says what was done or why nothing was."""

from __future__ import annotations

import json
from typing import Any, Final

from thermowarden.core.json_values import iso
from thermowarden.core.lifecycle import IllegalTransition, State, Trigger, transition
from thermowarden.effects import Effect
from thermowarden.engine.advisories import Advisories
from thermowarden.engine.publication import REPLY_SCHEMA
from thermowarden.engine.rule_runtime import RuleRuntime

SHELVE_BUDGET_WINDOW_S: Final = 86_400.0
"""Shelved time is summed over this rolling window for ``max_shelved_per_day_s``."""


class CommandError(ValueError):
    """A command that changes nothing; the message goes back in the reply."""


def command(book: Advisories, verb: str, body: bytes, now: float,
            audience: str | None = None, identity: str | None = None
            ) -> tuple[dict[str, Any], list[Effect]]:
    """Acknowledge, shelve or unshelve an advisory. Returns the reply and the effects;
    on any error nothing changes and the reply says why.

    ``audience``: the audience the command was sent to (its topic); it must be the
    advisory's, so a broker ACL per audience decides who may act. ``identity``: who
    sent it as the broker or a trusted gateway vouches (recorded beside ``by``)."""
    request_id = None
    try:
        try:
            data = json.loads(body.decode("utf-8"))
        except (UnicodeDecodeError, ValueError, RecursionError):
            raise CommandError("the body is not a JSON object") from None
        if not isinstance(data, dict):
            raise CommandError("the body is not a JSON object")
        request_id = data.get("request_id")
        effects = _command(book, verb, data, now, audience, identity)
        reply = {"schema": REPLY_SCHEMA, "ok": True, "verb": verb,
                 "advisory_id": data.get("advisory_id"), "request_id": request_id,
                 "at": iso(now)}
        return reply, effects
    except (CommandError, IllegalTransition) as exc:
        return ({"schema": REPLY_SCHEMA, "ok": False, "verb": verb, "error": str(exc),
                 "request_id": request_id, "at": iso(now)}, [])


def _command(book: Advisories, verb: str, data: dict[str, Any], now: float,
             audience: str | None, identity: str | None) -> list[Effect]:
    allowed = {"acknowledge": {"advisory_id", "by", "note", "request_id", "reply_to"},
               "shelve": {"advisory_id", "by", "reason", "duration_s", "request_id",
                          "reply_to"},
               "unshelve": {"advisory_id", "by", "note", "request_id", "reply_to"}}
    if verb not in allowed:
        raise CommandError(f"unknown command {verb!r} (acknowledge, shelve, unshelve)")
    extra = set(data) - allowed[verb]
    if extra:
        raise CommandError(f"unknown field(s) {', '.join(sorted(extra))}")
    adv_id = data.get("advisory_id")
    by = data.get("by")
    if not isinstance(adv_id, str) or adv_id not in book.by_id:
        raise CommandError(f"no live advisory {adv_id!r}")
    if not isinstance(by, str) or not by.strip() or len(by) > 100:
        raise CommandError("'by' must name who acted")
    rt, i = book.by_id[adv_id]
    adv = rt.advisories[i]
    if audience is not None and audience != adv.audience:
        raise CommandError(f"advisory {adv_id} is for {adv.audience}; send the command to "
                           f"{book.config.output.prefix}/commands/{adv.audience}/{verb}")
    who: dict[str, Any] = {"by": by}
    if identity:
        who["identity"] = identity
    effects: list[Effect] = []
    note = data.get("note")
    if note is not None and (not isinstance(note, str) or len(note) > 1000):
        raise CommandError("'note' must be text of at most 1000 characters")
    if verb == "acknowledge":
        transition(State(rt.state[i]), Trigger.ACKNOWLEDGE)  # raises before any change
        adv.acknowledged = {**who, "at": iso(now), "note": note}
        book.apply(rt, i, Trigger.ACKNOWLEDGE, now, effects, by=by,
                    extra=_extra(identity, note=note))
    elif verb == "shelve":
        dur = data.get("duration_s")
        reason = data.get("reason")
        if isinstance(dur, bool) or not isinstance(dur, int | float) or not dur > 0:
            raise CommandError("'duration_s' must be a positive number of seconds")
        limit = rt.rule.config.max_shelve_s
        if dur > limit:
            raise CommandError(f"rule {rt.rule.key} may be shelved for at most {limit:g} s")
        if not isinstance(reason, str) or not reason.strip():
            raise CommandError("'reason' must say why it is shelved")
        transition(State(rt.state[i]), Trigger.SHELVE)  # raises before any change
        spans = _shelvings_today(rt, i, now)
        budget = min(rt.rule.config.max_shelved_per_day_s or limit, SHELVE_BUDGET_WINDOW_S)
        used = sum(max(0.0, min(end, now) - start) for start, end in spans)
        if spans and spans[-1][1] > now:
            used_current = now - spans[-1][0]
            spans = spans[:-1]  # a new shelving replaces the running one
        else:
            used_current = 0.0
        left = budget - used
        if float(dur) > left:
            raise CommandError(
                f"rule {rt.rule.key} may be shelved for at most {budget:g} s in any 24 h "
                f"per space; {max(left, 0.0):.0f} s are left (used {used:.0f} s, "
                f"{used_current:.0f} s of them by the running shelving)")
        spans.append([now, now + float(dur)])
        rt.shelvings[i] = spans
        rt.shelved_until[i] = now + float(dur)
        adv.shelved = {**who, "at": iso(now), "reason": reason,
                       "until": iso(now + float(dur))}
        book.apply(rt, i, Trigger.SHELVE, now, effects, by=by,
                    extra={**(_extra(identity) or {}), "reason": reason,
                           "until": iso(now + float(dur))})
    else:
        book.apply(rt, i, Trigger.UNSHELVE, now, effects, by=by,
                    extra=_extra(identity, note=note))
    return effects


def _shelvings_today(rt: RuleRuntime, i: int, now: float) -> list[list[float]]:
    """The shelvings of space ``i`` that overlap the last 24 hours (older ones go)."""
    spans = [s for s in rt.shelvings.get(i, []) if s[1] > now - SHELVE_BUDGET_WINDOW_S]
    for s in spans:
        s[0] = max(s[0], now - SHELVE_BUDGET_WINDOW_S)
    return spans



def _extra(identity: str | None, **fields: Any) -> dict[str, Any] | None:
    """History details: the given non-empty fields and the sender's vouched identity."""
    out = {k: v for k, v in fields.items() if v}
    if identity:
        out["identity"] = identity
    return out or None

"""What a restart, or another instance of a group, needs to continue a live advisory: its
lifecycle timers beside the stored (and retained) record, and bringing advisories back
from such records without raising them again."""

from __future__ import annotations

import datetime as dt
from collections import deque
from typing import Any

import numpy as np

from thermowarden.core.json_values import num
from thermowarden.core.lifecycle import State
from thermowarden.engine.advisory import Advisory
from thermowarden.engine.rule_runtime import RuleRuntime
from thermowarden.site_model import SiteModel


def timers(rt: RuleRuntime, i: int) -> dict[str, Any]:
    """The lifecycle state a restart or another instance needs to continue the live
    advisory of space ``i`` (what its last event said, not a refreshed copy's)."""
    own = rt.advisories[i]
    return {
        "state": int(rt.state[i]), "level": int(rt.level[i]),
        "last_notified": num(float(rt.last_notified[i])),
        "shelved_until": num(float(rt.shelved_until[i])),
        "raised_times": list(rt.raised_times.get(i, ())),
        "shelvings": rt.shelvings.get(i, []),
        "event_count": rt.event_count.get(i, 0),
        "lowered": own.lowered,
        # what its last event said (a refreshed message shows newer numbers)
        "said": {"title": own.title, "advice": own.advice, "rationale": own.rationale,
                 "numbers": own.numbers, "benefit": own.benefit,
                 "numbers_at": own.numbers_at},
    }


def restore(rules: list[RuleRuntime], model: SiteModel,
            by_id: dict[str, tuple[RuleRuntime, int]], records: list[dict[str, Any]],
            malformed: list[str] | None = None) -> list[str]:
    """Bring back live advisories stored before a restart, without raising them again.

    Returns a note for each record that could not be restored (its space or rule is
    no longer configured, or its record is malformed). Conditions are re-evaluated from
    fresh readings; until then an advisory stays as it was (unknown never clears).
    ``malformed``, when given, also receives ``"<space>/<rule>: <what is wrong>"`` for
    each malformed record (the service refuses to start on a damaged store).
    """
    notes: list[str] = []
    by_key = {rt.rule.key: rt for rt in rules}
    for rec in records:
        rt = by_key.get(rec.get("rule", ""))
        i = model.space_index.get(rec.get("space", ""))
        if rt is None or i is None:
            notes.append(f"advisory {rec.get('space')}/{rec.get('rule')} not restored: "
                         "its space or rule is no longer configured")
            continue
        try:
            p = rec["payload"]
            adv = Advisory(
                id=str(p["id"]), space=i, rule=rt.rule.key, audience=p["audience"],
                priority=p["priority"], state=State(rec["state"]),
                raised_at=float(rec["raised_at"]), updated_at=float(rec["updated_at"]),
                title=p["title"], advice=p["advice"], rationale=p["rationale"],
                numbers=p["numbers"], benefit=p["benefit"], cautions=p["cautions"],
                acknowledged=p["acknowledged"], shelved=p["shelved"],
                acted_on=(dict(p["acted_on"]) if p["acted_on"] is not None else None),
                chattering=p["chattering"],
                history=list(p["history"]))
            seq = p.get("seq", 0)
            if isinstance(seq, bool) or not isinstance(seq, int) or seq < 0:
                raise TypeError("seq must be a whole number, 0 or more")
            adv.seq = seq
            level = int(rec["level"])
            ln = rec.get("last_notified")
            last_notified = float(ln) if ln is not None else adv.raised_at
            su = rec.get("shelved_until")
            shelved_until = float(su) if su is not None else np.nan
            raised_times = deque(float(t) for t in rec.get("raised_times", []))
            if adv.acted_on is not None:
                adv.acted_on["_t"] = _epoch(adv.acted_on["at"])
                adv.effect_overdue = adv.acted_on.get("helped") is False
            shelvings = [list(map(float, sh)) for sh in rec.get("shelvings", [])]
            event_count = int(rec.get("event_count", len(adv.history)))
            shown_at = p.get("numbers_at")
            adv.numbers_at = _epoch(shown_at) if shown_at is not None else None
            said = rec.get("said")
            if said is not None:
                texts = [said["title"], said["advice"], said["rationale"]]
                if not all(isinstance(t, str) for t in texts):
                    raise TypeError("said: title, advice and rationale must be text")
                numbers, benefit = said.get("numbers", adv.numbers), \
                    said.get("benefit", adv.benefit)
                if not (isinstance(numbers, dict) and isinstance(benefit, dict)):
                    raise TypeError("said: numbers and benefit must be objects")
                adv.title, adv.advice, adv.rationale = texts
                adv.numbers, adv.benefit = numbers, benefit
                said_at = said.get("numbers_at")
                adv.numbers_at = None if said_at is None else float(said_at)
        except (KeyError, TypeError, ValueError, AttributeError, OverflowError) as exc:
            # a record from another instance (through the broker) or a damaged row:
            # nothing of it is taken, and nothing half-restored is left behind
            notes.append(f"advisory {rec.get('space')}/{rec.get('rule')} not restored: "
                         f"its record is malformed ({type(exc).__name__}: {exc})")
            if malformed is not None:
                malformed.append(f"{rec.get('space')}/{rec.get('rule')}: "
                                 f"{type(exc).__name__}: {exc}")
            continue
        rt.state[i] = adv.state
        rt.level[i] = level
        rt.last_notified[i] = last_notified
        rt.shelved_until[i] = shelved_until
        rt.raised_times[i] = raised_times
        rt.shelvings[i] = shelvings
        rt.event_count[i] = event_count
        adv.lowered = rec.get("lowered") is True
        rt.advisories[i] = adv
        by_id[adv.id] = (rt, i)
    return notes



def _epoch(text: str) -> float:
    return dt.datetime.fromisoformat(text.replace("Z", "+00:00")).timestamp()

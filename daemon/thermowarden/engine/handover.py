"""Advisories moving between the instances of a group: continuing the live advisories
another instance published (their retained messages carry a ``handover`` with the lifecycle
timers), and reconciling, when a standby takes spaces over, what it computed with what was
published (the published wins; an acknowledgement or shelving it applied survives)."""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from thermowarden.core.columns import BoolArray
from thermowarden.core.lifecycle import State
from thermowarden.effects import Effect
from thermowarden.engine import advisory_records
from thermowarden.engine.advisories import Advisories
from thermowarden.engine.advisory import Advisory
from thermowarden.engine.rule_runtime import RuleRuntime


def adopt(book: Advisories, owned: BoolArray, payloads: Iterable[dict[str, Any]],
          now: float, *, by: str | None = None, own: Mapping[str, Own] | None = None
          ) -> tuple[list[str], list[Effect]]:
    """Continue live advisories another instance of the group published (their
    retained messages with ``handover``): the same advisory id, history (plus a
    ``moved`` entry), priority, acknowledgement, shelving, reminders and advice waiting
    for its effect. Only advisories of owned spaces are taken; one this instance already
    has is kept unless the message is newer. Call before the space's first evaluation.
    ``owned``: the spaces this instance evaluates. ``own`` (advisory id -> what this
    instance had of it, from :func:`reconcile`): an acknowledgement or shelving this
    instance applied that the message lacks is kept (:func:`merge_own`). Returns notes on
    what was not taken and the effects (the retained message with the ``moved`` entry,
    the store row)."""
    records: list[dict[str, Any]] = []
    notes: list[str] = []
    for p in payloads:
        h = p.get("handover")
        try:
            sid = p["space"]["id"]
            rule = p["rule"]
            aid = p["id"]
        except (KeyError, TypeError):
            notes.append("an advisory message without space, rule or id was not taken")
            continue
        if not (isinstance(sid, str) and isinstance(rule, str) and isinstance(aid, str)):
            notes.append("an advisory message whose space, rule or id is not text was "
                         "not taken")
            continue
        i = book.model.space_index.get(sid)
        if i is None or not owned[i]:
            continue
        if not isinstance(h, dict):
            notes.append(f"advisory {sid}/{rule} not taken: its message carries no "
                         "handover state")
            continue
        mine = next((a for rt in book.rules if rt.rule.key == rule
                     for j, a in rt.advisories.items() if j == i), None)
        updated = h.get("updated_at")
        if isinstance(updated, bool) or not isinstance(updated, int | float):
            notes.append(f"advisory {sid}/{rule} not taken: its handover state has no "
                         "time")
            continue
        if mine is not None and (mine.id != aid or mine.updated_at >= updated):
            continue
        # the message's own space, rule and payload win over anything in its handover
        records.append({**h, "payload": p, "space": sid, "rule": rule})
    notes += advisory_records.restore(book.rules, book.model, book.by_id, records)
    effects: list[Effect] = []
    for rec in records:
        got = book.by_id.get(rec["payload"]["id"])
        if got is None:
            continue
        rt, i = got
        adv = rt.advisories[i]
        mine_before = own.get(adv.id) if own is not None else None
        if mine_before is not None:
            merge_own(rt, i, adv, mine_before, now)
            adv.seq = max(adv.seq, mine_before.adv.seq)
        book.note(adv, now, "moved", by=by)
        effects.append(book.published(adv))
        effects.append(book.persist(adv))
    return notes, effects


def reconcile(book: Advisories, owned: BoolArray, space_ids: Iterable[str],
              payloads: Iterable[dict[str, Any]], now: float, *, by: str | None = None
              ) -> tuple[list[str], list[Effect]]:
    """Take over spaces this instance has been evaluating as a standby (without
    publishing): what was *published* for them wins over what it computed.

    For each (space, rule) with a retained advisory message (``payloads``, each with its
    ``handover``), this instance's own advisory is replaced by it: the published id,
    history (plus a ``moved`` entry), priority, acknowledgement, shelving and event
    count; the windows, delays in progress and the clear timer stay this instance's.
    An advisory this instance raised that nobody published is taken back to pending
    with its on-delay already served, so the next evaluation raises it and says so.
    An acknowledgement or shelving this instance applied to the published advisory
    (as its holder before, or a command given a moment before it lost the shard) and
    that the message lacks survives (:func:`merge_own`). Returns notes on records not
    taken and the effects (retained messages, rows)."""
    wanted = {i for sid in space_ids
              if (i := book.model.space_index.get(sid)) is not None}
    records: dict[tuple[int, str], dict[str, Any]] = {}
    for p in payloads:
        try:
            i = book.model.space_index.get(p["space"]["id"])
            rule = p["rule"]
        except (KeyError, TypeError):
            continue
        if i in wanted and isinstance(rule, str) and isinstance(p.get("handover"), dict):
            records[(i, rule)] = p
    own: dict[str, Own] = {}
    for rt in book.rules:
        for i in sorted(wanted):
            adv = rt.advisories.get(i)
            if adv is None:
                continue
            own[adv.id] = Own(adv, State(rt.state[i]), float(rt.shelved_until[i]),
                               [list(s) for s in rt.shelvings.get(i, [])])
            rec = records.get((i, rt.rule.key))
            del rt.advisories[i]
            book.by_id.pop(adv.id, None)
            rt.event_count.pop(i, None)
            rt.raised_times.pop(i, None)
            rt.level[i] = rt.rule.base_priority
            for arr in (rt.last_notified, rt.shelved_until, rt.lower_since):
                arr[i] = np.nan
            rt.acted_now[i] = False
            if rec is None:
                # pending with its on-delay served: raised (and published) at the next
                # evaluation if its condition still holds
                rt.state[i] = State.PENDING
                rt.pending_since[i] = now - rt.rule.config.on_delay_s
            else:
                rt.state[i] = State.IDLE
    return adopt(book, owned, records.values(), now, by=by, own=own)


@dataclass(frozen=True)
class Own:
    """What an instance had of an advisory before taking the published message over."""

    adv: Advisory
    state: State
    shelved_until: float
    shelvings: list[list[float]]


def merge_own(rt: RuleRuntime, i: int, adv: Advisory, own: Own, now: float) -> None:
    """Keep in ``adv`` (just taken from a published message) the acknowledgement and the
    shelving this instance had applied that the message lacks: an acknowledgement present
    in either survives unless the message's history shows the advisory raised or escalated
    after it (a worse level needs a new one); of two shelvings the later one wins, unless
    the message's history shows it unshelved or escalated after this one, or it has run
    out. The history entry of what is kept is put back in time order."""
    later = {"raised", "escalated"}
    ack = own.adv.acknowledged
    if ack is not None and adv.acknowledged is None and State(rt.state[i]) == State.ACTIVE \
            and not any(h.get("event") in later and h.get("at", "") > ack.get("at", "")
                        for h in adv.history):
        adv.acknowledged = ack
        rt.state[i] = adv.state = State.ACKNOWLEDGED
        _put_back(adv, own.adv, "acknowledged", ack.get("at"))
    sh = own.adv.shelved
    if sh is not None and own.state == State.SHELVED and own.shelved_until > now \
            and State(rt.state[i]) in (State.ACTIVE, State.ACKNOWLEDGED, State.SHELVED) \
            and (adv.shelved is None or adv.shelved.get("at", "") < sh.get("at", "")) \
            and not any(h.get("event") in (later | {"unshelved"})
                        and h.get("at", "") > sh.get("at", "") for h in adv.history):
        adv.shelved = sh
        rt.state[i] = adv.state = State.SHELVED
        rt.shelved_until[i] = own.shelved_until
        rt.shelvings[i] = own.shelvings
        _put_back(adv, own.adv, "shelved", sh.get("at"))


def _put_back(adv: Advisory, own: Advisory, event: str, at: object) -> None:
    """Put ``own``'s history entry of ``event`` at ``at`` into ``adv``'s, in time order."""
    entry = next((h for h in reversed(own.history)
                  if h.get("event") == event and h.get("at") == at), None)
    if entry is None or entry in adv.history:
        return
    adv.history.append(dict(entry))
    adv.history.sort(key=lambda h: str(h.get("at", "")))

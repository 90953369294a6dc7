"""The invariants of failover, checked over everything a watcher received (receipt order).

- **ids**: no event id names two different events (copies of one event, QoS 1's
  re-deliveries, are equal);
- **epochs**: every event, retained advisory and conditions record carries ``shard`` and
  ``epoch``; an event id carries the same shard and epoch as its payload
  (``<site>.<shard>.<epoch>.<advisory id>.<n>``); per shard, events come from one epoch at a
  time and never from an older epoch after a newer one;
- **commands**: no acknowledgement or shelving is lost: a command the service answered
  ``ok`` (or did not answer) is in the advisory's history at the end;
- **forward**: read as a consumer must (a record of an older epoch than the newest seen
  for its shard is dropped, and so is an advisory's record or event whose ``(epoch, seq)``
  is not above the newest taken for that advisory), the retained advisory of a topic never
  goes backwards: its ``(epoch, seq)`` only grows, its history only grows at the end, its
  priority only drops with a ``deescalated`` entry, an emptied (cleared) advisory does not
  come back, and no record the rule drops is newer in content than the one it kept;
- **evaluated**: no space goes without a conditions record for longer than the lease TTL
  plus one tick plus the conditions cadence (the resolution of this check);
- **whole**: after a takeover, a 60-minute WBGT that was whole before is not rebuilt (no
  ``partial`` window), and it is present if it was present before.

Each check returns human-readable violations; the test asserts the list is empty and
prints the figures.
"""

from __future__ import annotations

import datetime as dt
import json
from collections import defaultdict
from dataclasses import dataclass, field
from typing import Any

from tests.faults.harness import HEAT_RULE, Received, Scenario

PRIORITY_RANK = {"low": 0, "medium": 1, "high": 2, "urgent": 3}
HISTORY_KEPT = 50
"""engine/advisories.py keeps the last 50 history entries of an advisory."""


def _ts(iso: str) -> float:
    return dt.datetime.fromisoformat(iso.replace("Z", "+00:00")).timestamp()


def _shard_epoch(d: dict[str, Any]) -> tuple[str | None, int | None]:
    shard = d.get("shard")
    epoch = d.get("epoch")
    if shard is None and isinstance(d.get("advisory"), dict):
        shard, epoch = d["advisory"].get("shard"), d["advisory"].get("epoch")
    return (str(shard) if shard is not None else None,
            int(epoch) if isinstance(epoch, int) else None)


@dataclass
class Report:
    violations: dict[str, list[str]] = field(default_factory=lambda: defaultdict(list))
    figures: dict[str, Any] = field(default_factory=dict)

    def add(self, check: str, text: str) -> None:
        self.violations[check].append(text)

    def failed(self) -> dict[str, list[str]]:
        return {k: v for k, v in self.violations.items() if v}

    def summary(self, limit: int = 8) -> str:
        lines = [f"figures: {json.dumps(self.figures, sort_keys=True)}"]
        for k, v in sorted(self.failed().items()):
            lines.append(f"[{k}] {len(v)} violation(s):")
            lines += [f"    {x}" for x in v[:limit]]
            if len(v) > limit:
                lines.append(f"    ... {len(v) - limit} more")
        return "\n".join(lines)


class Observed:
    """The watcher's messages sorted into events, advisory records, conditions records and
    replies (receipt order kept)."""

    def __init__(self, messages: list[Received], prefix: str) -> None:
        self.prefix = prefix
        self.events: list[tuple[float, str, dict[str, Any]]] = []
        self.advisories: list[tuple[float, str, dict[str, Any] | None, bool]] = []
        self.conditions: list[tuple[float, str, dict[str, Any]]] = []
        self.replies: list[tuple[float, dict[str, Any]]] = []
        for m in messages:
            rest = m.topic[len(prefix) + 1:] if m.topic.startswith(prefix + "/") else None
            if rest is None:
                continue
            if rest.startswith("events/"):
                d = m.json()
                if d is not None and d.get("event"):
                    self.events.append((m.t, m.topic, d))
            elif rest.startswith("spaces/") and "/advisories/" in rest:
                self.advisories.append((m.t, m.topic, m.json(), m.retained))
            elif rest.startswith("spaces/") and rest.endswith("/conditions"):
                d = m.json()
                if d is not None:
                    self.conditions.append((m.t, rest.split("/")[1], d))
            elif rest.startswith("replies"):
                d = m.json()
                if d is not None:
                    self.replies.append((m.t, d))

    def advisory_events(self) -> list[tuple[float, str, dict[str, Any]]]:
        return [e for e in self.events if isinstance(e[2].get("advisory"), dict)]


def check_ids(obs: Observed, rep: Report) -> None:
    """No event id names two different events."""
    first: dict[str, dict[str, Any]] = {}
    bad: set[str] = set()
    for _, _, d in obs.events:
        eid = d.get("event_id")
        if not eid:
            if isinstance(d.get("advisory"), dict):
                rep.add("ids", f"an advisory event without an event_id: {d['event']}")
            continue
        seen = first.setdefault(eid, d)
        if seen != d and eid not in bad:
            bad.add(eid)
            diff = sorted(k for k in set(seen) | set(d) if seen.get(k) != d.get(k))
            a, b = seen.get("advisory", {}), d.get("advisory", {})
            rep.add("ids", f"{eid} names two events: {seen['event']}/{a.get('priority')} "
                           f"and {d['event']}/{b.get('priority')} (differ in {diff})")
    rep.figures["events"] = len(obs.events)
    rep.figures["event_ids"] = len(first)
    rep.figures["ids_two_events"] = len(bad)


def check_epochs(obs: Observed, rep: Report) -> None:
    """Shard and epoch on every event and record; per shard, no older epoch after a newer
    one (first copies, receipt order); the id carries the payload's shard and epoch."""
    newest: dict[str, int] = {}
    seen_ids: set[str] = set()
    missing = 0
    epochs_per_shard: dict[str, set[int]] = defaultdict(set)
    for _, _, d in obs.advisory_events():
        eid = str(d.get("event_id", ""))
        if eid in seen_ids:
            continue  # a re-delivered copy: the consumer drops it by its id
        seen_ids.add(eid)
        shard, epoch = _shard_epoch(d)
        if shard is None or epoch is None:
            missing += 1
            continue
        epochs_per_shard[shard].add(epoch)
        if f".{shard}.{epoch}." not in eid:
            rep.add("epochs", f"event id {eid} does not carry shard {shard} epoch {epoch}")
        if epoch < newest.get(shard, -1):
            rep.add("epochs", f"shard {shard}: event {eid} ({d['event']}) of epoch {epoch} "
                              f"after one of epoch {newest[shard]}")
        newest[shard] = max(epoch, newest.get(shard, -1))
    if missing:
        rep.add("epochs", f"{missing} advisory event(s) without shard and epoch")
    for kind, rows in (("advisory", [(t, d) for t, _, d, _ in obs.advisories if d]),
                       ("conditions", [(t, d) for t, _, d in obs.conditions])):
        lacking = sum(1 for _, d in rows if None in _shard_epoch(d))
        if lacking:
            rep.add("epochs", f"{lacking} of {len(rows)} {kind} record(s) without shard and "
                              f"epoch")
    rep.figures["epochs_per_shard_max"] = max(
        (len(v) for v in epochs_per_shard.values()), default=0)
    rep.figures["shards_seen"] = len(epochs_per_shard)


def _key(d: dict[str, Any]) -> tuple[int, int] | None:
    """The order key ``(epoch, seq)`` of an advisory record or event (README, "What a
    consumer must do"), or None when it lacks either."""
    a = d["advisory"] if isinstance(d.get("advisory"), dict) else d
    epoch, seq = a.get("epoch"), a.get("seq")
    if isinstance(epoch, int) and isinstance(seq, int):
        return epoch, seq
    return None


def _accepted_advisories(obs: Observed, rep: Report
                         ) -> list[tuple[float, str, dict[str, Any] | None]]:
    """Advisory records (and the advisories of events: the same state) as a consumer keeps
    them, in receipt order, by the rule the README
    gives (written here as a consumer would, not taken from the service's code): keep the
    newest epoch per shard (from every event and record) and the newest ``(epoch, seq)``
    per advisory id (from its records and its events); drop a record of an older epoch
    than its shard's, and one whose key is not above its advisory's (the record of an event
    already taken, a copy, or one delivered late). Counts what is dropped; a record or event without
    ``seq`` is a violation, and so is a dropped record whose history is longer than that of
    the one kept for its advisory under the same epoch (a newer record the rule lost:
    ``seq`` went back)."""
    newest_epoch: dict[str, int] = {}
    newest_key: dict[str, tuple[int, int]] = {}
    kept: dict[str, dict[str, Any]] = {}  # advisory id -> the record or event advisory taken
    stream: list[tuple[float, int, Any]] = []
    for t, _, d in obs.advisory_events():
        stream.append((t, 0, d))
    for t, topic, d, _ in obs.advisories:
        stream.append((t, 1, (topic, d)))
    for t, _, d in obs.conditions:
        stream.append((t, 2, d))
    stream.sort(key=lambda x: (x[0], x[1]))
    out: list[tuple[float, str, dict[str, Any] | None]] = []
    stale = late = copies = no_seq = 0
    for t, kind, item in stream:
        d = item[1] if kind == 1 else item
        if d is None:  # an emptied topic: the advisory last taken there cleared (its
            # ``cleared`` event carried its last key)
            out.append((t, item[0], None))
            continue
        shard, epoch = _shard_epoch(d)
        if shard is not None and epoch is not None:
            if epoch < newest_epoch.get(shard, -1):
                stale += kind == 1
                continue
            newest_epoch[shard] = epoch
        if kind == 2:
            continue
        a = d["advisory"] if kind == 0 else d
        key = _key(d)
        if key is None:
            no_seq += 1
            continue
        prev = newest_key.get(a["id"], (-1, -1))
        if key <= prev:
            if kind == 1:
                if key == prev:
                    copies += 1
                else:
                    late += 1
                    mine = kept.get(a["id"])
                    if mine is not None and key[0] == prev[0] and \
                            len(a.get("history", [])) > len(mine.get("history", [])):
                        rep.add("forward", f"{item[0]}: a record of {a['id']} with a longer "
                                           f"history than the one kept was dropped: seq "
                                           f"{key[1]} after {prev[1]} in epoch {key[0]}")
            continue
        newest_key[a["id"]] = key
        kept[a["id"]] = a
        # an event's advisory is the consumer's view of it as much as a record is (the
        # harness's sites separate the rule's parts in topics by "/")
        topic = item[0] if kind == 1 else (f"{obs.prefix}/spaces/{a['space']['id']}/"
                                           f"advisories/{a['rule'].replace('.', '/')}")
        out.append((t, topic, a))
    if no_seq:
        rep.add("forward", f"{no_seq} advisory record(s) or event(s) without epoch and seq")
    rep.figures["stale_advisory_records_dropped"] = stale
    rep.figures["late_advisory_records_dropped"] = late
    rep.figures["advisory_record_copies"] = copies
    return out


def check_forward(obs: Observed, rep: Report) -> None:
    """The retained advisory of a topic never goes backwards, as a consumer keeps it
    (:func:`_accepted_advisories`): per advisory its ``(epoch, seq)`` only grows, its
    history only grows at the end, its priority drops only with a ``deescalated`` entry,
    and a cleared advisory does not come back."""
    last: dict[str, dict[str, Any]] = {}
    cleared: dict[str, set[str]] = defaultdict(set)
    accepted = _accepted_advisories(obs, rep)
    for _, topic, d in accepted:
        if d is None:  # emptied: the advisory cleared
            prev = last.pop(topic, None)
            if prev is not None:
                cleared[topic].add(prev["id"])
            continue
        if d["id"] in cleared[topic]:
            rep.add("forward", f"{topic}: cleared advisory {d['id']} came back "
                               f"({d['priority']}, {d['state']})")
        prev = last.get(topic)
        last[topic] = d
        if prev is None or prev["id"] != d["id"]:
            continue
        pk, dk = _key(prev), _key(d)
        ph, dh = prev.get("history", []), d.get("history", [])
        if pk is not None and dk is not None and dk <= pk:
            rep.add("forward", f"{topic}: (epoch, seq) went from {pk} to {dk}")
        if len(dh) < len(ph):
            rep.add("forward", f"{topic}: history went from {len(ph)} to {len(dh)} entries "
                               f"at {dk}: {[h['event'] for h in dh][-4:]}")
            continue
        if len(ph) < HISTORY_KEPT and dh[:len(ph)] != ph:
            rep.add("forward", f"{topic}: history rewritten: "
                               f"{[h['event'] for h in ph]} -> {[h['event'] for h in dh]}")
        if PRIORITY_RANK[d["priority"]] < PRIORITY_RANK[prev["priority"]] and not any(
                h["event"] == "deescalated" for h in dh[len(ph):] if len(ph) < HISTORY_KEPT):
            rep.add("forward", f"{topic}: priority went from {prev['priority']} to "
                               f"{d['priority']} with no deescalation in its history")
    rep.figures["advisory_records"] = sum(1 for _ in obs.advisories)
    rep.figures["advisory_states_kept"] = sum(1 for _, _, d in accepted if d is not None)


def check_commands(obs: Observed, sc: Scenario, rep: Report) -> None:
    """Every acknowledgement and shelving answered ok (or not answered) is kept in the
    advisory's history at the end, as a consumer keeps it (:func:`_accepted_advisories`:
    the record or event of the highest ``(epoch, seq)``, none of a stale epoch): a command
    taken only by a holder whose epoch was already superseded is lost, even if that
    holder's record had it."""
    replies = {d.get("request_id"): d for _, d in obs.replies}
    latest: dict[str, dict[str, Any]] = {}
    for _, _, d in _accepted_advisories(obs, Report()):
        if d is not None:
            latest[d["id"]] = d
    kept = 0
    for c in sc.commands:
        reply = replies.get(c.request_id)
        adv = latest.get(c.advisory_id)
        entry = "acknowledged" if c.verb == "acknowledge" else "shelved"
        in_history = adv is not None and any(
            h.get("by") == c.by and h["event"] == entry for h in adv.get("history", []))
        if in_history:
            kept += 1
            continue
        if reply is not None and not reply.get("ok"):
            rep.add("commands", f"{c.verb} {c.by} of {c.advisory_id} refused: "
                                f"{reply.get('error')}")
        else:
            hist = [(h["event"], h.get("by")) for h in (adv or {}).get("history", [])]
            rep.add("commands", f"{c.verb} {c.by} of {c.advisory_id} "
                                f"({'answered ok' if reply else 'never answered'}"
                                f"{', during the fault' if c.during_fault else ''}) "
                                f"is not in its history: {hist}")
    stray = sum(1 for _, d in obs.replies if d.get("request_id") is None)
    if stray > 10 * max(1, len(sc.commands)):
        rep.add("commands", f"{stray} replies to no request for {len(sc.commands)} command(s) "
                            f"sent (a storm of answers)")
    rep.figures["replies_to_no_request"] = stray
    rep.figures["commands_sent"] = len(sc.commands)
    rep.figures["commands_kept"] = kept


def check_evaluated(obs: Observed, sc: Scenario, rep: Report) -> None:
    """No space without a conditions record (read as a consumer does) for longer than the
    lease TTL plus one tick plus the conditions cadence, between ``observe_from`` and
    ``observe_to`` (monotonic)."""
    tm = sc.timing
    bound = tm.lease_ttl_s + tm.tick_s + tm.conditions_every_s + tm.tick_s
    newest: dict[str, int] = {}
    times: dict[str, list[float]] = defaultdict(list)
    for t, space, d in obs.conditions:
        shard, epoch = _shard_epoch(d)
        if shard is not None and epoch is not None:
            if epoch < newest.get(shard, -1):
                continue
            newest[shard] = epoch
        times[space].append(t)
    worst = (0.0, "")
    for s in sc.spaces:
        ts = [t for t in times.get(s, []) if sc.observe_from <= t <= sc.observe_to]
        marks = [sc.observe_from, *ts, sc.observe_to]
        gaps = [(b - a, a) for a, b in zip(marks, marks[1:], strict=False)]
        gap, at = max(gaps)
        if gap > worst[0]:
            worst = (gap, s)
        if gap > bound:
            rep.add("evaluated", f"{s}: no conditions for {gap:.1f} s from "
                                 f"{at - sc.fault_started:+.1f} s after the fault "
                                 f"(bound {bound:.1f} s)")
    rep.figures["longest_gap_s"] = round(worst[0], 1)
    rep.figures["gap_bound_s"] = round(bound, 1)


def check_whole(obs: Observed, sc: Scenario, rep: Report) -> None:
    """After the fault: no conditions record says the 60-minute WBGT is being rebuilt
    (``windows.wbgt_60min.partial``) for a space whose window was whole before the fault
    (its last record before it had the time-weighted WBGT and no partial window), and a
    space whose time-weighted WBGT was present before the fault has it after.

    (A window that was not whole before the fault, in a run shorter than the window, cannot
    be whole after it: whether a standby flags it as rebuilt then depends only on whether
    it began standing by in the second after its holder began, or the one before.)

    In every run, also one shorter than the window: no conditions record after the fault
    says its window is being rebuilt since the fault began or later
    (``windows.wbgt_60min.rebuilding_since`` in a second after the one the fault began in:
    the record gives whole seconds, so a window that began in the fault's own second may
    have begun before it, and no takeover comes within a second of a fault): the instance
    that took the space over threw away, or never had, the readings a warm standby keeps."""
    before: dict[str, bool] = {}
    partial_before: dict[str, bool] = {}
    after_first: dict[str, bool] = {}
    partial: set[str] = set()
    cold: dict[str, str] = {}
    for t, space, d in obs.conditions:
        twa = (d.get("indices") or {}).get("wbgt_time_weighted") or {}
        present = twa.get("value") is not None
        window = (d.get("windows") or {}).get("wbgt_60min") or {}
        is_partial = bool(window.get("partial"))
        since = window.get("rebuilding_since")
        if t >= sc.fault_started and sc.fault_started_wall is not None and \
                isinstance(since, str) and _ts(since) > int(sc.fault_started_wall):
            cold.setdefault(space, since)
        if t < sc.fault_started:
            before[space] = present
            partial_before[space] = is_partial
        else:
            after_first.setdefault(space, present)
            if is_partial and before.get(space, False) and \
                    not partial_before.get(space, False):
                partial.add(space)
    partial -= sc.whole_exempt
    for s in sorted(partial):
        rep.add("whole", f"{s}: the 60-minute WBGT was rebuilt after the fault (partial)")
    for s, since in sorted(cold.items()):
        if s not in sc.whole_exempt:
            rep.add("whole", f"{s}: its 60-minute WBGT window restarted at {since}, after "
                             f"the fault began (a takeover by an instance that was not "
                             f"standing by)")
    lost = [s for s, p in before.items()
            if p and after_first.get(s) is False and s not in sc.whole_exempt]
    for s in lost:
        rep.add("whole", f"{s}: the time-weighted WBGT was present before the fault and "
                         f"absent after it")
    rep.figures["twa_present_before"] = sum(before.values())
    rep.figures["partial_after"] = len(partial)
    rep.figures["windows_restarted_after_fault"] = len(set(cold) - sc.whole_exempt)
    rep.figures["whole_exempt"] = len(sc.whole_exempt)


def check_all(messages: list[Received], sc: Scenario) -> Report:
    obs = Observed(messages, sc.prefix)
    rep = Report()
    check_ids(obs, rep)
    check_epochs(obs, rep)
    check_forward(obs, rep)
    check_commands(obs, sc, rep)
    check_evaluated(obs, sc, rep)
    check_whole(obs, sc, rep)
    heat = [d for _, _, d in obs.advisory_events() if d["advisory"]["rule"] == HEAT_RULE]
    rep.figures["heat_events"] = {k: sum(1 for d in heat if d["event"] == k)
                                  for k in sorted({d["event"] for d in heat})}
    return rep

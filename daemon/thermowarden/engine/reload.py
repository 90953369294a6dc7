"""Carry a running engine's state into an engine built from a reloaded configuration.

What survives a reload (matched by space id, point key and rule key, so spaces and rules
may be added, removed or reordered):

- per point, when its specification is unchanged (topic, quantity, unit, format, tags,
  calibration, range, interval): the latest value and times, the air-speed window, and
  when its value last changed (the stuck check);
- per space, when its points are unchanged: the per-minute WBGT bins (the 60-minute
  time-weighted WBGT), recent implausible readings, when its conditions were published;
- per (space, rule), when both the rule and the space's configuration are unchanged: the
  whole lifecycle (pending on-delay, off-delay, de-escalation hold, unknown timer, live
  advisory, chattering history);
- a live advisory whose rule or space changed but still exists stays live, as after a
  restart (its timers start again under the new rule); one whose rule or space was removed
  is withdrawn (retained message emptied, store record removed) with a note for the log;
- site-wide: the daily outdoor means, today's outdoor mean so far, flood windows and held
  summaries, the daily digest counters, the counters of ingest.

Pure: no I/O, and the old engine is left as it was (so a failed carry-over changes
nothing); returns the effects of withdrawn advisories and notes for the log.
"""

from __future__ import annotations

import dataclasses
from collections import deque
from typing import Any

import numpy as np

from thermowarden.core.columns import BoolArray
from thermowarden.effects import Effect
from thermowarden.engine.engine import Engine
from thermowarden.engine.rule_runtime import RuleRuntime
from thermowarden.site_model import SITE, PointSpec, SiteModel

_LIFECYCLE = ("state", "level", "pending_since", "clear_since", "last_notified",
              "shelved_until", "unknown_since", "lower_since", "acted_now", "rearm_until",
              "lowered_at", "relapse_until")
_AS_AFTER_RESTART = ("state", "level", "last_notified", "shelved_until")


def _point_signature(p: PointSpec) -> tuple[Any, ...]:
    return (p.key, p.quantity, p.side, p.height, p.sensor, p.unit, p.low, p.high, p.interval_s,
            p.fmt, p.topic, p.offset, p.scale, p.max_change_per_s, p.stuck_after_s)


def _space_points(model: SiteModel, signatures: list[tuple[Any, ...]]
                  ) -> dict[int, dict[str, tuple[Any, ...]]]:
    """Per space: point key -> signature."""
    out: dict[int, dict[str, tuple[Any, ...]]] = {}
    for p, sig in zip(model.points, signatures, strict=True):
        out.setdefault(p.space, {})[p.key] = sig
    return out


def _space_config(engine: Engine, i: int) -> tuple[Any, ...]:
    cfg = engine.config
    s = cfg.spaces[i]
    return (s, cfg.people(s), cfg.occupancy(s), tuple(cfg.rule_packs(s)),
            tuple(sorted(cfg.parameters(s).items())))


def carry_over(old: Engine, new: Engine) -> tuple[list[Effect], list[str]]:
    """Move ``old``'s state into ``new`` (freshly built, not yet ticked); see the module
    docstring. Returns (effects, notes)."""
    notes: list[str] = []
    # points created on the first message (templates with {side} or {sensor}) are created
    # in the new model too when its templates still produce them
    for p in old.model.points:
        if p.key not in new.model.point_by_key:
            new.ingest.resolve(p.topic)
    old_sigs = [_point_signature(p) for p in old.model.points]
    new_sigs = [_point_signature(p) for p in new.model.points]
    point_map: list[tuple[int, int]] = []
    for pid, p in enumerate(old.model.points):
        q = new.model.point_by_key.get(p.key)
        if q is not None and old_sigs[pid] == new_sigs[q]:
            point_map.append((pid, q))
    _carry_points(old, new, point_map)

    old_points = _space_points(old.model, old_sigs)
    new_points = _space_points(new.model, new_sigs)
    same_points: list[tuple[int, int]] = []
    same_config = np.zeros(new.model.n_spaces, dtype=bool)
    for j, sid in enumerate(new.model.space_ids):
        i = old.model.space_index.get(sid)
        if i is None:
            continue
        if old_points.get(i, {}) == new_points.get(j, {}):
            same_points.append((i, j))
            if _space_config(old, i) == _space_config(new, j):
                same_config[j] = True
    _carry_spaces(old, new, same_points)
    effects = _carry_rules(old, new, same_config, notes)

    # site-wide state
    so, sn = old.state, new.state
    sn.outdoor_days.carry(so.outdoor_days)
    sn.wbgt.last_record = so.wbgt.last_record
    ao, an = old.advisories, new.advisories
    an.floods.carry(ao.floods)
    an.last_refresh = ao.last_refresh
    new.start = old.start
    new.last_sample = old.last_sample
    new.ticks = old.ticks
    new.ingest.received = old.ingest.received
    new.ingest.accepted = old.ingest.accepted
    new.ingest.rejected = old.ingest.rejected.copy()
    # the service turns these into counters that only go up
    new.ingest.accepted_by_quantity = old.ingest.accepted_by_quantity.copy()
    new.ingest.missed_by_quantity = old.ingest.missed_by_quantity.copy()
    kept = len(same_points)
    notes.insert(0, f"reload: kept the windows of {kept} of {new.model.n_spaces} space(s) and "
                    f"{len(point_map)} of {len(new.model.points)} point(s)")
    return effects, notes


def _carry_points(old: Engine, new: Engine, pairs: list[tuple[int, int]]) -> None:
    if not pairs:
        return
    so, sn = old.state, new.state
    src = np.array([a for a, _ in pairs], dtype=np.int64)
    dst = np.array([b for _, b in pairs], dtype=np.int64)
    for name in ("last_value", "last_time", "last_source_time"):
        getattr(sn, name)[dst] = getattr(so, name)[src]
    for a, b in pairs:
        sn.rings.carry_point(so.rings, a, b)
    ho, hn = old.health, new.health
    if ho.last_change.size:
        npts = len(new.model.points)
        hn.last_change = np.full(npts, np.nan)
        hn.last_seen_value = np.full(npts, np.nan)
        ok = src < ho.last_change.size
        hn.last_change[dst[ok]] = ho.last_change[src[ok]]
        hn.last_seen_value[dst[ok]] = ho.last_seen_value[src[ok]]


def _carry_spaces(old: Engine, new: Engine, pairs: list[tuple[int, int]]) -> None:
    so, sn = old.state, new.state
    po, pn = old.publication, new.publication
    for i, j in pairs:
        if i == SITE:
            continue
        sn.wbgt.carry_space(so.wbgt, i, j)
        new.health.implausible[j] = deque(old.health.implausible[i], maxlen=200)
        new.health.implausible_points[j] = dict(old.health.implausible_points[i])
        pn.last_conditions[j] = po.last_conditions[i]
        pn.touched[j] = po.touched[i]


def _carry_rules(old: Engine, new: Engine, same_config: BoolArray,
                 notes: list[str]) -> list[Effect]:
    effects: list[Effect] = []
    new_rules = {rt.rule.key: rt for rt in new.rules}
    # spaces present before and after: old index -> new index
    pairs = [(i, new.model.space_index[sid]) for i, sid in enumerate(old.model.space_ids)
             if sid in new.model.space_index]
    src = np.array([i for i, _ in pairs], dtype=np.int64)
    dst = np.array([j for _, j in pairs], dtype=np.int64)
    for ro in old.rules:
        rn = new_rules.get(ro.rule.key)
        kept: set[int] = set()
        if rn is not None and rn.rule.config == ro.rule.config and src.size:
            keep = same_config[dst] & (rn.base_mask[dst] == ro.base_mask[src])
            if set(ro.params) != set(rn.params):
                keep[:] = False
            for name in ro.params:
                if name in rn.params:
                    keep &= ro.params[name][src] == rn.params[name][dst]
            i_keep, j_keep = src[keep], dst[keep]
            for name in _LIFECYCLE:
                getattr(rn, name)[j_keep] = getattr(ro, name)[i_keep]
            new_of = dict(zip(i_keep.tolist(), j_keep.tolist(), strict=True))
            for i in set(ro.advisories) | set(ro.raised_times) | set(ro.event_count):
                if i in new_of:
                    _move_advisory(new, ro, i, rn, new_of[i])
                    kept.add(i)
        for i, adv in list(ro.advisories.items()):
            if i in kept:
                continue
            sid = old.model.space_ids[i]
            j = new.model.space_index.get(sid)
            if rn is not None and j is not None:
                for name in _AS_AFTER_RESTART:
                    getattr(rn, name)[j] = getattr(ro, name)[i]
                _move_advisory(new, ro, i, rn, j)
                notes.append(f"reload: advisory {adv.id} ({sid}, {ro.rule.key}) stays live; "
                             "its rule or space changed, so its timers start again")
                continue
            gone = dataclasses.replace(adv, cleared_at=adv.updated_at)
            effects.append(old.publication.advisory_publish(gone))
            effects.append(old.publication.advisory_persist(gone, {}))
            notes.append(f"reload: advisory {adv.id} ({sid}, {ro.rule.key}) withdrawn: its "
                         "space or rule is no longer configured")
    return effects


def _move_advisory(new: Engine, ro: RuleRuntime, i: int, rn: RuleRuntime, j: int) -> None:
    adv = ro.advisories.get(i)
    if i in ro.raised_times:
        rn.raised_times[j] = deque(ro.raised_times[i])
    if i in ro.trends:
        rn.trends[j] = deque(ro.trends[i])
    if i in ro.event_count:  # its events' ids go on counting (never one id twice)
        rn.event_count[j] = ro.event_count[i]
    if i in ro.shelvings:
        rn.shelvings[j] = [list(s) for s in ro.shelvings[i]]
    if adv is None:
        return
    moved = dataclasses.replace(adv, space=j)  # the old engine stays intact
    rn.advisories[j] = moved
    new.advisories.by_id[moved.id] = (rn, j)

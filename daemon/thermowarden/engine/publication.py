"""Publication: advisories, events and conditions turned into payloads, topics and records.

The last step of the engine's path. Everything here builds JSON-ready payloads (their
schemas ship in ``thermowarden/schemas``) and the effects that carry them; nothing here
decides *whether* something is published, only *what* and *where*. NaN never leaves the
process: a value that is not known is ``null`` with a reason.

Topics (``<prefix>`` is ``output.prefix``)::

    <prefix>/spaces/<space>/conditions          retained
    <prefix>/spaces/<space>/advisories/<rule>   retained, emptied when cleared
    <prefix>/events/<audience>/<space>          QoS 1, lifecycle transitions
"""

from __future__ import annotations

import copy
import math
from typing import TYPE_CHECKING, Any, Final

import numpy as np

from thermowarden.config import SiteConfig
from thermowarden.core import catalogue
from thermowarden.core.indices import IndexTable
from thermowarden.core.json_values import iso, num
from thermowarden.core.quantities import QUANTITIES
from thermowarden.core.shards import shard_of
from thermowarden.effects import Effect, Persist, Publish
from thermowarden.site_model import SITE, SiteModel

if TYPE_CHECKING:
    from thermowarden.engine.advisory import Advisory
    from thermowarden.engine.state import Snapshot

ADVISORY_SCHEMA: Final = "thermowarden.advisory/1"
EVENT_SCHEMA: Final = "thermowarden.event/1"
CONDITIONS_SCHEMA: Final = "thermowarden.conditions/1"
REPLY_SCHEMA: Final = "thermowarden.reply/1"
ADVISORY_EXPIRY_S: Final = 900
"""MQTT 5 message expiry of a retained advisory; it is republished well before."""
CONDITIONS_EXPIRY_S: Final = 600
CONDITIONS_MIN_S: Final = 15.0
"""Conditions of a space with new readings go out at most this often (else every minute)."""
SITE_TOPIC_SPACE: Final = "_site"
"""The space part of event topics for site-wide messages (summaries, digests)."""


def _input_column(snap: Snapshot, q: str) -> tuple[Any, str]:
    """The values of input ``q`` that the indices used (all spaces), and its unit."""
    s = snap.inputs
    arr: Any = None
    if q.startswith("plane_radiant_temperature_"):
        arr = s.plane_radiant.get(q.removeprefix("plane_radiant_temperature_"))
        unit = "°C"
    elif q == "surface_temperature":
        arr, unit = s.surface_temperature_min, "°C"
    elif q in ("air_temperature_head", "air_temperature_ankle"):
        arr, unit = getattr(s, q), "°C"
    else:
        arr = getattr(s, q, None) if q in QUANTITIES else None
        if not isinstance(arr, np.ndarray):
            arr = snap.states.get(q)
        info = QUANTITIES.get(q)
        unit = info.unit if info else ""
    if not isinstance(arr, np.ndarray) or arr.dtype == np.bool_:
        return None, unit
    return arr, unit


def space_ref(space: Any) -> dict[str, Any]:
    """How a space is named in every payload: id, name, kind and its external references."""
    ref: dict[str, Any] = {"id": space.id, "name": space.name or space.id, "kind": space.kind,
                           "hot_work": space.hot_work}
    if space.external is not None:
        ref["external"] = space.external.model_dump(exclude_none=True)
    return ref


def _public(record: dict[str, Any] | None) -> dict[str, Any] | None:
    """A copy of ``record`` as it is now (later changes do not reach payloads already
    built), without its private keys (``_t``)."""
    if record is None:
        return None
    return copy.deepcopy({k: v for k, v in record.items() if not k.startswith("_")})


class Publication:
    """Payloads and topics of one site; also paces the retained conditions per space."""

    def __init__(self, config: SiteConfig, model: SiteModel,
                 conditions_every_s: float = 60.0) -> None:
        self.config = config
        self.model = model
        self.prefix = config.output.prefix
        self.conditions_every_s = conditions_every_s
        n = model.n_spaces
        self.last_conditions = np.full(n, -np.inf)
        self.touched = np.zeros(n, dtype=bool)
        """Spaces with new readings since their conditions last went out."""
        self.owned = np.ones(n, dtype=bool)
        """Spaces this instance evaluates (all, unless it is one of a group)."""
        self.moved_at = np.full(n, np.nan)
        """When each space moved to this instance from another of its group (epoch s)."""
        buckets = config.group.shard_buckets if config.group is not None else 16
        self.shards: list[str] = [shard_of(sp.id, sp.area, sp.building, buckets)
                                  for sp in config.spaces]
        """Each space's shard (its area, else its building, else a hash bucket)."""
        self.epochs: dict[str, int] = {}
        """Shard -> the lease epoch this instance publishes under (0 outside a group)."""
        self._indices_cache: tuple[IndexTable | None, list[Any]] = (None, [])
        self._points_cache: tuple[int, dict[int, list[int]], list[Any]] = (-1, {}, [])
        self._snap_cache: tuple[Any, dict[str, Any], list[Any]] = (None, {}, [])

    # ------------------------------------------------------------------ fencing
    def fence(self, i: int) -> tuple[str, int]:
        """Space ``i``'s shard and the epoch this instance publishes it under."""
        shard = self.shards[i]
        return shard, self.epochs.get(shard, 0)

    # ------------------------------------------------------------------ advisories
    def advisory_payload(self, adv: Advisory) -> dict[str, Any]:
        """The advisory as published (schema ``thermowarden.advisory/1``)."""
        space = self.model.space(adv.space)
        state = "cleared" if adv.cleared_at is not None else adv.state.name.lower()
        shard, epoch = self.fence(adv.space)
        return {
            "schema": ADVISORY_SCHEMA,
            "id": adv.id,
            "site": self.config.site.id,
            "shard": shard,
            "epoch": epoch,
            "seq": adv.seq,
            "space": space_ref(space),
            "rule": adv.rule,
            "audience": adv.audience,
            "priority": adv.priority,
            "state": state,
            "title": adv.title,
            "advice": adv.advice,
            "rationale": adv.rationale,
            "numbers": adv.numbers,
            "numbers_at": iso(adv.numbers_at) if adv.numbers_at is not None else None,
            "benefit": adv.benefit,
            "cautions": adv.cautions,
            "advisory_only": True,
            "raised_at": iso(adv.raised_at),
            "updated_at": iso(adv.updated_at),
            "cleared_at": iso(adv.cleared_at) if adv.cleared_at is not None else None,
            "acknowledged": dict(adv.acknowledged) if adv.acknowledged else None,
            "shelved": dict(adv.shelved) if adv.shelved else None,
            "acted_on": _public(adv.acted_on),
            "chattering": adv.chattering,
            "history": [dict(h) for h in adv.history],
        }

    def advisory_topic(self, adv: Advisory) -> str:
        rule = adv.rule.replace(".", self.config.output.rule_topic_separator)
        return f"{self.prefix}/spaces/{self.model.space_ids[adv.space]}/advisories/{rule}"

    def advisory_publish(self, adv: Advisory, timers: dict[str, Any] | None = None) -> Publish:
        """The retained advisory message; an empty retained message once it has cleared.
        ``timers``: the lifecycle state another instance needs to continue the advisory
        (``handover``: exact times in epoch s, state and level codes, event count)."""
        if adv.cleared_at is not None:
            return Publish(self.advisory_topic(adv), None, retain=True, qos=1)
        payload = self.advisory_payload(adv)
        if timers is not None:
            payload["handover"] = {"raised_at": adv.raised_at, "updated_at": adv.updated_at,
                                   **copy.deepcopy(timers)}
        return Publish(self.advisory_topic(adv), payload, retain=True, qos=1,
                       expiry_s=ADVISORY_EXPIRY_S)

    def advisory_persist(self, adv: Advisory, timers: dict[str, Any]) -> Persist:
        """The stored form: the payload plus the lifecycle ``timers`` a restart needs."""
        key = f"{self.model.space_ids[adv.space]}/{adv.rule}"
        if adv.cleared_at is not None:
            return Persist("advisory", key, None)
        return Persist("advisory", key, {
            "payload": self.advisory_payload(adv), "space": self.model.space_ids[adv.space],
            "rule": adv.rule, "raised_at": adv.raised_at, "updated_at": adv.updated_at,
            **timers})

    # ------------------------------------------------------------------ events
    def event_payload(self, adv: Advisory, event: str, now: float) -> dict[str, Any]:
        """One lifecycle transition of an advisory, as each audience receives it."""
        shard, epoch = self.fence(adv.space)
        return {"schema": EVENT_SCHEMA, "event": event, "at": iso(now), "shard": shard,
                "epoch": epoch, "seq": adv.seq, "advisory": self.advisory_payload(adv)}

    def event_publish(self, adv: Advisory, payload: dict[str, Any]) -> Publish:
        space_id = self.model.space_ids[adv.space]
        return Publish(f"{self.prefix}/events/{adv.audience}/{space_id}", payload, qos=1)

    def site_event(self, audience: str, payload: dict[str, Any], key: str) -> list[Effect]:
        """A site-wide event (summary, digest): published and stored."""
        return [Publish(f"{self.prefix}/events/{audience}/{SITE_TOPIC_SPACE}", payload, qos=1),
                Persist("event", key, payload)]

    # ------------------------------------------------------------------ conditions
    def conditions_payload(self, snap: Snapshot, table: IndexTable, i: int) -> dict[str, Any]:
        """The published conditions of space ``i`` (schema ``thermowarden.conditions/1``)."""
        space = self.model.space(i)
        points = self.points_at(snap, i)
        newest: dict[str, float] = {}
        for p, names in zip(points, self._point_names(snap, i), strict=True):
            age = p["age_s"]
            if age is not None:
                for name in names:
                    if age < newest.get(name, math.inf):
                        newest[name] = age
        columns = self._snapshot_columns(snap)[1]
        inputs: dict[str, Any] = {}
        for q, (fresh, values, unit) in columns.items():
            v = values[i]
            inputs[q] = {"fresh": fresh[i], "value": v if math.isfinite(v) else None,
                         "unit": unit, "age_s": newest.get(q)}
        indices = self.indices_at(table, i)
        for q, mask in snap.assumed.items():
            if mask[i]:
                note = self._assumption_notes(i)[q]
                inputs.setdefault(q, {"fresh": False})["assumed"] = note
                if q in indices and indices[q].get("value") is not None:
                    # the index of the same name is the assumption itself: say so
                    indices[q] = {**indices[q], "method": f"{note} (not measured)"}
                    if q == "mean_radiant_temperature" and \
                            "mean_radiant_temperature_source" in indices:
                        indices["mean_radiant_temperature_source"] = {
                            **indices["mean_radiant_temperature_source"], "value": "assumed"}
        shard, epoch = self.fence(i)
        out = {
            "schema": CONDITIONS_SCHEMA,
            "site": self.config.site.id,
            "shard": shard,
            "epoch": epoch,
            "space": space_ref(space),
            "at": iso(snap.now),
            "occupied": bool(snap.occupied[i]),
            "states": {k: num(float(v[i])) for k, v in snap.states.items()},
            "inputs": inputs,
            "points": points,
            "indices": indices,
            "advisory_only": True,
        }
        moved = float(self.moved_at[i])
        window = self.config.ingest.wbgt_window_s
        if math.isfinite(moved) and snap.now - moved < window:
            # moved here from another instance: the 60-minute WBGT window is rebuilt from
            # the readings since, and partial until the mean covers enough of it
            twa = table.get("wbgt_time_weighted")
            whole = twa is not None and bool(twa.present[i])
            out["windows"] = {"wbgt_60min": {"partial": not whole,
                                             "rebuilding_since": iso(moved),
                                             "whole_by": iso(moved + window)}}
        return out

    def _assumption_notes(self, i: int) -> dict[str, str]:
        """quantity -> "assumed: ..." for space ``i`` (from its configuration, kept)."""
        cache: dict[int, dict[str, str]] = self.__dict__.setdefault("_notes", {})
        if i not in cache:
            cache[i] = self.config.assumptions(self.model.space(i)).notes()
        return cache[i]

    def _snapshot_columns(self, snap: Snapshot) -> tuple[Snapshot, dict[str, Any],
                                                         list[Any]]:
        """Per-snapshot lists (converted once per evaluation, not once per space): every
        input's freshness, value and unit; every point's value, freshness and age."""
        if self._snap_cache[0] is not snap:
            cols: dict[str, Any] = {}
            for q, mask in snap.present.items():
                arr, unit = _input_column(snap, q)
                values = np.round(arr, 3).tolist() if arr is not None else \
                    [math.nan] * mask.size
                cols[q] = (mask.tolist(), values, unit)
            # the last evaluation time of the snapshot (a live tick has one)
            pv = np.atleast_2d(snap.point_values)[-1]
            fresh = np.atleast_2d(snap.point_fresh)[-1]
            age = np.atleast_2d(snap.point_age_s)[-1]
            per_point = [np.round(pv, 3).tolist(), fresh.tolist(),
                         np.round(age, 3).tolist()]
            self._snap_cache = (snap, cols, per_point)
        return self._snap_cache

    def _point_ids(self, snap: Snapshot, i: int) -> list[int]:
        pts = self.model.points
        if self._points_cache[0] != len(pts):
            by_space: dict[int, list[int]] = {}
            for pid, p in enumerate(pts):
                by_space.setdefault(p.space, []).append(pid)
            static = []
            for p in pts:
                q = QUANTITIES.get(p.quantity)
                side = f"{p.quantity}_{p.side}" if p.side and p.quantity in (
                    "plane_radiant_temperature", "radiant_flux") else p.quantity
                height = f"{p.quantity}_{p.height}" if p.height else p.quantity
                # the side as the site names it (window), as people configured it
                static.append(({"key": p.key, "quantity": p.quantity,
                                "side": p.side_as_configured or p.side,
                                "height": p.height, "sensor": p.sensor,
                                "unit": q.unit if q else ""},
                               tuple({p.quantity, side, height})))
            self._points_cache = (len(pts), by_space, static)
        by_space = self._points_cache[1]
        pids = list(by_space.get(i, []))
        if self.model.space(i).kind == "outdoor":
            pids += by_space.get(SITE, [])
        n = int(np.atleast_2d(snap.point_fresh).shape[-1])
        return [pid for pid in pids if pid < n]  # newer points are not in this snapshot

    def _point_names(self, snap: Snapshot, i: int) -> list[tuple[str, ...]]:
        """The input names each point of space ``i`` feeds (for the inputs' ages)."""
        static = self._points_cache[2]
        return [static[pid][1] for pid in self._point_ids(snap, i)]

    def points_at(self, snap: Snapshot, i: int) -> list[dict[str, Any]]:
        """Space ``i``'s points (an outdoor space also the site's outdoor points) with their
        latest value in the canonical unit, freshness and age (s)."""
        values, fresh, ages = self._snapshot_columns(snap)[2]
        pids = self._point_ids(snap, i)
        static = self._points_cache[2]
        out: list[dict[str, Any]] = []
        for pid in pids:
            v, age = values[pid], ages[pid]
            out.append({**static[pid][0], "value": v if math.isfinite(v) else None,
                        "fresh": fresh[pid], "age_s": age if math.isfinite(age) else None})
        return out

    def indices_at(self, table: IndexTable, i: int) -> dict[str, dict[str, Any]]:
        """``IndexColumn.as_dict`` for every index of space ``i``, with the per-column work
        (rounding, list conversion) done once per evaluation rather than once per space."""
        if self._indices_cache[0] is not table:
            prepared = []
            for name, col in table.items():
                digits = 5 if col.unit == "kg/kg" else 2
                values = np.round(np.where(col.present, col.values, 0.0), digits).tolist()
                prepared.append((name, col, values, col.codes.tolist()))
            self._indices_cache = (table, prepared)
        out: dict[str, dict[str, Any]] = {}
        for name, col, values, codes in self._indices_cache[1]:
            code = codes[i]
            if code:
                out[name] = {"value": None, "unit": col.unit, "method": col.method,
                             "reason": col.reasons[code]}
            else:
                v = values[i]
                out[name] = {"value": col.labels[int(v)] if col.labels is not None else v,
                             "unit": col.unit, "method": col.method}
        return out

    def conditions_due(self, snap: Snapshot, table: IndexTable, now: float) -> list[Effect]:
        """Retained conditions of the spaces that are due: new readings (at most every
        ``CONDITIONS_MIN_S``) or ``conditions_every_s`` since the last time, or at once when
        the last time is in the future (the wall clock stepped back: waiting for it to come
        round again left a space without conditions for as long as the step)."""
        if self.conditions_every_s <= 0:
            return []
        age = now - self.last_conditions
        due = np.flatnonzero(((age >= self.conditions_every_s) | (age < 0)
                              | (self.touched & (age >= CONDITIONS_MIN_S))) & self.owned)
        effects: list[Effect] = []
        for i in due:
            self.last_conditions[i] = now
            self.touched[i] = False
            effects.append(Publish(f"{self.prefix}/spaces/{self.model.space_ids[i]}/conditions",
                                   self.conditions_payload(snap, table, int(i)), retain=True,
                                   qos=0, expiry_s=CONDITIONS_EXPIRY_S))
        return effects

    def shift_timers(self, step_s: float) -> None:
        """The wall clock was stepped by ``step_s``: the conditions schedule goes on as by
        the monotonic clock (a step back would otherwise hold every space's conditions for
        the length of the step)."""
        self.last_conditions += step_s
        self.moved_at += step_s

    def republish_conditions(self) -> None:
        """Send every space's conditions at the next evaluation (after a reconnect)."""
        self.last_conditions[:] = -np.inf

    # ------------------------------------------------------------------ report samples
    def sample(self, table: IndexTable, now: float, occupied: Any = None,
               air_temperature: Any = None) -> dict[str, Any]:
        """The report sample: the indices the catalogue keeps (:func:`catalogue.kept`), the
        space's comfort band, whether it was occupied, the air temperature and the WBGT the
        report draws against its references (:data:`catalogue.REPORT_FIELDS`) (arrays over
        the spaces, under each entry's stored key; the history the web page plots), NaN as
        null."""

        def col(name: str) -> list[float | None]:
            c = table[name]
            return [None if not ok else round(float(v), 3)
                    for v, ok in zip(c.values, c.present, strict=True)]

        def rounded(values: Any, ok: Any) -> list[float | None]:
            return [None if not k else round(float(v), 3)
                    for v, k in zip(values, ok, strict=True)]

        # the WBGT against the references: the 60-minute mean where it existed, and the spot
        # value apart (both with the clothing adjustment, ISO 7243:2017); "wbgt" is the
        # value the rules compared (the mean, else the spot value)
        eff, twa, spot = (table["wbgt_effective"], table["wbgt_time_weighted"],
                          table["wbgt"])
        adjustment = eff.values - np.where(twa.present, twa.values, spot.values)

        low = [float(self.config.parameters(s).get("comfort_low_c", 20.0))
               for s in self.config.spaces]
        high = [float(self.config.parameters(s).get("comfort_limit_c", 26.0))
                for s in self.config.spaces]
        out: dict[str, Any] = {"t": now, "spaces": list(self.model.space_ids)}
        out.update((e.kept, col(e.name)) for e in catalogue.kept() if e.name in table)
        fields = {"comfort_band_lower": low, "comfort_band_upper": high,
                  "occupied": None if occupied is None else [bool(x) for x in occupied],
                  "air_temperature": [num(float(v)) for v in air_temperature]
                  if air_temperature is not None else [None] * len(self.model.space_ids),
                  # the WBGT against the references, for the report: the 60-minute mean
                  # only where it existed, and the spot value apart
                  "wbgt_mean_60min": rounded(eff.values, eff.present & twa.present),
                  "wbgt_spot_adjusted": rounded(spot.values + adjustment,
                                                eff.present & spot.present)}
        out.update((catalogue.BY_NAME[k].kept, v) for k, v in fields.items())
        return out

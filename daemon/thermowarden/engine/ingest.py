"""From an MQTT message to accepted readings in :class:`SiteState`, or counted rejections.

Each message is matched to its point(s), decoded, converted to SI, corrected by the
point's calibration (``value * scale + offset``), and checked: size, unknown topic or space,
malformed or non-numeric payload, non-finite value, unknown unit, implausible value (outside
the physical range of the quantity narrowed by the point's ``plausible_min``/``max``),
timestamp too old or in the future, duplicate (QoS 1 redelivery: same point and payload
timestamp), out of order, and a change since the last accepted reading faster than the
point's ``max_change_per_min`` (a spike; the next readings are compared with the last
accepted one, so a real step is accepted once enough time has passed). A rejection is counted
by reason and point and returned so the shell can log it at a limited rate. Nothing a
sensor sends raises out of :meth:`Ingestor.ingest`.
"""

from __future__ import annotations

import math
from collections import Counter
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from typing import Final

from thermowarden.config.points import JsonFormat, NumberFormat, SenmlFormat, StateFormat
from thermowarden.core import payloads
from thermowarden.core.payloads import Decoded, DecodeError
from thermowarden.core.quantities import QUANTITIES, STATE_QUANTITIES
from thermowarden.core.units import UnitError, converter
from thermowarden.engine.state import SiteState
from thermowarden.site_model import MAX_SENSORS_PER_SLOT, SiteModel, template_applies

PAYLOAD_TOO_LARGE: Final = "payload_too_large"
UNKNOWN_TOPIC: Final = "unknown_topic"
UNKNOWN_SPACE: Final = "unknown_space"
IMPLAUSIBLE: Final = "implausible"
IMPLAUSIBLE_CHANGE: Final = "implausible_change"
IMPLAUSIBLE_REASONS: Final = frozenset({IMPLAUSIBLE, IMPLAUSIBLE_CHANGE})
"""Rejections that count as implausible readings in sensor health."""
TOO_OLD: Final = "too_old"
IN_FUTURE: Final = "in_future"
DUPLICATE: Final = "duplicate"
OUT_OF_ORDER: Final = "out_of_order"
TOO_MANY_SENSORS: Final = "too_many_sensors"
RETAINED_WITHOUT_TIME: Final = "retained_without_time"
"""A retained value without a timestamp: of unknown age (it may be a dead sensor's last
word), so it is never taken as fresh."""
GAP_FACTOR: Final = 1.5
"""A gap longer than this many reporting intervals counts the readings missed in it."""
NO_POINT: Final = "-"
_NEGATIVE_CACHE_LIMIT: Final = 10_000
QuickEntry = tuple[int, bool, Callable[[float], float], float, float, float, float, float, str]
"""A topic's point, whether its payload is a plain number (else a state), convert, scale,
offset, low, high, max_change_per_s, quantity (:meth:`Ingestor._quick_entry`)."""


@dataclass(frozen=True)
class Rejection:
    """A message (or one value of it) that was refused, and why."""

    reason: str
    point: str
    topic: str
    detail: str


class Ingestor:
    """Matches, decodes, converts and checks messages; stores good readings."""

    def __init__(self, model: SiteModel, state: SiteState) -> None:
        self.model = model
        self.state = state
        cfg = model.config.ingest
        self.max_bytes = cfg.max_payload_bytes
        self.max_age = cfg.max_age_s
        self.skew = cfg.future_skew_s
        self.received = 0
        self.accepted = 0
        self.rejected: Counter[tuple[str, str]] = Counter()
        self._cache: dict[str, list[int]] = {t: list(p) for t, p in model.routes.items()}
        self._state_values: dict[tuple[int, bytes], float] = {}
        """(point, payload) -> the value of a state payload that decodes to one plain value
        (``on``, ``off``, a configured word): equipment repeats a few words."""
        self._negative: dict[str, Rejection] = {}
        self._lazy_count: Counter[tuple[int, str]] = Counter()
        self._quick: dict[str, QuickEntry | tuple[()]] = {}
        """Per known topic, the constants of the short path of :meth:`ingest_many` (see
        :meth:`_quick_entry`; a topic's points and their settings never change)."""
        self.last_points: list[int] = []
        """Points that took a reading from the last message."""
        self.accepted_by_quantity: Counter[str] = Counter()
        self.missed_by_quantity: Counter[str] = Counter()
        """Readings missing in gaps longer than a point's interval (sequence gaps)."""

    # ---------------------------------------------------------------- routing
    def resolve(self, topic: str) -> list[int] | Rejection:
        """The points a topic feeds (creating template points on first use), or why none."""
        return self._resolve(topic)

    def _resolve(self, topic: str) -> list[int] | Rejection:
        cached = self._cache.get(topic)
        if cached is not None:
            return cached
        neg = self._negative.get(topic)
        if neg is not None:
            return neg
        result = self._resolve_templates(topic)
        if isinstance(result, list):
            self._cache[topic] = result
        elif len(self._negative) < _NEGATIVE_CACHE_LIMIT:
            self._negative[topic] = result
        return result

    def _resolve_templates(self, topic: str) -> list[int] | Rejection:
        segments = topic.split("/")
        found: list[int] = []
        rejection: Rejection | None = None
        for k, (tmpl, spec, allowed) in enumerate(self.model.templates):
            values = tmpl.match(segments)
            if values is None:
                continue
            space = self.model.template_space(k, values)
            if space is None:
                named = ", ".join(f"{p} {values[p][:40]!r}" for p in tmpl.tree_placeholders)
                rejection = Rejection(UNKNOWN_SPACE, NO_POINT, topic,
                                      f"no space with {named} in the site")
                continue
            if not template_applies(self.model, allowed, space, spec.quantity):
                continue
            side = values.get("side")
            if side is not None:
                try:
                    from thermowarden.core.radiation import canonical_side
                    canonical_side(side)
                except ValueError as exc:
                    rejection = Rejection(UNKNOWN_TOPIC, NO_POINT, topic, str(exc))
                    continue
            slot = (space, f"{spec.quantity}:{side}")
            if ("side" in values or "sensor" in values):
                self._lazy_count[slot] += 1
                if self._lazy_count[slot] > MAX_SENSORS_PER_SLOT:
                    rejection = Rejection(TOO_MANY_SENSORS, NO_POINT, topic,
                                          f"more than {MAX_SENSORS_PER_SLOT} sensors for one "
                                          "quantity in one space")
                    continue
            found.append(self.model.add_point(space, spec, topic, side=side,
                                              sensor=values.get("sensor")))
        if found:
            return found
        return rejection or Rejection(UNKNOWN_TOPIC, NO_POINT, topic, "no point or template "
                                      "matches this topic")

    # ---------------------------------------------------------------- decoding
    @staticmethod
    def _decode(fmt: NumberFormat | JsonFormat | SenmlFormat | StateFormat, payload: bytes,
                now: float, quantity: str) -> list[Decoded]:
        if isinstance(fmt, NumberFormat):
            return payloads.decode_number(payload)
        if isinstance(fmt, JsonFormat):
            return payloads.decode_json(payload, fmt.value_path, fmt.time_path, fmt.unit_path)
        true_value = 100.0 if quantity == "shading_position" else 1.0
        if isinstance(fmt, SenmlFormat):
            return payloads.decode_senml(payload, now, fmt.name,
                                         state=quantity in STATE_QUANTITIES,
                                         true_value=true_value)
        return payloads.decode_state(payload, fmt.states, fmt.value_path, true_value)

    def _reject(self, reason: str, point: str, topic: str, detail: str) -> Rejection:
        self.rejected[(reason, point)] += 1
        return Rejection(reason, point, topic, detail)

    def oversized(self, topic: str, size: int) -> Rejection:
        """A message of ``size`` bytes (its packet's remaining length) that the shell
        dropped unread for its size: refused as ``payload_too_large`` against its point (or
        as an unknown topic), counted like any other."""
        self.received += 1
        self.last_points = []
        route = self._resolve(topic)
        if isinstance(route, Rejection):
            return self._reject(route.reason, route.point, topic, route.detail)
        return self._reject(PAYLOAD_TOO_LARGE, self.model.points[route[0]].key, topic,
                            f"about {size} bytes > {self.max_bytes} (dropped unread)")

    # ---------------------------------------------------------------- the path
    def ingest(self, topic: str, payload: bytes, now: float,
               retained: bool = False) -> list[Rejection]:
        """Take one message received at ``now`` (epoch s); return its rejections, if any.

        ``retained``: the broker kept it from before we subscribed; without a timestamp in
        the payload its age is unknown and it is refused (``retained_without_time``)."""
        self.received += 1
        self.last_points = []
        route = self._resolve(topic)
        if isinstance(route, Rejection):
            return [self._reject(route.reason, route.point, topic, route.detail)]
        if len(payload) > self.max_bytes:
            key = self.model.points[route[0]].key
            return [self._reject(PAYLOAD_TOO_LARGE, key, topic,
                                 f"{len(payload)} bytes > {self.max_bytes}")]
        out: list[Rejection] = []
        unreadable: set[tuple[type, str, str]] = set()
        for pid in route:
            spec = self.model.points[pid]
            try:
                values = self._decode(spec.fmt, payload, now, spec.quantity)
            except DecodeError as exc:
                # A message that several points read (a SenML pack, a shared sensor) and
                # that fails the same way for each is one bad message: counted once.
                whole = (spec.fmt.__class__, exc.reason, exc.detail)
                if whole not in unreadable:
                    unreadable.add(whole)
                    out.append(self._reject(exc.reason, spec.key, topic, exc.detail))
                continue
            except Exception as exc:  # noqa: BLE001 - nothing a sensor sends may escape
                whole = (spec.fmt.__class__, payloads.MALFORMED, type(exc).__name__)
                if whole not in unreadable:
                    unreadable.add(whole)
                    out.append(self._reject(payloads.MALFORMED, spec.key, topic,
                                            f"undecodable: {type(exc).__name__}"))
                continue
            for d in values:
                if retained and d.time is None:
                    out.append(self._reject(RETAINED_WITHOUT_TIME, spec.key, topic,
                                            "retained value of unknown age"))
                    continue
                r = self._store(pid, d, now, topic)
                if r is not None:
                    out.append(r)
        return out

    def ingest_many(self, items: Iterable[tuple[str, bytes, float, bool]]
                    ) -> list[tuple[float, Rejection]]:
        """Messages ``(topic, payload, received at, retained)`` in order, exactly as
        :meth:`ingest` one by one would take them; returns each rejection with the time its
        message was received, and leaves in :attr:`last_points` every point that took a
        reading, in order.

        A plain number for a known single-point topic (the common case) takes a short
        path: ``float()`` straight from the bytes (for ASCII text the same number as
        decoding, stripping and converting; anything it refuses, and a value that is not
        finite, goes the general way for the exact rejection), then the same checks; so
        does a state payload of such a topic that decodes to one plain value, remembered
        per point and payload (equipment repeats a few words)."""
        out: list[tuple[float, Rejection]] = []
        touched: list[int] = []
        quick = self._quick
        max_bytes = self.max_bytes
        isfinite = math.isfinite
        # A reading without a timestamp of its own is taken at ``now``: it is never too old
        # or in the future unless those limits are negative, and never a duplicate. Such a
        # reading of a known point, in the canonical unit, is checked and recorded inline
        # below with exactly the steps of _store_value; any rejection goes through it.
        inline = not (0.0 > self.max_age) and not (0.0 > self.skew)
        state = self.state
        rings = state.rings
        last_time = state.last_time
        last_value = state.last_value
        last_source = state.last_source_time
        interval = state.interval
        ring_row = rings.row
        ring_len = rings.length
        nan = math.nan
        inf = math.inf
        received = accepted = 0
        by_quantity: dict[str, int] = {}
        try:
            for topic, payload, now, retained in items:
                entry = quick.get(topic)
                if entry is None:
                    entry = self._quick_entry(topic)
                if entry and not retained and len(payload) <= max_bytes:
                    (pid, number_format, convert, scale, offset, low, high, max_change,
                     quantity) = entry
                    if number_format:
                        try:
                            number = float(payload)
                        except ValueError:
                            number = math.nan
                    else:
                        number = self._state_value(pid, payload, now)
                    if isfinite(number):
                        received += 1
                        if inline:
                            value = convert(number) * scale + offset
                            if isfinite(value) and low <= value <= high:
                                # .item(): a Python float, compared and subtracted
                                # without NumPy's scalar machinery (the same IEEE values)
                                last_t = last_time.item(pid)
                                if not now < last_t and (
                                        max_change == inf or last_t != last_t
                                        or abs(value - last_value.item(pid))
                                        <= max_change * (now - last_t) + 1e-9):
                                    gap = interval.item(pid)
                                    if now - last_t > GAP_FACTOR * gap:
                                        self.missed_by_quantity[quantity] += \
                                            int(round((now - last_t) / gap)) - 1
                                    last_value[pid] = value
                                    last_time[pid] = now
                                    last_source[pid] = nan
                                    row = ring_row.item(pid)
                                    if row >= 0:
                                        h = rings.head.item(row)
                                        rings.t[row, h] = now
                                        rings.v[row, h] = value
                                        rings.head[row] = (h + 1) % ring_len
                                        rings.writes += 1
                                    by_quantity[quantity] = by_quantity.get(quantity, 0) + 1
                                    accepted += 1
                                    touched.append(pid)
                                    continue
                        r = self._store_value(pid, number, None, None, now, topic)
                        if r is None:
                            touched.append(pid)
                        else:
                            out.append((now, r))
                        continue
                for r in self.ingest(topic, payload, now, retained):
                    out.append((now, r))
                touched.extend(self.last_points)
                # a new point may have grown the state's arrays
                last_time = state.last_time
                last_value = state.last_value
                last_source = state.last_source_time
                interval = state.interval
                ring_row = rings.row
        finally:
            self.received += received
            self.accepted += accepted
            counts = self.accepted_by_quantity
            for quantity, n in by_quantity.items():
                counts[quantity] += n
        self.last_points = touched
        return out

    def _quick_entry(self, topic: str) -> QuickEntry | tuple[()]:
        """The constants of the short path of :meth:`ingest_many` for a known topic of one
        point whose payload is a plain number or a state (kept), ``()`` for any other known
        topic (kept: it goes the general way), ``()`` unkept for a topic not yet known."""
        route = self._cache.get(topic)
        if route is None:
            return ()
        entry: QuickEntry | tuple[()] = ()
        if len(route) == 1:
            spec = self.model.points[route[0]]
            if spec.fmt.__class__ in (NumberFormat, StateFormat):
                entry = (route[0], spec.fmt.__class__ is NumberFormat, spec.convert,
                         spec.scale, spec.offset, spec.low, spec.high,
                         spec.max_change_per_s, spec.quantity)
        self._quick[topic] = entry
        return entry

    STATE_VALUES_KEPT: Final = 65_536

    def _state_value(self, pid: int, payload: bytes, now: float) -> float:
        """The value of a state payload that decodes to one plain value (no time or unit of
        its own), remembered per point and payload; NaN for any other (the general path
        then takes it, with its exact rejection)."""
        key = (pid, payload)
        value = self._state_values.get(key)
        if value is not None:
            return value
        spec = self.model.points[pid]
        try:
            decoded = self._decode(spec.fmt, payload, now, spec.quantity)
        except Exception:  # noqa: BLE001 - the general path rejects it
            return math.nan
        if len(decoded) != 1 or decoded[0].time is not None or decoded[0].unit is not None:
            return math.nan
        value = decoded[0].value
        if len(self._state_values) < self.STATE_VALUES_KEPT:
            self._state_values[key] = value
        return value

    def _store(self, pid: int, d: Decoded, now: float, topic: str) -> Rejection | None:
        r = self._store_value(pid, d.value, d.time, d.unit, now, topic)
        if r is None:
            self.last_points.append(pid)
        return r

    def _store_value(self, pid: int, raw: float, source_time: float | None,
                     unit: str | None, now: float, topic: str) -> Rejection | None:
        """Convert, check and record one decoded value (``source_time``: the payload's own
        timestamp, if any; ``unit``: the payload's unit, if any)."""
        spec = self.model.points[pid]
        convert = spec.convert
        if unit is not None and unit != spec.unit:
            try:
                convert = converter(QUANTITIES[spec.quantity].kind, unit)
            except UnitError as exc:
                return self._reject(payloads.UNKNOWN_UNIT, spec.key, topic, str(exc))
        value = convert(raw) * spec.scale + spec.offset
        if not math.isfinite(value):
            return self._reject(payloads.NOT_FINITE, spec.key, topic, "converted value")
        if not spec.low <= value <= spec.high:
            return self._reject(IMPLAUSIBLE, spec.key, topic,
                                f"{value:.6g} outside {spec.low:g}..{spec.high:g}")
        t = now if source_time is None else source_time
        if now - t > self.max_age:
            return self._reject(TOO_OLD, spec.key, topic, f"{now - t:.0f} s old")
        if t - now > self.skew:
            return self._reject(IN_FUTURE, spec.key, topic, f"{t - now:.0f} s ahead")
        state = self.state
        if source_time is not None and t == state.last_source_time[pid]:
            return self._reject(DUPLICATE, spec.key, topic, "same point and timestamp")
        last_t = state.last_time[pid]
        if t < last_t:
            return self._reject(OUT_OF_ORDER, spec.key, topic, "older than the latest reading")
        if spec.max_change_per_s != math.inf and last_t == last_t:  # a previous reading
            change = abs(value - state.last_value[pid])
            allowed = spec.max_change_per_s * (t - last_t)
            if change > allowed + 1e-9:
                return self._reject(IMPLAUSIBLE_CHANGE, spec.key, topic,
                                    f"changed {change:.4g} in {t - last_t:.0f} s, more than "
                                    f"{spec.max_change_per_s * 60:g} per minute")
        last = state.last_time[pid]
        interval = state.interval[pid]
        if t - last > GAP_FACTOR * interval:  # false for the first reading (last is not set)
            self.missed_by_quantity[spec.quantity] += int(round((t - last) / interval)) - 1
        state.record(pid, t, value, t if source_time is not None else math.nan)
        self.accepted_by_quantity[spec.quantity] += 1
        self.accepted += 1
        return None

    def rejected_by_reason(self) -> Counter[str]:
        """Rejections summed over points (the default metric, no per-point labels)."""
        out: Counter[str] = Counter()
        for (reason, _), n in self.rejected.items():
            out[reason] += n
        return out

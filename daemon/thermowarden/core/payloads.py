"""Decoding sensor payloads: plain numbers, JSON with field paths, SenML, equipment states.

Decoders are pure: bytes (and the receive time for SenML relative times) in, a list of
:class:`Decoded` values out, or a :class:`DecodeError` with a rejection reason. Nothing a
sensor sends raises anything else.
"""

from __future__ import annotations

import datetime as dt
import json
import math
from dataclasses import dataclass
from typing import Any, Final

# Rejection reasons (also the metric label values).
MALFORMED: Final = "malformed"
NOT_NUMERIC: Final = "not_numeric"
NOT_FINITE: Final = "not_finite"
UNKNOWN_UNIT: Final = "unknown_unit"
UNKNOWN_STATE: Final = "unknown_state"
BAD_TIMESTAMP: Final = "bad_timestamp"

SENML_UNITS: Final[dict[str, str]] = {
    # RFC 8428 section 12.1 registry symbol -> our unit name
    "Cel": "°C", "K": "K", "%RH": "%", "%": "%", "/": "fraction", "m/s": "m/s",
    "W/m2": "W/m²", "Pa": "Pa",
}
TRUE_WORDS: Final = frozenset({"true", "on", "yes", "1", "running", "occupied", "lowered"})
FALSE_WORDS: Final = frozenset({"false", "off", "no", "0", "stopped", "vacant", "raised"})
SENML_RELATIVE_LIMIT: Final = 2**28
"""RFC 8428 4.5.3: a resolved time below 2**28 is relative to the current time."""
MS_THRESHOLD: Final = 1e11
"""Epoch values above this are milliseconds (1e11 s is the year 5138)."""


class DecodeError(ValueError):
    """A payload that yields no reading; ``reason`` is one of the constants above."""

    def __init__(self, reason: str, detail: str) -> None:
        super().__init__(f"{reason}: {detail}")
        self.reason = reason
        self.detail = detail


@dataclass(frozen=True)
class Decoded:
    """One value from a payload: its SenML name if any, time (epoch s) and unit if given."""

    value: float
    time: float | None = None
    unit: str | None = None
    name: str | None = None


def _finite(x: float, what: str) -> float:
    if not math.isfinite(x):
        raise DecodeError(NOT_FINITE, f"{what} is {x}")
    return x


def _to_float(raw: object, what: str) -> float:
    if isinstance(raw, bool):
        raise DecodeError(NOT_NUMERIC, f"{what} is a boolean")
    if isinstance(raw, int | float):
        return _finite(_as_float(raw), what)
    if isinstance(raw, str):
        try:
            number = float(raw.strip())
        except ValueError:
            raise DecodeError(NOT_NUMERIC, f"{what} is {raw[:40]!r}") from None
        return _finite(number, what)
    raise DecodeError(NOT_NUMERIC, f"{what} is {type(raw).__name__}")


def _as_float(raw: int | float) -> float:
    try:
        return float(raw)
    except OverflowError:
        return math.inf


def _text(payload: bytes) -> str:
    try:
        return payload.decode("utf-8")
    except UnicodeDecodeError:
        raise DecodeError(MALFORMED, "not UTF-8 text") from None


def _json(payload: bytes) -> Any:
    try:
        return json.loads(_text(payload))
    except (ValueError, RecursionError):  # JSONDecodeError, or too many integer digits
        raise DecodeError(MALFORMED, "not valid JSON") from None


def follow_path(data: Any, path: str) -> Any:
    """Follow a dotted path (``a.b.0.c``; numbers index lists) into decoded JSON."""
    node = data
    for part in path.split("."):
        if isinstance(node, dict):
            if part not in node:
                raise DecodeError(MALFORMED, f"no field {path!r}")
            node = node[part]
        elif isinstance(node, list):
            try:
                node = node[int(part)]
            except (ValueError, IndexError):
                raise DecodeError(MALFORMED, f"no element {path!r}") from None
        else:
            raise DecodeError(MALFORMED, f"no field {path!r}")
    return node


def parse_timestamp(raw: object) -> float:
    """Epoch seconds from epoch seconds, epoch milliseconds or an ISO 8601 string.

    An ISO 8601 time without an offset is taken as UTC.
    """
    if isinstance(raw, bool):
        raise DecodeError(BAD_TIMESTAMP, "timestamp is a boolean")
    if isinstance(raw, int | float):
        t = _as_float(raw)
        if not math.isfinite(t) or t < 0:
            raise DecodeError(BAD_TIMESTAMP, f"timestamp {raw!r}")
        return t / 1000.0 if t > MS_THRESHOLD else t
    if isinstance(raw, str):
        try:
            d = dt.datetime.fromisoformat(raw.strip().replace("Z", "+00:00"))
        except ValueError:
            raise DecodeError(BAD_TIMESTAMP, f"timestamp {raw[:40]!r} is not ISO 8601") from None
        if d.tzinfo is None:
            d = d.replace(tzinfo=dt.UTC)
        return d.timestamp()
    raise DecodeError(BAD_TIMESTAMP, f"timestamp is {type(raw).__name__}")


def decode_number(payload: bytes) -> list[Decoded]:
    """A plain ASCII number such as ``23.4``."""
    try:
        value = float(payload)  # the usual case: ASCII digits, read from the bytes at once
    except (TypeError, ValueError):
        value = math.nan
    if math.isfinite(value):
        return [Decoded(value)]
    # anything else (other text, non-finite, not UTF-8) the long way, for its exact error
    return [Decoded(_to_float(_text(payload), "payload"))]


def decode_json(payload: bytes, value_path: str, time_path: str | None = None,
                unit_path: str | None = None) -> list[Decoded]:
    """A JSON document with the value (and optionally time and unit) at dotted paths."""
    data = _json(payload)
    value = _to_float(follow_path(data, value_path), value_path)
    t = parse_timestamp(follow_path(data, time_path)) if time_path else None
    unit = None
    if unit_path:
        raw_unit = follow_path(data, unit_path)
        if not isinstance(raw_unit, str):
            raise DecodeError(UNKNOWN_UNIT, f"{unit_path} is not a unit name")
        unit = raw_unit
    return [Decoded(value, t, unit)]


def decode_senml(payload: bytes, now: float, name: str | None = None) -> list[Decoded]:
    """SenML JSON (RFC 8428): base fields resolved into each record before use.

    Returns the records whose resolved name is ``name`` (all records when ``name`` is None
    and the pack holds one). Units must be in :data:`SENML_UNITS`; a record without a
    unit is returned with ``unit=None`` (the point's configured unit then applies).
    """
    data = _json(payload)
    if not isinstance(data, list) or not data:
        raise DecodeError(MALFORMED, "SenML pack must be a non-empty JSON array")
    base_name, base_time, base_unit, base_value = "", 0.0, None, 0.0
    out: list[Decoded] = []
    for rec in data:
        if not isinstance(rec, dict):
            raise DecodeError(MALFORMED, "SenML record is not an object")
        if "bn" in rec:
            if not isinstance(rec["bn"], str):
                raise DecodeError(MALFORMED, "bn is not a string")
            base_name = rec["bn"]
        if "bt" in rec:
            base_time = _to_float(rec["bt"], "bt") if not isinstance(rec["bt"], str) else \
                _bad_time()
        if "bu" in rec:
            base_unit = rec["bu"]
        if "bv" in rec:
            base_value = _to_float(rec["bv"], "bv")
        rname = base_name + (rec["n"] if isinstance(rec.get("n"), str) else "")
        if "v" in rec:
            value = base_value + _to_float(rec["v"], "v")
        elif "vb" in rec:
            if not isinstance(rec["vb"], bool):
                raise DecodeError(NOT_NUMERIC, "vb is not a boolean")
            value = 1.0 if rec["vb"] else 0.0
        elif "vs" in rec or "vd" in rec or "s" in rec:
            continue  # string, data and sum records carry nothing we measure
        else:
            continue
        t_raw = base_time + (_to_float(rec["t"], "t") if "t" in rec else 0.0)
        t = now + t_raw if abs(t_raw) < SENML_RELATIVE_LIMIT else t_raw
        unit_raw = rec.get("u", base_unit)
        unit: str | None = None
        if unit_raw is not None:
            if not isinstance(unit_raw, str) or unit_raw not in SENML_UNITS:
                raise DecodeError(UNKNOWN_UNIT, f"SenML unit {str(unit_raw)[:20]!r} is not one "
                                  f"we convert ({', '.join(SENML_UNITS)})")
            unit = SENML_UNITS[unit_raw]
        out.append(Decoded(value, t, unit, rname))
    if name is not None:
        out = [d for d in out if d.name == name]
        if not out:
            raise DecodeError(MALFORMED, f"no SenML record named {name!r}")
    elif len(out) != 1:
        raise DecodeError(MALFORMED, f"SenML pack holds {len(out)} records; the point must "
                          "name the one it wants")
    return out


def _bad_time() -> float:
    raise DecodeError(BAD_TIMESTAMP, "bt is not a number")


def decode_state(payload: bytes, states: dict[str, float], value_path: str | None = None,
                 true_value: float = 1.0) -> list[Decoded]:
    """Equipment or occupancy state: named states, booleans, on/off words or a number.

    A boolean or an on/off word becomes ``true_value`` or 0 (shading uses 100: % lowered).
    """
    raw: Any
    if value_path:
        raw = follow_path(_json(payload), value_path)
    else:
        raw = _text(payload).strip()
        if raw.startswith(("{", "[", '"')):
            try:
                raw = json.loads(raw)
            except (ValueError, RecursionError):
                raise DecodeError(MALFORMED, "not valid JSON") from None
    if isinstance(raw, bool):
        return [Decoded(true_value if raw else 0.0)]
    if isinstance(raw, int | float):
        return [Decoded(_finite(_as_float(raw), "state"))]
    if isinstance(raw, str):
        word = raw.strip()
        if word in states:
            return [Decoded(float(states[word]))]
        low = word.lower()
        if low in TRUE_WORDS:
            return [Decoded(true_value)]
        if low in FALSE_WORDS:
            return [Decoded(0.0)]
        try:
            number = float(word)
        except ValueError:
            raise DecodeError(UNKNOWN_STATE, f"state {word[:40]!r} is not configured") from None
        return [Decoded(_finite(number, "state"))]
    raise DecodeError(UNKNOWN_STATE, f"state is {type(raw).__name__}")

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
RECORD_ABSENT: Final = "record_absent"
"""A SenML pack without the record a point takes: nothing for that point in this message."""

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


def decode_senml(payload: bytes, now: float, name: str | None = None, *, state: bool = False,
                 true_value: float = 1.0) -> list[Decoded]:
    """SenML JSON (RFC 8428): base fields resolved into each record before use.

    Returns the records whose resolved name is ``name`` (all records when ``name`` is None
    and the pack holds one). A value is taken only from the field that fits the quantity
    (RFC 8428 section 4.2): a measured quantity from ``v`` (a JSON number, plus the base
    value), never from a boolean ``vb``, a string ``vs``, data ``vd`` or a sum ``s``; an
    equipment or occupancy state (``state``) from ``vb`` (true is ``true_value``), ``v`` or
    ``vs`` (on/off words or a number). Units must be in :data:`SENML_UNITS`; a record
    without a unit is returned with ``unit=None`` (the point's configured unit then applies).

    Only the records a point selects (and the base fields before them) can refuse it: a
    damaged record of another name does not, and a pack without a record of this name is
    refused as :data:`RECORD_ABSENT` (it carries nothing for this point), not as malformed.
    """
    data = _json(payload)
    if not isinstance(data, list) or not data:
        raise DecodeError(MALFORMED, "SenML pack must be a non-empty JSON array")
    base_name, base_time, base_unit, base_value = "", 0.0, None, 0.0
    base_error: DecodeError | None = None
    unreadable = 0
    others: list[str] = []
    out: list[Decoded] = []
    errors: list[DecodeError] = []
    for rec in data:
        if not isinstance(rec, dict):
            unreadable += 1
            continue
        try:
            if "bn" in rec:
                if not isinstance(rec["bn"], str):
                    raise DecodeError(MALFORMED, "bn is not a string")
                base_name = rec["bn"]
            if "bt" in rec:
                base_time = _senml_number(rec["bt"], "bt", BAD_TIMESTAMP)
            if "bu" in rec:
                base_unit = rec["bu"]
            if "bv" in rec:
                base_value = _senml_number(rec["bv"], "bv", NOT_NUMERIC)
        except DecodeError as exc:
            base_error = exc  # the records after it cannot be resolved
        if base_error is not None:
            unreadable += 1
            continue
        if "n" in rec and not isinstance(rec["n"], str):
            unreadable += 1
            continue
        rname = base_name + rec.get("n", "")
        if not any(k in rec for k in VALUE_FIELDS):
            continue  # base fields only
        if name is not None and rname != name:
            others.append(rname)
            continue
        try:
            value = _senml_value(rec, rname, base_value, state, true_value)
            t_raw = base_time + (_senml_number(rec["t"], "t", BAD_TIMESTAMP)
                                 if "t" in rec else 0.0)
            t = now + t_raw if abs(t_raw) < SENML_RELATIVE_LIMIT else t_raw
            unit_raw = rec.get("u", base_unit)
            unit: str | None = None
            if unit_raw is not None:
                if not isinstance(unit_raw, str) or unit_raw not in SENML_UNITS:
                    raise DecodeError(UNKNOWN_UNIT, f"SenML unit {str(unit_raw)[:20]!r} is not "
                                      f"one we convert ({', '.join(SENML_UNITS)})")
                unit = SENML_UNITS[unit_raw]
        except DecodeError as exc:
            errors.append(exc)
            continue
        out.append(Decoded(value, t, unit, rname))
    if errors:
        raise errors[0]
    if name is None:
        if len(out) != 1 or unreadable:
            raise DecodeError(MALFORMED, f"SenML pack holds {len(out) + unreadable} records; "
                              "the point must name the one it wants")
        return out
    if not out:
        if base_error is not None:
            raise base_error
        if unreadable:
            raise DecodeError(MALFORMED, f"no SenML record named {name[:60]!r} among those "
                              f"that could be read ({unreadable} could not)")
        held = ", ".join(repr(n[:60]) for n in others[:5]) or "no named values"
        raise DecodeError(RECORD_ABSENT, f"no SenML record named {name[:60]!r} in this pack "
                          f"(it holds {held})")
    return out


VALUE_FIELDS: Final = ("v", "vb", "vs", "vd", "s")
_FIELD_WORDS: Final = {"vb": "a boolean (vb)", "vs": "a string (vs)", "vd": "data (vd)",
                       "s": "a sum (s)", "v": "a number (v)"}


def _senml_number(raw: object, what: str, reason: str) -> float:
    """A SenML numeric field: a JSON number (RFC 8428 section 5), finite."""
    if isinstance(raw, bool) or not isinstance(raw, int | float):
        raise DecodeError(reason, f"{what} is {type(raw).__name__}, not a number")
    return _finite(_as_float(raw), what)


def _senml_value(rec: dict[str, Any], rname: str, base_value: float, state: bool,
                 true_value: float) -> float:
    """The value of one selected record, from the field that fits (see decode_senml)."""
    fields = [k for k in VALUE_FIELDS if k in rec]
    if len([k for k in fields if k != "s"]) > 1:
        raise DecodeError(MALFORMED, f"SenML record {rname[:60]!r} has more than one value "
                          f"field ({', '.join(fields)})")
    field = fields[0]
    if field == "v":
        return base_value + _senml_number(rec["v"], "v", NOT_NUMERIC)
    if state and field == "vb":
        if not isinstance(rec["vb"], bool):
            raise DecodeError(NOT_NUMERIC, "vb is not a boolean")
        return true_value if rec["vb"] else 0.0
    if state and field == "vs":
        word = rec["vs"]
        if not isinstance(word, str):
            raise DecodeError(UNKNOWN_STATE, "vs is not a string")
        low = word.strip().lower()
        if low in TRUE_WORDS:
            return true_value
        if low in FALSE_WORDS:
            return 0.0
        try:
            return _finite(float(low), "vs")
        except ValueError:
            raise DecodeError(UNKNOWN_STATE, f"state {word[:40]!r} is not one of on/off, "
                              "true/false or a number") from None
    wanted = "a boolean (vb), a number (v) or a state word (vs)" if state else "a number (v)"
    raise DecodeError(NOT_NUMERIC, f"SenML record {rname[:60]!r} carries "
                      f"{_FIELD_WORDS[field]}; this point takes {wanted}")


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

"""``assess --format table`` for a person: which index matters for the kind of place, a
verdict that reads the table's own numbers, the rows that apply, and what was assumed.

The kind of place is decided from the input: ``hot_work`` true is hot work (heat stress,
WBGT by ISO 7243); ``hot_work`` false is comfort indoors (PMV by ISO 7730) or outdoor heat
(UTCI) with ``environment: outdoor``; without ``hot_work``, a natural wet-bulb, a 60-minute
WBGT, a ``work_class`` or ``acclimatised`` (heat-stress terms of ISO 7243) make it hot work,
``environment: outdoor`` outdoor heat, anything else comfort.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Final

from thermowarden.core.catalogue import COMFORT, HOT_WORK, OUTDOOR, PLACES, key_rows, rows_for
from thermowarden.core.labels import index_label

DECIMALS: Final = {"°C": 1, "K": 1, "%": 0, "kg/kg": 4, "W": 0, "g": 0, "min": 0, "m/s": 2,
                   "1": 2}
"""Decimals shown per unit in the table (the JSON output keeps every digit)."""

SHOWN_UNIT: Final = {"humidex": "(°C equivalent)"}
"""Units shown for dimensionless indices that are read on a temperature scale."""

KEY_ROWS: Final[dict[str, tuple[str, ...]]] = {p: key_rows(p) for p in PLACES}
"""Rows shown for each kind of place even without a value (the reason then says why): the
catalogue's key rows of the place."""

UTCI_BANDS: Final = ((-40.0, "extreme cold stress"), (-27.0, "very strong cold stress"),
                     (-13.0, "strong cold stress"), (0.0, "moderate cold stress"),
                     (9.0, "slight cold stress"), (26.0, "no thermal stress"),
                     (32.0, "moderate heat stress"), (38.0, "strong heat stress"),
                     (46.0, "very strong heat stress"))
"""UTCI assessment scale, upper edge (°C, inclusive) -> stress category (Bröde et al. 2012,
Int J Biometeorol 56:481; the same bins as pythermalcomfort's ``utci``); above 46 °C:
extreme heat stress."""

REACHED_K: Final = 0.5
"""A margin within this of a reference is called reached: below the accuracy of the
instruments (ISO 7243:2017 gives ±0.5 K for the natural wet-bulb and globe)."""


WORDS: Final = {"natural_wet_bulb": "natural wet-bulb", "wbgt_time_weighted": "60-minute WBGT",
                "work_class": "work class", "acclimatised": "acclimatisation"}


def place_kind(data: Mapping[str, object]) -> tuple[str, str]:
    """(kind of place, what decided it) from the spot-check input (see the module)."""
    outdoors = data.get("environment") == "outdoor"
    if data.get("hot_work") is True:
        return HOT_WORK, "hot work, as given"
    if data.get("hot_work") is False:
        return ((OUTDOOR, "outdoors and no hot work, as given") if outdoors
                else (COMFORT, "no hot work, as given"))
    for key in ("natural_wet_bulb", "wbgt_time_weighted", "work_class", "acclimatised"):
        if key in data:
            return HOT_WORK, (f"the {WORDS[key]} given; \"hot_work\": false reads it as a "
                              "place for comfort")
    if outdoors:
        return OUTDOOR, "outdoors, as given"
    return COMFORT, "no hot work and no heat-stress input given"


def defaults_taken(data: Mapping[str, object], kind: str) -> list[str]:
    """The defaults the computation took for what the input leaves out, in words."""
    out: list[str] = []
    if "met" not in data and "work_class" not in data:
        out.append("no metabolic rate: comfort at 1.2 met (seated office work), no WBGT "
                   "reference" if kind != OUTDOOR else "no metabolic rate")
    if kind == HOT_WORK and "acclimatised" not in data:
        out.append("workers not acclimatised")
    if "environment" not in data:
        out.append("indoors")
    if "altitude_m" not in data and "barometric_pressure" not in data:
        out.append("sea-level pressure (101.325 kPa)")
    if "globe_temperature" in data and "globe_diameter_m" not in data:
        out.append("a 150 mm globe")
    if kind == HOT_WORK and "clothing" not in data and "clothing_adjustment_k" not in data:
        out.append("work clothes (no clothing adjustment to WBGT)")
    if data.get("hot_work") is True:
        if "posture" not in data:
            out.append("standing (PHS)")
        if "phs_edition" not in data:
            out.append("ISO 7933:2023")
    if kind == OUTDOOR and "air_speed" in data and "air_speed_height_m" not in data:
        out.append("air speed measured 1.1 m above ground")
    return out


def shown_value(name: str, value: object, unit: str) -> str:
    """A number as the table shows it: its unit's decimals and the unit."""
    if not isinstance(value, int | float) or isinstance(value, bool):
        return str(value)
    digits = 1 if name in SHOWN_UNIT else DECIMALS.get(unit, 2)
    text = f"{value:.{digits}f}"
    if text.startswith("-") and float(text) == 0.0:
        text = text[1:]
    label = SHOWN_UNIT.get(name, "" if unit in ("1", "category", "") else unit)
    return f"{text} {label}".rstrip()


def _num(result: Mapping[str, Mapping[str, object]], key: str) -> float | None:
    v = result.get(key, {}).get("value")
    return float(v) if isinstance(v, int | float) and not isinstance(v, bool) else None


def _shown(result: Mapping[str, Mapping[str, object]], key: str) -> str:
    item = result[key]
    return shown_value(key, item["value"], str(item["unit"]))


def _reason(result: Mapping[str, Mapping[str, object]], key: str) -> str:
    return str(result.get(key, {}).get("reason") or "no value")


def _margin_words(result: Mapping[str, Mapping[str, object]], key: str) -> str:
    """A WBGT margin (reference minus WBGT, as the table's row) in words, with the row's
    own rounding and sign."""
    margin = _num(result, key)
    assert margin is not None
    shown = _shown(result, key)
    if abs(margin) < REACHED_K:
        return f"margin {shown}: within {REACHED_K} K, treat as reached"
    side = "below" if margin > 0 else "above"
    return f"margin {shown}: {shown.lstrip('-')} {side}"


def verdict(result: Mapping[str, Mapping[str, object]], kind: str,
            acclimatised: bool = False) -> str:
    """One line for a person about the index that matters for ``kind``, with the numbers
    as the table shows them (same rounding, same sign)."""
    if kind == HOT_WORK:
        return _heat_stress_verdict(result, acclimatised)
    if kind == OUTDOOR:
        utci = _num(result, "utci")
        if utci is None:
            return f"Outdoor heat (UTCI): no value from these readings ({_reason(result, 'utci')})"
        band = next((name for edge, name in UTCI_BANDS if utci <= edge), "extreme heat stress")
        return f"Outdoor heat (UTCI): {_shown(result, 'utci')}, {band}"
    for key, ppd, std in (("pmv_iso", "ppd_iso", "ISO 7730"), ("pmv_ashrae", "ppd_ashrae",
                                                               "ASHRAE 55")):
        pmv = _num(result, key)
        if pmv is None:
            continue
        feel = ("neutral" if abs(pmv) <= 0.5 else
                ("slightly warm" if pmv > 0 else "slightly cool") if abs(pmv) <= 1.5 else
                ("warm" if pmv > 0 else "cool") if abs(pmv) <= 2.5 else
                ("hot" if pmv > 0 else "cold"))
        extra = f", PPD {_shown(result, ppd)}" if _num(result, ppd) is not None else ""
        cat = result.get("comfort_category_iso", {}).get("value") if key == "pmv_iso" else None
        extra += f", ISO 7730 category {cat}" if cat else ""
        return f"Comfort (PMV, {std}): {feel} (PMV {pmv:+.2f}{extra})"
    to = (f"; operative temperature {_shown(result, 'operative_temperature')}"
          if _num(result, "operative_temperature") is not None else "")
    return f"Comfort (PMV): no value from these readings ({_reason(result, 'pmv_iso')}){to}"


def _heat_stress_verdict(result: Mapping[str, Mapping[str, object]], acclimatised: bool) -> str:
    """The WBGT against the reference of the workers as given: acclimatised, their limit
    (NIOSH REL) with the action value (RAL); not acclimatised, the RAL alone, and the REL
    only once it is reached."""
    wbgt = _num(result, "wbgt_effective")
    if wbgt is None:
        return (f"Heat stress (WBGT): no value from these readings "
                f"({_reason(result, 'wbgt_effective')})")
    ma, mu = _num(result, "wbgt_margin_acclimatised"), _num(result, "wbgt_margin_unacclimatised")
    w = f"WBGT {_shown(result, 'wbgt_effective')}"
    if ma is None or mu is None:
        return (f"Heat stress: {w}; no reference value "
                f"({_reason(result, 'wbgt_reference')})")
    ref_a, ref_u = _shown(result, "wbgt_reference_acclimatised"), _shown(
        result, "wbgt_reference_unacclimatised")
    if acclimatised:
        head = ("HEAT STRESS (acclimatised, above their limit)" if ma < REACHED_K
                else "HEAT STRESS (acclimatised, above the action value)" if mu < REACHED_K
                else "Heat stress: below the WBGT reference (acclimatised)")
        return (f"{head}: {w} vs reference {ref_a} "
                f"({_margin_words(result, 'wbgt_margin_acclimatised')}; action value {ref_u}, "
                f"{_margin_words(result, 'wbgt_margin_unacclimatised')})")
    head = ("HEAT STRESS (not acclimatised, above even the acclimatised limit)"
            if ma < REACHED_K else "HEAT STRESS (not acclimatised)" if mu < REACHED_K
            else "Heat stress: below the WBGT reference (not acclimatised)")
    above_a = (f"; acclimatised limit {ref_a}, "
               f"{_margin_words(result, 'wbgt_margin_acclimatised')}" if ma < REACHED_K else "")
    return (f"{head}: {w} vs reference {ref_u} "
            f"({_margin_words(result, 'wbgt_margin_unacclimatised')}{above_a})")


HEAT_STRESS_ROWS: Final = rows_for(HOT_WORK)
"""The heat-stress rows (the catalogue's rows for hot work), left out for comfort (not a
place of hot work)."""


def shown_rows(result: Mapping[str, Mapping[str, object]], kind: str, everything: bool,
               hot_work: bool = False) -> list[str]:
    """The index names the table shows: every one with ``everything``; else the key rows
    of the kind of place (with their reason when absent) and the other rows that have a
    value, without the heat-stress rows for comfort; PHS rows when ``hot_work``."""
    keys = KEY_ROWS[kind]
    if hot_work:
        keys = (*keys, *(k for k in result if k.startswith("phs_")))
    if everything:
        return list(result)
    return [k for k, item in result.items() if k in keys or (
        item["value"] is not None and not (kind == COMFORT and k in HEAT_STRESS_ROWS))]


def format_table(result: Mapping[str, Mapping[str, object]], names: list[str],
                 width: int) -> str:
    """One line per index, at most ``width`` columns: words, value and unit, then the method
    (or why there is no value), shortened to fit; the JSON output has them in full."""
    labels = {k: index_label(k) for k in names}
    wide = max((len(x) for x in labels.values()), default=0)
    lines = []
    for name in names:
        item = result[name]
        value = item["value"]
        if value is None:
            shown, note = "-", f"({item.get('reason')})"
        else:
            shown, note = shown_value(name, value, str(item["unit"])), str(item["method"])
        line = f"{labels[name]:<{wide}}  {shown:<16} {note}"
        lines.append(line if len(line) <= width else line[:width - 3] + "...")
    return "\n".join(lines)

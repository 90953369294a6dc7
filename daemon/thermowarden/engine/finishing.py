"""Rules that can always finish: which rule conditions can never become true in a space.

Per space, the names a rule can read are found by feeding every point of the space a
typical reading and computing the indices once: what comes out known is *available*
(whatever the values later are), the rest can never be known there. The symbolic check
of :mod:`thermowarden.core.reachability` then says which raise and clear conditions can
never become true, and which input stands in the way.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Final

import numpy as np

from thermowarden.core.forecast import FORESIGHT_COLUMNS
from thermowarden.core.indices import compute_indices
from thermowarden.core.reachability import blocking_names, can_become_true
from thermowarden.engine.state import SiteState
from thermowarden.rules import FLAGS, HEALTH, CompiledPack, CompiledRule, rule_applies
from thermowarden.site_model import SiteModel

TYPICAL: Final[dict[str, float]] = {
    "air_temperature": 24.0, "relative_humidity": 50.0, "globe_temperature": 25.0,
    "mean_radiant_temperature": 25.0, "plane_radiant_temperature": 25.0, "radiant_flux": 5.0,
    "air_speed": 0.15, "natural_wet_bulb": 18.0, "psychrometric_wet_bulb": 17.5,
    "surface_temperature": 21.0, "floor_temperature": 23.0, "outdoor_air_temperature": 24.0,
    "outdoor_relative_humidity": 50.0, "wind_speed": 2.0, "solar_irradiance": 300.0,
    "barometric_pressure": 101325.0, "shading_position": 0.0, "fan_state": 0.0,
    "occupancy": 1.0, "turbulence_intensity": 30.0,  # per cent, the canonical unit
}
"""A reading of each quantity inside every method's range (invented, for this test only)."""
T0: Final = 1_780_000_000.0


@dataclass(frozen=True)
class Unfinishable:
    """A rule of a space whose raise or clear condition can never become true."""

    space: str
    rule: str
    which: str
    """"raise" or "clear"."""
    missing: tuple[str, ...]


SCENES: Final[tuple[dict[str, float], ...]] = (
    {},                                                            # mild
    {"air_temperature": 30.0, "globe_temperature": 31.0, "mean_radiant_temperature": 31.0,
     "plane_radiant_temperature": 31.0, "natural_wet_bulb": 25.0, "air_speed": 0.1,
     "relative_humidity": 55.0, "outdoor_air_temperature": 32.0},  # hot, still air
    {"air_temperature": 27.0, "globe_temperature": 27.5, "mean_radiant_temperature": 27.5,
     "plane_radiant_temperature": 27.5, "air_speed": 0.1},          # warm, still air
    {"air_temperature": 20.0, "globe_temperature": 19.5, "mean_radiant_temperature": 19.5,
     "plane_radiant_temperature": 19.0, "air_speed": 0.3, "floor_temperature": 19.0,
     "outdoor_air_temperature": 12.0},                             # cool, moving air
)
"""Invented conditions (for this test only): an index that applies in one of them can be
known in the space; many indices only apply in part of their inputs' range."""


def available_names(model: SiteModel, parameters: Mapping[int, set[str]]) -> list[set[str]]:
    """Per space, every name a rule may read that can be known there."""
    n = model.n_spaces
    out: list[set[str]] = [set() for _ in range(n)]
    for scene in SCENES:
        values = {**TYPICAL, **scene}
        state = SiteState(model)
        for pid, p in enumerate(model.points):
            v = values.get(p.quantity)
            if v is None:
                continue
            for k in range(12):  # a few minutes of readings fill the air-speed window
                wobble = 1.0 + (0.2 if k % 2 else -0.2) * (p.quantity == "air_speed")
                t = T0 - 60.0 * (11 - k)
                state.record(pid, t, v * wobble, t)
        snap = state.snapshot(T0)
        table = compute_indices(snap.inputs, with_phs=True)
        inputs = snap.inputs
        for i in range(n):
            names = out[i]
            names.update(name for name, col in table.items() if bool(col.present[i]))
            if "wbgt" in names:
                names.add("wbgt_time_weighted")  # built by the engine from the spot WBGT
                if bool(inputs.hot_work[i]):  # and the ahead-of-time columns from it
                    names.update(n for n in FORESIGHT_COLUMNS if n.startswith("wbgt_"))
            if model.config.spaces[i].windows and model.config.site.latitude is not None:
                names.update(n for n in FORESIGHT_COLUMNS if n.startswith("sun_"))
                if np.isfinite(snap.outdoor["solar_irradiance"]).any():
                    names.add("sky_clearness")
            for name in ("air_temperature", "globe_temperature", "air_speed",
                         "natural_wet_bulb", "psychrometric_wet_bulb", "floor_temperature",
                         "turbulence_intensity"):
                if np.isfinite(getattr(inputs, name)[i]):
                    names.add(name)
            if np.isfinite(inputs.mean_radiant_temperature[i]):
                names.add("mean_radiant_temperature_measured")
            if np.isfinite(inputs.surface_temperature_min[i]):
                names.add("surface_temperature")
            for side, arr in inputs.plane_radiant.items():
                if np.isfinite(arr[i]):
                    names.add(f"plane_radiant_temperature_{side}")
            for q, present in snap.present.items():
                if bool(present[i]):
                    names.add(q)
            for q, value in snap.outdoor.items():
                if np.isfinite(value):
                    names.add(q)
    for i in range(n):
        out[i].update(("met", "clo", "target_pmv"))
        out[i].update(FLAGS)
        out[i].update(HEALTH)
        out[i].update(parameters.get(i, set()))
    return out


def unfinishable_rules(model: SiteModel, packs: Mapping[str, CompiledPack]
                       ) -> list[Unfinishable]:
    """Every (space, rule) whose raise or clear condition can never become true with the
    space's points, and the names that stand in the way."""
    config = model.config
    params: dict[int, set[str]] = {
        i: {p for pack in config.rule_packs(s) if pack in packs
            for r in packs[pack].rules for p in r.config.parameters}
        for i, s in enumerate(config.spaces)}
    available = available_names(model, params)
    found: list[Unfinishable] = []
    for i, space in enumerate(config.spaces):
        for pack_name in config.rule_packs(space):
            pack = packs.get(pack_name)
            if pack is None:
                continue
            for rule in pack.rules:
                if not rule_applies(rule.config, space):
                    continue
                found.extend(_check_rule(space.id, rule, available[i]))
    return found


def _check_rule(space: str, rule: CompiledRule, available: set[str]) -> list[Unfinishable]:
    out: list[Unfinishable] = []
    raises = [e for _, e in rule.levels] or ([rule.condition] if rule.condition else [])
    if raises and not any(can_become_true(e, available) for e in raises):
        missing = tuple(dict.fromkeys(n for e in raises for n in blocking_names(e, available)))
        out.append(Unfinishable(space, rule.key, "raise", missing))
        return out  # a rule that cannot raise cannot be left standing either
    if rule.clear is not None and not can_become_true(rule.clear, available):
        out.append(Unfinishable(space, rule.key, "clear",
                                tuple(blocking_names(rule.clear, available))))
    return out

"""What a space's WBGT rests on, from the points (and assumptions) it has.

ISO 7243:2017 WBGT is 0.7 natural wet bulb + 0.3 globe (indoors, eq. 1), or 0.7 natural wet
bulb + 0.2 globe + 0.1 air temperature (with solar load, eq. 2). The black globe is always
needed. The natural wet bulb is measured (a ``natural_wet_bulb`` point) or estimated by the
Liljegren et al. (2008) energy balance of the wetted wick from the air temperature, humidity
and air speed, with the wick's radiation from the globe's mean radiant temperature (ISO 7726
Annex B needs the air speed for that too), or outdoors in full sun, where the globe reads
more than 70 K above the air, from the global irradiance and the sun's position.

The heat-stress rule ``needs: [wbgt]``: it applies wherever a WBGT can be known, whichever
sensor gives it. ``thermowarden check`` prints, per hot-work space, the basis found here
and what to add where there is none.
"""

from __future__ import annotations

from collections.abc import Set as AbstractSet
from dataclasses import dataclass

ESTIMATE_INPUTS: tuple[str, ...] = ("air_temperature", "relative_humidity", "air_speed")
"""Inputs of the natural wet-bulb estimate besides the wick's radiation."""

DERIVED: frozenset[str] = frozenset({"wbgt"})
"""Names a rule may list in ``needs`` that are provided by the inputs behind them, not by a
point of their own."""


@dataclass(frozen=True)
class WbgtBasis:
    """What one space's WBGT rests on."""

    known: bool
    """A WBGT can be computed from the space's points and assumptions."""
    natural_wet_bulb: str
    """``measured``, ``estimated`` or ``none``."""
    description: str
    """For a person: measured, estimated and how, or what is missing."""
    to_add: tuple[str, ...] = ()
    """Lines to add to the site file for a WBGT, where none can be known."""


def wbgt_basis(have: AbstractSet[str], outdoor: bool, solar_load: bool,
               site_has_sun: bool) -> WbgtBasis:
    """The basis of a space's WBGT from the input names its points and assumptions provide
    (``have``, as :func:`thermowarden.rules.provided_inputs` gives them), whether it is
    outdoors and with solar load, and whether the site gives the sun's position
    (``latitude``, ``longitude``) and a ``solar_irradiance`` point."""
    to_add: list[str] = []
    if "globe_temperature" not in have:
        to_add.append("a globe_temperature point (the black globe of ISO 7243)")
    if solar_load and "air_temperature" not in have:
        to_add.append("an air_temperature point (WBGT with solar load, ISO 7243 eq. 2)")
    if "natural_wet_bulb" in have:
        nwb = "measured"
        how = "a measured natural wet bulb and the globe"
    else:
        lacking = [q for q in ESTIMATE_INPUTS if q not in have]
        if lacking:
            nwb = "none"
            how = "no natural wet bulb"
            to_add.append(
                "a natural_wet_bulb point, or for the estimate from the globe "
                + " and ".join(_point_or_assume(q) for q in lacking))
        else:
            nwb = "estimated"
            how = ("the globe and a natural wet bulb estimated from the globe, air "
                   "temperature, humidity and air speed (Liljegren et al. 2008)")
            if outdoor and solar_load:
                how += ("; in full sun, where the globe reads more than 70 K above the air, "
                        + ("from the solar irradiance and the sun's position instead"
                           if site_has_sun else
                           "no estimate (give the site latitude, longitude and a "
                           "solar_irradiance point to estimate it from the sun there)"))
    if to_add:
        return WbgtBasis(False, nwb, "nothing: " + "; ".join(to_add), tuple(to_add))
    return WbgtBasis(True, nwb, how)


def _point_or_assume(quantity: str) -> str:
    if quantity == "air_speed":
        return "an air_speed point (or assume: {air_speed: 0.1})"
    return f"a {quantity} point"

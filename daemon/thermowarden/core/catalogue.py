"""The catalogue of indices: what each index is called, its unit, the words a person reads
for it, its method and source, where it applies, and where it goes.

Every place that lists indices reads this catalogue rather than keeping a list of its own:
``assess`` (the key rows of each kind of place), the labels of terminal output
(:mod:`thermowarden.core.labels`), the report sample the engine stores every 5 minutes
(:attr:`Index.kept`), the history API and the export (:attr:`Index.exported`), the web page
(:attr:`Index.shown`, :attr:`Index.drawn`), the report's charts, the demo (:attr:`Index.short`)
and the README's methods table (:data:`METHODS`, written by :func:`methods_table`;
``tests/core/test_catalogue.py`` fails when the README's copy is not current).

An index's name is the one name it has everywhere: the key of the conditions payload and of
``assess``'s output, the column of the export, the field of the history API and the name a
rule reads. Only the stored samples use shorter keys (:attr:`Index.kept`), kept so that the
samples already stored read back. What is measured (:data:`INPUTS`) and what belongs to the
space rather than to an index (:data:`SPACE_FIELDS`) are kept apart from the indices.

Adding an index: compute it in its family's module (:data:`FAMILIES`), add its entry here
(and its name to the :class:`Method` that gives its method, or a new one), and check it
against a published value in ``tests/data/published_values.yaml``.
"""

from __future__ import annotations

import re
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Final

from thermowarden.core.adaptive import EN_CATEGORY_LABELS
from thermowarden.core.local_discomfort import ISO_CATEGORY_LABELS

HOT_WORK: Final = "hot work"
COMFORT: Final = "comfort"
OUTDOOR: Final = "outdoor heat"
PLACES: Final = (HOT_WORK, COMFORT, OUTDOOR)
"""Kinds of place ``assess`` tells apart (:mod:`thermowarden.assess_text`)."""

FAMILIES: Final[dict[str, str]] = {
    "psychrometrics": "thermowarden.core.indices.psychrometrics",
    "radiant": "thermowarden.core.indices.radiant",
    "local_discomfort": "thermowarden.core.indices.local_discomfort",
    "comfort": "thermowarden.core.indices.comfort",
    "adaptive": "thermowarden.core.indices.adaptive",
    "heat_stress": "thermowarden.core.indices.heat_stress",
    "outdoor": "thermowarden.core.indices.outdoor",
    "surfaces": "thermowarden.core.indices.surfaces",
    "ahead": "thermowarden.engine.foresight",
    "input": "",
    "space": "",
}
"""Family -> the module that computes its indices (the engine's ahead-of-time columns are
computed from its history, not from one evaluation's readings); inputs and space fields are
not computed."""


NOT_COMPUTED: Final = ("input", "space")
"""Families whose entries no module computes."""


@dataclass(frozen=True)
class Chart:
    """A chart of a space's history on the web page (and in the report when ``report``)."""

    key: str
    title: str
    """Title; empty: the labels of its lines joined with "and"."""
    unit: str
    kinds: tuple[str, ...] = ("indoor", "outdoor")
    """Kinds of space (site ``kind``) it is drawn for."""
    report: bool = False
    """Also drawn in the periodic report."""


CHARTS: Final = (
    Chart("comfort", "Operative temperature and comfort band", "°C", report=True),
    Chart("wbgt", "WBGT and its reference values (ISO 7243)", "°C", report=True),
    Chart("humidity", "Relative humidity", "%"),
    Chart("air", "Air temperature and dew point", "°C"),
    Chart("outdoor", "", "°C", kinds=("outdoor",), report=True),
)
"""The charts, in the order drawn; each draws the entries whose ``drawn`` is its key."""


@dataclass(frozen=True)
class Method:
    """One row of the README's methods table: the method, what it needs and where it
    applies, for the indices named in ``names`` (Markdown; ``*`` stands for any ending)."""

    key: str
    names: str
    method: str
    needs: str
    applies: str


@dataclass(frozen=True)
class Index:
    """One catalogued quantity (an index, an input or a field of the space)."""

    name: str
    unit: str
    """Unit of the values, as the computation gives it ("1": dimensionless)."""
    label: str
    """Words a person reads for it (no field names)."""
    family: str
    """Key of :data:`FAMILIES`: where it is computed."""
    method: str = ""
    """Key of the :class:`Method` that gives its method, source and limits."""
    short: str = ""
    """At most 8 characters for a column heading, with the unit where it helps (the demo's
    live table); empty: not in the demo."""
    kept: str = ""
    """Key of its array in the stored report samples (the history); empty: not kept."""
    exported: bool = False
    """A column of ``thermowarden export`` (only a kept one)."""
    shown: str = ""
    """On the web page: "overview" (every space's card and the space's page), "space" (the
    space's page, with its value or why there is none), "value" (the space's page, only with
    a value) or empty."""
    drawn: str = ""
    """Key of the :class:`Chart` that draws its history (only a kept one), or empty."""
    place: str = ""
    """The kind of place it is for (:data:`PLACES`), empty for any: ``assess`` leaves
    heat-stress rows out for comfort."""
    key: tuple[str, ...] = ()
    """The kinds of place for which it is a key row of ``assess`` (shown with its reason
    when absent)."""
    categories: tuple[str, ...] | None = None
    """The label of each value of a category index (value 0 -> ``categories[0]``)."""
    engine: bool = False
    """Computed by the engine from its history (:data:`FAMILIES`), not by
    :func:`thermowarden.core.indices.compute_indices`."""


def _adaptive_ashrae() -> Iterable[Index]:
    for band in ("80", "90"):
        for end, word in (("lower", "lowest"), ("upper", "highest")):
            yield Index(f"adaptive_ashrae_{band}_{end}", "°C",
                        f"ASHRAE 55 adaptive, {band} % acceptable, {word}", "adaptive",
                        "adaptive_ashrae")


def _adaptive_en() -> Iterable[Index]:
    for cat in ("I", "II", "III"):
        for end, word in (("lower", "lowest"), ("upper", "highest")):
            kept = f"en_{end}" if cat == "II" else ""
            yield Index(f"adaptive_en_{cat}_{end}", "°C",
                        f"EN 16798-1 adaptive, category {cat}, {word}", "adaptive",
                        "adaptive_en", kept=kept, exported=bool(kept))



INDICES: Final[tuple[Index, ...]] = (
    # radiant
    Index("operative_temperature", "°C", "Operative temperature", "radiant", "operative",
          short="op °C", kept="operative", exported=True, shown="overview", drawn="comfort",
          key=(COMFORT,)),
    Index("mean_radiant_temperature", "°C", "Mean radiant temperature", "radiant",
          "mean_radiant", shown="space"),
    Index("mean_radiant_temperature_source", "", "Mean radiant temperature from", "radiant",
          "mean_radiant", shown="space"),
    Index("globe_temperature_estimated", "°C", "Globe temperature, estimated", "radiant",
          "globe_estimated", shown="space", place=HOT_WORK),
    # psychrometrics
    Index("dew_point", "°C", "Dew point", "psychrometrics", "psychrometrics", kept="dew_point",
          shown="space", drawn="air"),
    Index("wet_bulb", "°C", "Wet-bulb temperature (psychrometric)", "psychrometrics",
          "psychrometrics"),
    Index("humidity_ratio", "kg/kg", "Humidity ratio", "psychrometrics", "psychrometrics"),
    # local discomfort
    Index("radiant_asymmetry_horizontal", "K", "Radiant asymmetry, window to room",
          "local_discomfort", "radiant_asymmetry"),
    Index("radiant_asymmetry_vertical", "K", "Radiant asymmetry, ceiling to floor",
          "local_discomfort", "radiant_asymmetry"),
    Index("radiant_asymmetry", "K", "Radiant asymmetry, largest", "local_discomfort",
          "radiant_asymmetry"),
    Index("radiant_asymmetry_pd", "%", "Dissatisfied by radiant asymmetry", "local_discomfort",
          "radiant_asymmetry"),
    Index("radiant_asymmetry_category", "category", "Radiant asymmetry category (ISO 7730)",
          "local_discomfort", "radiant_asymmetry", categories=ISO_CATEGORY_LABELS),
    Index("draught_rate", "%", "Draught rate", "local_discomfort", "local_discomfort",
          shown="space"),
    Index("draught_category", "category", "Draught category (ISO 7730)", "local_discomfort",
          "local_discomfort", categories=ISO_CATEGORY_LABELS),
    Index("vertical_temperature_difference", "K", "Air temperature, head minus ankle",
          "local_discomfort", "local_discomfort"),
    Index("vertical_temperature_difference_pd", "%", "Dissatisfied by head-to-ankle difference",
          "local_discomfort", "local_discomfort"),
    Index("vertical_temperature_difference_category", "category",
          "Head-to-ankle category (ISO 7730)", "local_discomfort", "local_discomfort",
          categories=ISO_CATEGORY_LABELS),
    Index("floor_temperature_pd", "%", "Dissatisfied by floor temperature", "local_discomfort",
          "local_discomfort"),
    Index("floor_temperature_category", "category", "Floor temperature category (ISO 7730)",
          "local_discomfort", "local_discomfort", categories=ISO_CATEGORY_LABELS),
    # comfort
    Index("pmv_iso", "1", "PMV, ISO 7730 (scale -3 to +3)", "comfort", "pmv_iso", short="PMV",
          kept="pmv", exported=True, shown="overview", place=COMFORT, key=(COMFORT,)),
    Index("ppd_iso", "%", "PPD, ISO 7730", "comfort", "pmv_iso", shown="space", place=COMFORT,
          key=(COMFORT,)),
    Index("comfort_category_iso", "category", "Comfort category (ISO 7730)", "comfort",
          "pmv_iso", kept="category_iso", exported=True, shown="space", place=COMFORT,
          key=(COMFORT,), categories=ISO_CATEGORY_LABELS),
    Index("pmv_ashrae", "1", "PMV, ASHRAE 55 (scale -3 to +3)", "comfort", "pmv_ashrae",
          place=COMFORT, key=(COMFORT,)),
    Index("ppd_ashrae", "%", "PPD, ASHRAE 55", "comfort", "pmv_ashrae", place=COMFORT,
          key=(COMFORT,)),
    Index("cooling_effect", "K", "Cooling effect of air movement", "comfort", "pmv_ashrae",
          place=COMFORT),
    Index("set", "°C", "Standard effective temperature (SET)", "comfort", "set", shown="space",
          place=COMFORT),
    Index("cooling_air_speed_needed", "m/s", "Air speed needed for comfort", "comfort",
          "cooling_air_speed", place=COMFORT),
    Index("set_at_cooling_air_speed", "°C", "SET at that air speed", "comfort",
          "cooling_air_speed", place=COMFORT),
    # adaptive
    Index("running_mean_outdoor_temperature", "°C", "Outdoor running mean temperature",
          "adaptive", "adaptive_en"),
    Index("adaptive_ashrae_comfort", "°C", "Adaptive comfort temperature, ASHRAE 55", "adaptive",
          "adaptive_ashrae"),
    *_adaptive_ashrae(),
    Index("adaptive_en_comfort", "°C", "Adaptive comfort temperature, EN 16798-1", "adaptive",
          "adaptive_en"),
    Index("adaptive_en_category", "category", "EN 16798-1 adaptive category", "adaptive",
          "adaptive_en", kept="category_en", exported=True, shown="space",
          categories=EN_CATEGORY_LABELS),
    *_adaptive_en(),
    # heat stress
    Index("natural_wet_bulb_estimated", "°C", "Natural wet-bulb, estimated", "heat_stress",
          "natural_wet_bulb", place=HOT_WORK),
    Index("wbgt", "°C", "WBGT, spot", "heat_stress", "wbgt", shown="space", place=HOT_WORK,
          key=(HOT_WORK,)),
    Index("wbgt_time_weighted", "°C", "WBGT, 60-minute mean", "heat_stress", "wbgt",
          shown="space", place=HOT_WORK, key=(HOT_WORK,)),
    Index("wbgt_effective", "°C", "WBGT assessed (60-minute mean, else spot)", "heat_stress",
          "wbgt", short="WBGT", kept="wbgt", exported=True, shown="overview", drawn="wbgt",
          place=HOT_WORK, key=(HOT_WORK,)),
    Index("metabolic_rate", "W", "Metabolic rate", "heat_stress", "wbgt_reference",
          place=HOT_WORK, key=(HOT_WORK,)),
    Index("wbgt_reference", "°C", "WBGT reference, these workers", "heat_stress",
          "wbgt_reference", shown="overview", place=HOT_WORK, key=(HOT_WORK,)),
    Index("wbgt_reference_unacclimatised", "°C", "WBGT reference, workers not acclimatised",
          "heat_stress", "wbgt_reference", kept="ref_unacclimatised", exported=True,
          shown="space", drawn="wbgt", place=HOT_WORK, key=(HOT_WORK,)),
    Index("wbgt_reference_acclimatised", "°C", "WBGT reference, acclimatised workers",
          "heat_stress", "wbgt_reference", kept="ref_acclimatised", exported=True,
          shown="space", drawn="wbgt", place=HOT_WORK, key=(HOT_WORK,)),
    Index("wbgt_margin", "K", "Margin below the reference (negative: above)", "heat_stress",
          "wbgt_reference", place=HOT_WORK, key=(HOT_WORK,)),
    Index("wbgt_margin_unacclimatised", "K", "Margin below the not-acclimatised reference",
          "heat_stress", "wbgt_reference", place=HOT_WORK, key=(HOT_WORK,)),
    Index("wbgt_margin_acclimatised", "K", "Margin below the acclimatised reference",
          "heat_stress", "wbgt_reference", place=HOT_WORK, key=(HOT_WORK,)),
    Index("phs_rectal_temperature", "°C", "Rectal temperature after the shift (PHS)",
          "heat_stress", "phs", place=HOT_WORK),
    Index("phs_sweat_loss", "g", "Sweat loss over the shift (PHS)", "heat_stress", "phs",
          place=HOT_WORK),
    Index("phs_limit_rectal", "min", "Time to the rectal temperature limit (PHS)",
          "heat_stress", "phs", place=HOT_WORK),
    Index("phs_limit_water_loss_50", "min", "Time to the water-loss limit, average person (PHS)",
          "heat_stress", "phs", place=HOT_WORK),
    Index("phs_limit_water_loss_95", "min", "Time to the water-loss limit, 95 % of people (PHS)",
          "heat_stress", "phs", place=HOT_WORK),
    # outdoor
    Index("heat_index", "°C", "Heat index (NWS)", "outdoor", "heat_index", kept="heat_index",
          exported=True, shown="overview", drawn="outdoor", place=OUTDOOR, key=(OUTDOOR,)),
    Index("humidex", "1", "Humidex", "outdoor", "humidex", shown="space", place=OUTDOOR,
          key=(OUTDOOR,)),
    Index("utci", "°C", "UTCI, outdoor felt temperature", "outdoor", "utci", short="UTCI",
          kept="utci", exported=True, shown="overview", drawn="outdoor", place=OUTDOOR,
          key=(OUTDOOR,)),
    # surfaces
    Index("condensation_margin", "K", "Coldest surface above the dew point", "surfaces",
          "condensation"),
    # ahead of time (the engine)
    Index("wbgt_trend", "K/15 min", "WBGT trend", "ahead", "wbgt_ahead", engine=True),
    Index("wbgt_trend_steady", "", "WBGT trend steady (+1 rising, -1 falling)", "ahead",
          "wbgt_ahead", engine=True),
    Index("wbgt_minutes_to_action", "min", "Minutes to the WBGT action value", "ahead",
          "wbgt_ahead", engine=True),
    Index("wbgt_minutes_to_limit", "min", "Minutes to the WBGT limit", "ahead", "wbgt_ahead",
          engine=True),
    Index("wbgt_minutes_to_action_latest", "min", "Minutes to the WBGT action value, latest",
          "ahead", "wbgt_ahead", engine=True),
    Index("wbgt_minutes_to_limit_latest", "min", "Minutes to the WBGT limit, latest", "ahead",
          "wbgt_ahead", engine=True),
    Index("wbgt_minutes_to_ease", "min", "Minutes until the WBGT eases below its reference",
          "ahead", "wbgt_ahead", engine=True),
    Index("sun_minutes_to_windows", "min", "Minutes until the sun reaches the windows", "ahead",
          "sun_ahead", engine=True),
    Index("sun_mrt_rise_expected", "K", "Mean radiant rise expected from the sun", "ahead",
          "sun_ahead", engine=True),
    Index("sun_asymmetry_expected", "K", "Radiant asymmetry expected from the sun", "ahead",
          "sun_ahead", engine=True),
    Index("sky_clearness", "", "Sky clearness (measured over clear sky)", "ahead", "sun_ahead",
          engine=True),
)
"""Every index, in the order the web page, the export and the history list them."""

INPUTS: Final[tuple[Index, ...]] = (
    Index("air_temperature", "°C", "Air temperature", "input", kept="air_temperature",
          drawn="air"),
    Index("relative_humidity", "%", "Relative humidity", "psychrometrics", "psychrometrics",
          short="RH %",
          kept="relative_humidity", shown="overview", drawn="humidity"),
)
"""Measured quantities the history keeps and the page shows. Relative humidity is also a
column of :func:`~thermowarden.core.indices.compute_indices` (its family completes it from a
psychrometer's wet and dry bulb where it is not measured)."""

SPACE_FIELDS: Final[tuple[Index, ...]] = (
    Index("comfort_band_lower", "°C", "Comfort band of the space, lowest", "space",
          kept="band_lower", exported=True),
    Index("comfort_band_upper", "°C", "Comfort band of the space, highest", "space",
          kept="band_upper", exported=True),
    Index("occupied", "", "Whether the space counted as occupied", "space", kept="occupied",
          exported=True),
)
"""Fields of the space (its comfort band parameters; whether it counted as occupied) that
the history keeps beside the indices."""

REPORT_FIELDS: Final[tuple[Index, ...]] = (
    Index("wbgt_mean_60min", "°C", "WBGT, 60-minute mean with the clothing adjustment",
          "heat_stress", "wbgt", kept="wbgt_60min", place=HOT_WORK),
    Index("wbgt_spot_adjusted", "°C", "WBGT, spot value with the clothing adjustment",
          "heat_stress", "wbgt", kept="wbgt_spot", place=HOT_WORK),
)
"""The WBGT the report compares with its references, kept apart from the value the rules
compared (``wbgt_effective``: the 60-minute mean, else the spot value): the 60-minute mean
only where it existed (ISO 7243:2017, at least 48 of the last 60 minutes covered) and the
spot value, both with the clothing adjustment. Written by the engine's report sample;
samples stored before they were kept give none."""


METHODS: Final[tuple[Method, ...]] = (
    Method(
        'mean_radiant',
        '`mean_radiant_temperature`, `mean_radiant_temperature_source`',
        'measured; or ISO 7726:1998 Annex B from a globe (any diameter and emissivity, the larger '
        'of the natural and forced convection coefficients); or from the plane radiant temperatures'
        ' a space measures with the standing/seated weights, each plane not measured taken at the '
        "space's `assume.mean_radiant_temperature` or else at the air temperature (a window/room "
        'pair in a room: the four other planes carry 0.47 of the standing weight, so each kelvin by'
        ' which they differ from what stands in for them moves the result by up to 0.47 K); or '
        'outdoors in the sun without a globe, a person taken as a sphere (short-wave absorptivity '
        '0.7 and long-wave emissivity 0.95, ASHRAE 55-2020 Appendix C) in the radiation field of '
        'Liljegren et al. (2008) (sky and ground as for the natural wet bulb, the measured '
        "irradiance split into direct beam and diffuse at the sun's position). "
        '`mean_radiant_temperature_source` says which (`measured`, `globe`, `six planes`, `planes '
        'measured, the others at the air temperature` / `... assumed`, `sun and irradiance (no '
        "globe)`, `assumed`). Measured errors: ISO 7726's linear plane weighting against the exact "
        'fourth-power form is 0.1 K low with one plane 10 K off the others, 0.4 K at 20 K, 0.91 K '
        "at 30 K; the sun's field for a black sphere is within 0.04 K of the mean radiant "
        "temperature the reference code's globe implies (0.014-0.031 K, six rows); a person's value"
        " is lower than that sphere's (70 % against 95 % of the sunlight absorbed); its rise in the"
        ' sun against ASHRAE 55-2020 Appendix C (SolarCal, as pythermalcomfort computes it, '
        "averaged over the sun's angle to the person; altitudes 15-85°, beam 200-1000 W/m², "
        'standing and sitting) is median 10 % lower, from 32 % lower (low sun, strong beam: up to '
        "20 K) to 38 % higher (high sun): a sphere's projected area, and the fourth power where "
        'Appendix C uses a linear coefficient',
        'a measured value; or globe, air temperature and air speed (no still air is assumed); or '
        'one or more planes and the air temperature; or outdoors with solar load: '
        "`solar_irradiance`, air temperature, RH, the site's `latitude` and `longitude`",
        'not from a globe more than 5 K colder than the air (a sensor check; decision, no source); '
        'from the irradiance only in the open (as the wet bulb below)',
    ),
    Method(
        'globe_estimated',
        '`globe_temperature_estimated`',
        'Liljegren et al. (2008) black globe (50.8 mm, emissivity 0.95, albedo 0.05; sphere '
        'convection Nu = 2 + 0.6 Re^0.5 Pr^(1/3)) in that radiation field. Measured against the '
        "authors' reference code: 0.008-0.013 K below it (six rows at 800 W/m²; that code converges"
        ' to 0.02 K)',
        'as the mean radiant temperature from the irradiance, and air speed',
        'outdoors with solar load, no globe point; gives WBGT where there is no globe',
    ),
    Method(
        'operative',
        '`operative_temperature`',
        'ASHRAE 55-2020 Appendix A weighting (0.5/0.6/0.7 by air speed)',
        'air temperature, mean radiant temperature, air speed',
        'everywhere',
    ),
    Method(
        'radiant_asymmetry',
        '`radiant_asymmetry*`',
        'ISO 7730:2005 6.5: window side minus room side (warm/cool wall), ceiling minus floor '
        "(warm/cool ceiling), with percentage dissatisfied; category from Table A.4's limits on the"
        ' asymmetry (A/B: warm ceiling < 5 K, cool wall < 10 K, cool ceiling < 14 K, warm wall < 23'
        ' K; C: 7, 13, 18, 35 K; recalled from the standard)',
        'a pair of opposite plane radiant temperatures',
        'within the measured curves (warm ceiling 23 K, cool wall/ceiling 15 K, warm wall 35 K)',
    ),
    Method(
        'psychrometrics',
        '`dew_point`, `wet_bulb`, `humidity_ratio`, `relative_humidity`',
        'ASHRAE Handbook Fundamentals 2017 ch. 1 (Hyland-Wexler saturation; wet bulb solved from '
        "eq. 33/35, not the Stull approximation) at the site's pressure; RH from a sling or "
        'aspirated psychrometer pair',
        'air temperature and RH (or a psychrometric wet bulb)',
        'RH is over liquid water at every temperature (WMO convention, how hygrometers report it), '
        'so below 0 °C the dew point is over water, not the frost point; no dew point at RH 0 % '
        '(the wet bulb is given)',
    ),
    Method(
        'pmv_iso',
        '`pmv_iso`, `ppd_iso`, `comfort_category_iso`',
        'ISO 7730:2005 with the relative air speed and the static clothing, as its Table D.1 and '
        'Annex E are computed: `relative_air_speed` where given, else the measured air speed (ISO '
        '7730 adds nothing for activity); 1.2 met assumed where no metabolic rate is given (said in'
        ' the method)',
        'air and mean radiant temperature, air speed, RH, clothing',
        'indoors; ta 10-30 °C, tr 10-40 °C, vr 0-1 m/s, vapour pressure to 2.7 kPa, 0.8-4 met, 0-2 '
        'clo, PMV within ±2',
    ),
    Method(
        'pmv_ashrae',
        '`pmv_ashrae`, `ppd_ashrae`, `cooling_effect`',
        'ASHRAE 55-2020 5.3 with its own rules: vr = v + 0.3 (M - 1) above 1 met (unless '
        '`relative_air_speed` is given), dynamic clothing Icl (0.6 + 0.4/M) above 1.2 met, '
        'SET-based cooling effect above 0.1 m/s',
        'as PMV',
        'indoors; ta and tr 10-40 °C, vr 0-2 m/s, 1-2 met, dynamic clo 0-1.5, PMV within ±3 (the '
        'end of the sensation scale)',
    ),
    Method(
        'set',
        '`set`',
        'ASHRAE 55-2020 Appendix D (Gagge two-node model) with the measured air speed and the '
        "static clothing, as ASHRAE 55's SET table is computed",
        'as PMV',
        "indoors; its own scope, wider than PMV's: ta and tr 10-40 °C, air speed 0-2 m/s, 1-4 met, "
        '0-1.5 clo',
    ),
    Method(
        'cooling_air_speed',
        '`cooling_air_speed_needed`, `set_at_cooling_air_speed`',
        'the room air speed whose ASHRAE 55 cooling effect brings PMV down to the target (+0.5), '
        'and the SET there',
        'as ASHRAE PMV',
        'where the ASHRAE PMV applies and is above the target',
    ),
    Method(
        'local_discomfort',
        '`draught_rate`, `draught_category`, `vertical_temperature_difference*`, '
        '`floor_temperature*`',
        'ISO 7730:2005 6.2-6.4 (Tu 40 % when not measured); categories from Annex A: draught rate '
        'Table A.1 (10/20/30 %), vertical difference Table A.2 (< 2/3/4 K), floor Table A.3 ranges '
        '(A and B 19-29 °C, C 17-31 °C)',
        'air temperature and speed; head and ankle temperatures; floor temperature',
        'draught indoors at 20-26 °C and below 0.5 m/s; vertical difference below 8 K; floor 10-40 '
        '°C',
    ),
    Method(
        'adaptive_ashrae',
        '`adaptive_ashrae_*`',
        'ASHRAE 55-2020 5.4 (80 %/90 % bands); the upper limits raised for elevated air speed where'
        ' the operative temperature is above 25 °C (5.4.2.4, Table 5.4.2.4: +1.2 K from 0.6 m/s, '
        '+1.8 K from 0.9 m/s, +2.2 K from 1.2 m/s, in steps, as pythermalcomfort applies them; '
        'checked against it)',
        'seven daily outdoor means',
        'occupant-controlled naturally ventilated indoor spaces, prevailing mean 10-33.5 °C, '
        '1.0-1.3 met',
    ),
    Method(
        'adaptive_en',
        '`adaptive_en_*`, `running_mean_outdoor_temperature`',
        'EN 16798-1:2019 Annex B (categories I-III); running mean of daily means by its eq. B.2; '
        'the upper limits (and the category on the warm side) raised for elevated air speed above '
        '25 °C operative as for ASHRAE 55 (+1.2/+1.8/+2.2 K from 0.6/0.9/1.2 m/s: the increase '
        "pythermalcomfort's `adaptive_en` applies; checked against it; the clause of EN 16798-1 not"
        ' seen here)',
        'seven daily outdoor means (and the operative temperature for the category)',
        'buildings without mechanical cooling (naturally ventilated; mechanically ventilated spaces'
        ' excluded), sedentary people 1.0-1.3 met (its scope as recalled, from memory), running '
        'mean 10-30 °C; the lower limits only from a running mean of 15 °C',
    ),
    Method(
        'natural_wet_bulb',
        '`natural_wet_bulb_estimated`',
        'Liljegren et al. (2008) energy balance of the wetted wick (Bedingfield and Drew '
        'convection, evaporation, radiation). With a globe (or a measured mean radiant temperature)'
        ' the wick exchanges radiation with that mean radiant temperature (sun included); outdoors '
        "in the sun without one, Liljegren's own radiation term: sky (emissivity 0.575 ea^0.143) "
        'and ground at the air temperature, and the global horizontal irradiance split into direct '
        'beam and diffuse as their reference code does (capped at 0.85 of the top of the '
        "atmosphere; direct fraction exp(3 - 1.34 n - 1.65/n) up to 0.9) at the sun's position for "
        'the time and place (Astronomical Almanac low-precision formulas, Michalsky 1988, as that '
        "code computes them, refraction included). Checked against the authors' reference code: "
        'within 0.04 K without sun; within 0.011 K from the irradiance. Through a sunlit globe (its'
        " mean radiant temperature given to the wick, whose view of the sun is then the globe's), "
        'measured against the irradiance method for a 50.8 mm globe over air 15-45 °C, RH 10-80 %, '
        '0.13-5 m/s, 100-1000 W/m², cos zenith 0.4-0.95, direct fraction 0.3-0.9: median +0.10 K, '
        '5-95 % -0.71 to +0.76 K, extremes -2.15 to +1.99 K; at 900-1000 W/m² median +0.49 K, 5-95 '
        '% -1.14 to +1.23 K (WBGT takes 0.7 of it; `tests/core/test_radiant_sources.py`) (and the '
        "sun's cosine zenith within 1e-6; that code counts one day ahead in leap years after 2000, "
        'this one does not)',
        "air temperature, RH, air speed (below 0.13 m/s taken as 0.13), the site's pressure; and a "
        "globe or measured mean radiant temperature, or outdoors: `solar_irradiance`, the site's "
        '`latitude` and `longitude`, and the time',
        'where no natural wet-bulb sensor reports; air 0-50 °C, air speed up to 10 m/s; with a '
        'globe indoors and outdoors (mean radiant minus air temperature -10 to 70 K; beyond 70 K '
        'outdoors with solar load, the irradiance method where the site has it); from the '
        'irradiance only outdoors with solar load, in the open (sky above, level ground around at '
        'about the air temperature, as the paper assumes: near walls, hot surfaces or in shade use '
        'a globe)',
    ),
    Method(
        'wbgt',
        '`wbgt`, `wbgt_time_weighted`, `wbgt_effective`',
        'ISO 7243:2017 eq. 1/2; time-weighted mean over exactly the last 60 minutes (per-minute '
        'bins, the oldest counted for the part inside the window); plus the clothing adjustment',
        'natural wet bulb (measured or estimated), globe (measured, or outdoors estimated from the '
        'irradiance: `globe_temperature_estimated`), air temperature with solar load',
        'the time-weighted mean from 48 covered minutes',
    ),
    Method(
        'wbgt_reference',
        "`wbgt_reference`, `wbgt_margin` (the space's own workers: acclimatised or not, as "
        'configured), `wbgt_reference_*`, `wbgt_margin_*`, `metabolic_rate`',
        'ISO 7243:2017 Annex A, the same equations as the NIOSH 2016 REL (acclimatised) and RAL '
        '(unacclimatised); ISO 8996 work classes',
        '`met` or `work_class`: none is assumed',
        '100-800 W',
    ),
    Method(
        'phs',
        '`phs_*`',
        'ISO 7933:2023 (default) or 2004, hot-work spaces only, recomputed every 5 minutes; posture'
        ' standing, seated (also `sitting`, `sit`) or crouching (`crouch`, `squatting`)',
        'air and mean radiant temperature, air speed, RH, `met` or `work_class`, clothing',
        'ta 15-50 °C, tr - ta 0-60 K, air speed 0-3 m/s, vapour pressure up to 4.5 kPa (from 0.5 '
        'kPa in the 2023 edition), 0.1-1 clo, 56-250 W/m² (2023) or 100-450 W/m² (2004)',
    ),
    Method(
        'heat_index',
        '`heat_index`',
        'NWS algorithm with both humidity adjustments',
        'air temperature, RH',
        'outdoor spaces (an outdoor weather index; indoors use PMV/SET or WBGT), 20-50 °C, values '
        "up to 60 °C (beyond Steadman's tables the regression only extrapolates; decision)",
    ),
    Method(
        'humidex',
        '`humidex`',
        'Environment Canada (Masterson and Richardson 1979): humidex = T + 0.5555 (6.11 '
        'exp(5417.7530 (1/273.16 - 1/(273.15 + Td))) - 10), Td the `dew_point` of the same payload '
        '(so the formula applied to the dew point shown gives the humidex shown: 40 °C, 60 % -> dew'
        ' point 30.7 °C, humidex 59.7)',
        'air temperature, RH',
        'outdoor spaces, 20-50 °C, dew point up to 40 °C (beyond any observed outdoors: a sensor '
        'check; decision)',
    ),
    Method(
        'utci',
        '`utci`',
        "UTCI polynomial (Broede et al. 2012); the wind is converted to 10 m from the sensor's "
        'height by the logarithmic profile v10 = v ln(10/0.01)/ln(h/0.01) (roughness length 0.01 m,'
        ' from memory; x 1.47 from 1.1 m)',
        'air and mean radiant temperature, RH, air speed and its height (`height_m` of the point; '
        "1.1 m for a space's air speed, 10 m for the site's wind speed)",
        'outdoor spaces; ta -50 to 50 °C, tr - ta -30 to 70 K, wind at 10 m 0.5-17 m/s, vapour '
        'pressure to 5 kPa',
    ),
    Method(
        'condensation',
        '`condensation_margin`',
        'coldest monitored surface minus the dew point',
        'a surface temperature, the dew point',
        'everywhere',
    ),
    Method(
        'wbgt_ahead',
        '`wbgt_trend*`, `wbgt_minutes_to_*`',
        "Theil-Sen slope of the spot WBGT's minutes over `trend_window_s` (Sen 1968) with Sen's 90 "
        '% interval (Gilbert 1987, 16.5); the 60-minute mean carried forward at that rate, minute '
        'by minute ([advice ahead of time](#advice-ahead-of-time))',
        "the WBGT's 60-minute window (48 minutes covered) and half the trend window",
        'hot-work spaces; crossings up to 3 hours ahead',
    ),
    Method(
        'sun_ahead',
        '`sun_*`, `sky_clearness`',
        "NREL SPA sun position and simplified Solis clear sky (pvlib), the beam on the window's "
        'plane (pvlib) with an overhang by the profile angle or a horizon angle; ASHRAE 55 Appendix'
        " C mean radiant rise (pythermalcomfort `solar_gain`); the window side's plane radiant rise"
        ' a tau E / (4 sigma T^3)',
        "the space's `windows`, the site's `latitude` and `longitude`; `solar_irradiance` for the "
        'clearness',
        'spaces with windows; the clearness with the clear-sky global irradiance at least 100 W/m²',
    ),
)
"""The README's methods table, row by row."""

EVERYTHING: Final = INDICES + INPUTS + SPACE_FIELDS + REPORT_FIELDS
BY_NAME: Final[dict[str, Index]] = {e.name: e for e in EVERYTHING}
METHOD_BY_KEY: Final[dict[str, Method]] = {m.key: m for m in METHODS}


def in_demo() -> tuple[Index, ...]:
    """The columns of the demo's live table, in catalogue order."""
    return tuple(e for e in INDICES + INPUTS if e.short)


def computed() -> tuple[Index, ...]:
    """The columns of :func:`thermowarden.core.indices.compute_indices`."""
    return tuple(e for e in INDICES + INPUTS if not e.engine and e.family not in NOT_COMPUTED)


def kept() -> tuple[Index, ...]:
    """What the report samples keep, in catalogue order (indices, then inputs and fields)."""
    return tuple(e for e in EVERYTHING if e.kept)


def exported() -> tuple[Index, ...]:
    """The columns of the export after time and space: indices, inputs, space fields."""
    return tuple(e for e in EVERYTHING if e.exported)


def shown(where: str) -> tuple[Index, ...]:
    """The entries the web page shows ``where`` ("overview": every space's card; "space":
    the space's page, which also shows the overview's)."""
    wanted = ("overview",) if where == "overview" else ("overview", "space")
    return tuple(e for e in INDICES + INPUTS if e.shown in wanted)


def drawn(chart: str) -> tuple[Index, ...]:
    """The lines of ``chart``, in catalogue order."""
    return tuple(e for e in EVERYTHING if e.drawn == chart)


def chart_title(chart: Chart) -> str:
    """The chart's title, or its lines' labels joined with "and"."""
    if chart.title:
        return chart.title
    labels = [re.sub(r" \(.*?\)", "", e.label.split(",")[0]) for e in drawn(chart.key)]
    return ", ".join(labels[:-1]) + (" and " if len(labels) > 1 else "") + labels[-1]


def key_rows(place: str) -> tuple[str, ...]:
    """The names ``assess`` shows for ``place`` even without a value."""
    return tuple(e.name for e in INDICES if place in e.key)


def rows_for(place: str) -> frozenset[str]:
    """The names of the indices that are for ``place`` only."""
    return frozenset(e.name for e in INDICES if e.place == place)


def methods_table() -> str:
    """The README's methods table (Markdown), one row per :class:`Method`."""
    lines = ["| index | method | needs | applies |", "|---|---|---|---|"]
    for m in METHODS:
        lines.append(f"| {m.names} | {m.method} | {m.needs} | {m.applies} |")
    return "\n".join(lines) + "\n"


if __name__ == "__main__":  # print the methods table (for the README)
    print(methods_table(), end="")

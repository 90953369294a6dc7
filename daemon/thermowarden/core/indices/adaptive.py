"""Adaptive comfort for naturally ventilated spaces: ASHRAE 55-2020 5.4 and EN 16798-1:2019
Annex B, with the running mean outdoor temperature."""

from __future__ import annotations

import numpy as np

from thermowarden.core import adaptive
from thermowarden.core.columns import Applicability
from thermowarden.core.indices.comfort import comfort_met
from thermowarden.core.indices.inputs import (
    UPPER_TOLERANCE,
    Derived,
    IndexTable,
    SpaceInputs,
    between,
)


def compute(s: SpaceInputs, d: Derived, out: IndexTable) -> None:
    """The adaptive comfort temperatures, bands and category."""
    n = s.n
    met = comfort_met(s)
    operative = d.operative
    # Adaptive comfort, for naturally ventilated spaces.
    rm_app = Applicability(n)
    rm_app.require(np.isfinite(s.running_mean_outdoor),
                   "input missing: seven daily outdoor means (newest first)")
    out["running_mean_outdoor_temperature"] = rm_app.column(
        s.running_mean_outdoor, "°C", "EN 16798-1:2019 eq. (B.2)")
    tpma = s.running_mean_outdoor
    a_app = Applicability(n)
    a_app.require(s.indoor, "adaptive comfort applies to indoor spaces")
    a_app.require(np.isfinite(tpma), "input missing: seven daily outdoor means (newest first)")
    a_app.require(between(tpma, 10.0, 33.5),
                  "outside ASHRAE 55 adaptive range: prevailing mean outdoor 10-33.5 °C")
    a_app.require(between(met, 1.0, 1.3), "outside ASHRAE 55 adaptive scope: 1.0-1.3 met")
    a_app.require(s.naturally_ventilated, "adaptive comfort applies to occupant-controlled "
                  "naturally ventilated spaces (ASHRAE 55-2020 5.4.1)")
    t_cmf = adaptive.ashrae_comfort_temperature(tpma)
    m55 = "ASHRAE 55-2020 5.4"
    out["adaptive_ashrae_comfort"] = a_app.column(t_cmf, "°C", m55)
    raised = adaptive.ashrae_air_speed_increase(s.air_speed, operative)
    m55_up = (m55 + " (raised for elevated air speed above 25 °C operative, Table 5.4.2.4: "
              "+1.2 K from 0.6 m/s, +1.8 K from 0.9 m/s, +2.2 K from 1.2 m/s)")
    for band, half in adaptive.ASHRAE_BANDS_K.items():
        out[f"adaptive_ashrae_{band}_lower"] = a_app.column(t_cmf - half, "°C", m55)
        out[f"adaptive_ashrae_{band}_upper"] = a_app.column(t_cmf + half + raised, "°C", m55_up)
    en_app = Applicability(n)
    en_app.require(s.indoor, "adaptive comfort applies to indoor spaces")
    en_app.require(np.isfinite(tpma), "input missing: seven daily outdoor means (newest first)")
    en_app.require(between(tpma, 10.0, 30.0),
                   "outside EN 16798-1 adaptive range: running mean outdoor 10-30 °C")
    en_app.require(between(met, 1.0, 1.3), "outside EN 16798-1 adaptive scope: sedentary "
                   "activity, 1.0-1.3 met")
    en_app.require(s.naturally_ventilated, "EN 16798-1 adaptive limits apply to buildings "
                   "without mechanical cooling (naturally ventilated), not to mechanically "
                   "ventilated spaces")
    theta_c = adaptive.en_comfort_temperature(tpma)
    m_en = "EN 16798-1:2019 Annex B"
    out["adaptive_en_comfort"] = en_app.column(theta_c, "°C", m_en)
    # the lower limit: EN 16798-1 B.2.2 gives it for a running mean of 15 °C and above
    # (below, the heating-season limits of the mechanically heated building apply)
    low_app = Applicability(n)
    low_app.require(en_app.ok, "EN 16798-1 adaptive limits do not apply (see "
                    "adaptive_en_comfort)")
    low_app.require(tpma >= 15.0 - UPPER_TOLERANCE, "EN 16798-1 gives the adaptive lower "
                    "limit only for a running mean outdoor temperature of 15 °C and above")
    m_en_up = (m_en + " (raised for elevated air speed above 25 °C operative: +1.2 K from "
               "0.6 m/s, +1.8 K from 0.9 m/s, +2.2 K from 1.2 m/s, as pythermalcomfort's "
               "adaptive_en "
               "applies them)")
    for cat, (up, down) in adaptive.EN_BANDS_K.items():
        out[f"adaptive_en_{cat}_lower"] = low_app.column(theta_c - down, "°C", m_en)
        out[f"adaptive_en_{cat}_upper"] = en_app.column(theta_c + up + raised, "°C", m_en_up)
    en_app.require(np.isfinite(operative), "input missing or stale: operative temperature")
    # the category on the warm side against the raised upper limits
    warm = operative - theta_c
    effective = np.where(warm > 0.0, theta_c + np.maximum(warm - raised, 0.0), operative)
    out["adaptive_en_category"] = en_app.column(adaptive.en_category(effective, theta_c),
                                                "category", m_en_up, adaptive.EN_CATEGORY_LABELS)


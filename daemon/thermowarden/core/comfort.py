"""Whole-body thermal comfort, vectorised over spaces.

PMV/PPD per ISO 7730:2005 (Fanger), PMV/PPD per ASHRAE 55-2020 (the elevated-air-speed
method through SET and the cooling effect), SET (Gagge two-node model as in ASHRAE 55
Normative Appendix D), the cooling effect of elevated air speed, and the air speed that
would bring a warm space back to a target PMV. The models themselves come from
pythermalcomfort (version pinned in pyproject.toml); applicability is decided here.

Units: temperatures °C, air speed m/s, RH %, metabolic rate met, clothing clo.
"""

from __future__ import annotations

import warnings

import numpy as np

from thermowarden.core.columns import FloatArray
from thermowarden.core.ptc_models import model
from thermowarden.core.solve import IndexArray, illinois

STILL_AIR = 0.1
"""m/s: the still-air speed of ASHRAE 55's elevated-air-speed method."""

MAX_ELEVATED_AIR_SPEED = 2.0
"""m/s: upper air speed of the ASHRAE 55 SET-based method (and of the search for the speed
needed)."""


def relative_air_speed(air_speed: FloatArray, met: FloatArray) -> FloatArray:
    """Relative air speed (m/s) by ASHRAE 55's rule for the body's own movement.

    ASHRAE 55-2020 5.3.2 (and its Appendix B): vr = v + 0.3 (M - 1) for M > 1 met, else v,
    with v the average air speed. This is ASHRAE 55's rule only: ISO 7730:2005 takes the
    relative air speed as an input (Table D.1, Annex E) and has no such addition, so the
    ISO 7730 PMV gets a measured relative air speed, or the air speed itself.
    """
    v = np.asarray(air_speed, dtype=np.float64)
    m = np.asarray(met, dtype=np.float64)
    result: FloatArray = np.where(m > 1.0, v + 0.3 * (m - 1.0), v)
    return result


def dynamic_clothing(clo: FloatArray, met: FloatArray) -> FloatArray:
    """Dynamic clothing insulation (clo) for active people, ASHRAE 55's rule.

    ASHRAE 55-2020 5.2.2.2: Icl,dyn = Icl (0.6 + 0.4 / M) for M > 1.2 met. Used for the
    ASHRAE 55 PMV and its cooling effect only. ISO 7730:2005 uses the static (basic)
    clothing insulation (its Table D.1 and Annex E are computed that way; its own
    correction for clothing in motion is ISO 9920's, which needs walking speed), and SET
    (ASHRAE 55 Appendix D) is computed with the static clothing, as in its check table.
    """
    c = np.asarray(clo, dtype=np.float64)
    m = np.asarray(met, dtype=np.float64)
    result: FloatArray = np.where(m > 1.2, c * (0.6 + 0.4 / m), c)
    return result


def clothing_from_outdoor(outdoor_6am_c: FloatArray) -> FloatArray:
    """Typical clothing (clo) predicted from the 06:00 outdoor temperature (°C).

    Schiavon and Lee (2013), the dynamic clothing model of ASHRAE 55-2020 5.2.2.2, via
    pythermalcomfort ``clo_tout``. NaN where the temperature is missing.
    """
    t = np.asarray(outdoor_6am_c, dtype=np.float64)
    ok = np.isfinite(t)
    out = np.full(t.shape, np.nan)
    if ok.any():
        _ptc_clo_tout = model("clo_tout")

        out[ok] = np.asarray(_ptc_clo_tout(tout=t[ok]).clo_tout, dtype=np.float64)
    return out


def ppd_from_pmv(pmv: FloatArray) -> FloatArray:
    """PPD (%) from PMV, ISO 7730:2005 eq. (5)."""
    p = np.asarray(pmv, dtype=np.float64)
    result: FloatArray = 100.0 - 95.0 * np.exp(-0.03353 * p**4 - 0.2179 * p**2)
    return result


def pmv_fanger(air_c: FloatArray, mrt_c: FloatArray, rel_speed: FloatArray, rh: FloatArray,
               met: FloatArray, clo: FloatArray) -> FloatArray:
    """Fanger's PMV, ISO 7730:2005 eq. (1)-(4), external work 0; no range checks here."""
    n = np.asarray(air_c).shape[0]
    out = np.full(n, np.nan)
    ok = (np.isfinite(air_c) & np.isfinite(mrt_c) & np.isfinite(rel_speed) & np.isfinite(rh)
          & np.isfinite(met) & np.isfinite(clo))
    if ok.any():
        _ptc_pmv_ppd_iso = model("pmv_ppd_iso")

        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = _ptc_pmv_ppd_iso(tdb=air_c[ok], tr=mrt_c[ok], vr=rel_speed[ok], rh=rh[ok],
                                   met=met[ok], clo=clo[ok], limit_inputs=False,
                                   round_output=False)
        out[ok] = np.asarray(res.pmv, dtype=np.float64)
    return out


# pythermalcomfort and the compiled SET kernels (core/set_kernels.py) are imported where
# they are used: loading them costs seconds, and `check` or a parse error needs neither.

PARALLEL_FROM = 512
"""Batches of at least this many spaces use the multi-core SET kernels."""


def _p_sat_torr(t_c: FloatArray) -> FloatArray:
    """Saturation pressure (torr) as the two-node model computes it (Antoine form)."""
    result: FloatArray = np.exp(18.6686 - 4030.183 / (np.asarray(t_c) + 235.0))
    return result


def set_temperature(air_c: FloatArray, mrt_c: FloatArray, speed: FloatArray, rh: FloatArray,
                    met: FloatArray, clo: FloatArray, *, for_cooling_effect: bool = False,
                    pressure_pa: FloatArray | float = 101_325.0) -> FloatArray:
    """Standard Effective Temperature (°C), Gagge two-node model, ASHRAE 55-2020 Appendix D.

    ``for_cooling_effect`` selects the variant ASHRAE 55 uses inside the cooling-effect
    calculation (no metabolic correction of the still-air reference). NaN where any input
    is missing; no range checks here.
    """
    n = np.asarray(air_c).shape[0]
    out = np.full(n, np.nan)
    ok = (np.isfinite(air_c) & np.isfinite(mrt_c) & np.isfinite(speed) & np.isfinite(rh)
          & np.isfinite(met) & np.isfinite(clo))
    if not ok.any():
        return out
    from thermowarden.core import set_kernels as k

    p = np.broadcast_to(np.asarray(pressure_pa, dtype=np.float64), (n,))
    big = int(ok.sum()) >= PARALLEL_FROM
    ta = air_c[ok]
    vp = rh[ok] * _p_sat_torr(ta) / 100.0
    with np.errstate(all="ignore"):
        if big:
            kernel = k.kernel("set_for_ce_compiled" if for_cooling_effect else "set_compiled")
            out[ok] = kernel(ta, mrt_c[ok], speed[ok], met[ok], clo[ok], vp, p[ok])
        else:
            out[ok] = k.set_serial(ta, mrt_c[ok], speed[ok], met[ok], clo[ok], vp, p[ok],
                                   for_cooling_effect)
    return out


def cooling_effect(air_c: FloatArray, mrt_c: FloatArray, rel_speed: FloatArray, rh: FloatArray,
                   met: FloatArray, clo: FloatArray) -> FloatArray:
    """Cooling effect (K) of elevated air speed, ASHRAE 55-2020 5.3.2.1 and Appendix D.

    CE is the equal drop of air and mean radiant temperature that gives, at still air
    (0.1 m/s), the SET of the actual conditions. 0 where vr <= 0.1 m/s. Solved for all
    spaces at once by bracketed regula falsi on [0, 40] K until the SET residual is within
    0.01 K (CE to about 0.01 K: SET falls about 1 K per K of CE).
    """
    ta = np.asarray(air_c, dtype=np.float64)
    tr = np.asarray(mrt_c, dtype=np.float64)
    ce = np.where(np.asarray(rel_speed) <= STILL_AIR, 0.0, np.nan)
    todo = np.flatnonzero(np.isnan(ce) & np.isfinite(ta) & np.isfinite(tr)
                          & np.isfinite(rel_speed) & np.isfinite(rh) & np.isfinite(met)
                          & np.isfinite(clo))
    if todo.size == 0:
        return ce
    ta_s, tr_s, rh_s, met_s, clo_s = ta[todo], tr[todo], rh[todo], met[todo], clo[todo]
    still = np.full(todo.size, STILL_AIR)
    target = set_temperature(ta_s, tr_s, rel_speed[todo], rh_s, met_s, clo_s,
                             for_cooling_effect=True)

    def residual(x: FloatArray, idx: IndexArray) -> FloatArray:
        s = set_temperature(ta_s[idx] - x, tr_s[idx] - x, still[idx], rh_s[idx], met_s[idx],
                            clo_s[idx], for_cooling_effect=True)
        result: FloatArray = s - target[idx]
        return result

    all_idx = np.arange(todo.size)
    lo = np.zeros(todo.size)
    f_lo = residual(lo, all_idx)
    # SET falls by roughly 1 K per K of equal air and radiant drop: start the upper bracket
    # just beyond that estimate and widen only where it does not bracket.
    hi = np.clip(f_lo * 1.2 + 0.05, 0.05, 40.0)
    f_hi = residual(hi, all_idx)
    wide = np.flatnonzero(f_hi > 0)
    if wide.size:
        hi[wide] = 40.0
        f_hi[wide] = residual(hi[wide], wide)
    sol = illinois(residual, lo, hi, f_lo, f_hi, tolerance=0.005, residual_tolerance=0.01)
    # no bracket: the elevated speed does not cool (CE 0), as ASHRAE 55 / pythermalcomfort
    sol = np.where(np.isnan(sol) & np.isfinite(f_lo), 0.0, sol)
    ce[todo] = np.maximum(sol, 0.0)
    return ce


def pmv_ashrae(air_c: FloatArray, mrt_c: FloatArray, rel_speed: FloatArray, rh: FloatArray,
               met: FloatArray, clo: FloatArray, ce: FloatArray | None = None) -> FloatArray:
    """PMV per ASHRAE 55-2020 5.3.2: above 0.1 m/s, Fanger's PMV at still air after
    subtracting the cooling effect from both air and mean radiant temperature."""
    if ce is None:
        ce = cooling_effect(air_c, mrt_c, rel_speed, rh, met, clo)
    speed = np.where(ce > 0, STILL_AIR, rel_speed)
    return pmv_fanger(air_c - ce, mrt_c - ce, speed, rh, met, clo)


SPEED_GRID_POINTS = 12
"""Log-spaced speeds scanned between still air and the bound before refining."""


def air_speed_for_pmv(air_c: FloatArray, mrt_c: FloatArray, rel_speed: FloatArray,
                      rh: FloatArray, met: FloatArray, clo: FloatArray, target_pmv: FloatArray,
                      max_speed: float = MAX_ELEVATED_AIR_SPEED) -> FloatArray:
    """Relative air speed (m/s) at which the ASHRAE 55 PMV falls to ``target_pmv``.

    The number behind fan advice. Steps (ASHRAE 55-2020 5.3.2 and Appendix D):
    1. the cooling effect needed, CEn: Fanger's PMV at still air with ta - CEn and
       tr - CEn equals the target (regula falsi on [0, 15] K);
    2. the SET that cooling effect stands for: SET(ta - CEn, tr - CEn, 0.1 m/s);
    3. the air speed whose SET equals it (regula falsi on [0.1, max_speed] m/s).
    NaN where the space is not warmer than the target (no speed needed; the caller
    reports the current speed) or where even ``max_speed`` does not suffice.
    """
    ta = np.asarray(air_c, dtype=np.float64)
    tr = np.asarray(mrt_c, dtype=np.float64)
    n = ta.shape[0]
    out = np.full(n, np.nan)
    still_pmv = pmv_fanger(ta, tr, np.full(n, STILL_AIR), rh, met, clo)
    warm = np.flatnonzero(np.isfinite(still_pmv) & (still_pmv > target_pmv))
    if warm.size == 0:
        return out
    ta_w, tr_w, rh_w, met_w, clo_w = ta[warm], tr[warm], rh[warm], met[warm], clo[warm]
    tgt = np.broadcast_to(np.asarray(target_pmv, dtype=np.float64), (n,))[warm]
    still = np.full(warm.size, STILL_AIR)

    def pmv_residual(x: FloatArray, idx: IndexArray) -> FloatArray:
        p = pmv_fanger(ta_w[idx] - x, tr_w[idx] - x, still[idx], rh_w[idx], met_w[idx],
                       clo_w[idx])
        result: FloatArray = tgt[idx] - p
        return result

    all_idx = np.arange(warm.size)
    lo = np.zeros(warm.size)
    hi = np.full(warm.size, 15.0)
    ce_needed = illinois(pmv_residual, lo, hi, pmv_residual(lo, all_idx),
                         pmv_residual(hi, all_idx), tolerance=0.002,
                         residual_tolerance=0.001)
    ok = np.isfinite(ce_needed)
    target_set = np.full(warm.size, np.nan)
    target_set[ok] = set_temperature(ta_w[ok] - ce_needed[ok], tr_w[ok] - ce_needed[ok],
                                     still[ok], rh_w[ok], met_w[ok], clo_w[ok],
                                     for_cooling_effect=True)

    # SET is close to linear in log(speed): search there.
    def set_residual(log_v: FloatArray, idx: IndexArray) -> FloatArray:
        s = set_temperature(ta_w[idx], tr_w[idx], np.exp(log_v), rh_w[idx], met_w[idx],
                            clo_w[idx], for_cooling_effect=True)
        result: FloatArray = target_set[idx] - s
        return result

    # SET is not monotone in speed everywhere (the convective coefficient has a floor at
    # low speeds), so a bracket from the two ends can miss a root: scan a log-spaced grid
    # first and refine between the first pair of grid speeds that brackets the target.
    # A space leaves the scan at its first bracketing pair (or at once where still air
    # already suffices), so a space needing little air costs a few grid speeds, not all.
    grid = np.linspace(np.log(STILL_AIR), np.log(max_speed), SPEED_GRID_POINTS)
    v_lo = np.full(warm.size, np.nan)
    v_hi = np.full(warm.size, np.nan)
    f_lo = np.full(warm.size, np.nan)
    f_hi = np.full(warm.size, np.nan)
    active = np.flatnonzero(ok)
    f_prev = set_residual(np.full(active.size, grid[0]), active)
    still_suffices = np.zeros(warm.size, dtype=bool)
    still_suffices[active] = f_prev >= 0
    keep = f_prev < 0
    active, f_prev = active[keep], f_prev[keep]
    for j in range(1, grid.size):
        if active.size == 0:
            break
        f_next = set_residual(np.full(active.size, grid[j]), active)
        crossed = (f_prev <= 0) & (f_next >= 0)
        rows = active[crossed]
        v_lo[rows], v_hi[rows] = grid[j - 1], grid[j]
        f_lo[rows], f_hi[rows] = f_prev[crossed], f_next[crossed]
        active, f_prev = active[~crossed], f_next[~crossed]
    log_speed = illinois(set_residual, v_lo, v_hi, f_lo, f_hi, tolerance=0.005,
                         residual_tolerance=0.01)
    speed = np.exp(log_speed)
    speed = np.where(still_suffices, STILL_AIR, speed)  # still air already suffices
    out[warm] = speed
    return out

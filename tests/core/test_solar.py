"""The sun's position and the direct/diffuse split against Liljegren's reference code, and
the natural wet bulb from irradiance (sources in tests/data/published_values.yaml)."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pytest

from tests.conftest import PUBLISHED, table
from thermowarden.core import heat_stress, solar


def epoch(text: str) -> float:
    return dt.datetime.fromisoformat(text.replace("Z", "+00:00")).timestamp()


@pytest.mark.parametrize("row", table("solar_position_liljegren"))
def test_sun_position(row):
    tol = PUBLISHED["solar_position_liljegren"]["tolerance"]
    cza, dist = solar.sun_position(np.array([epoch(row["time"])]), row["lat"], row["lon"])
    assert cza[0] == pytest.approx(row["cos_zenith"], abs=tol["cos_zenith"])
    assert dist[0] == pytest.approx(row["distance_au"], abs=tol["distance"])


def test_sun_position_vectorised_and_nan():
    rows = table("solar_position_liljegren")
    t = np.array([epoch(r["time"]) for r in rows] + [np.nan])
    lat = np.array([r["lat"] for r in rows] + [10.0])
    lon = np.array([r["lon"] for r in rows] + [10.0])
    cza, dist = solar.sun_position(t, lat, lon)
    assert np.allclose(cza[:-1], [r["cos_zenith"] for r in rows], atol=1e-5)
    assert np.isnan(cza[-1]) and np.isnan(dist[-1])


def test_leap_year_is_on_the_right_day():
    """The reference code counts one day ahead in leap years after 2000: its 2024-07-15
    18:00Z at 41.7 N 87.98 W (cos z 0.936591) is 2024-07-16 here; 15 July, a day nearer the
    solstice, has the sun a little higher."""
    cza, _ = solar.sun_position(np.array([epoch("2024-07-16T18:00:00Z")]), 41.7, -87.98)
    assert cza[0] == pytest.approx(0.936591, abs=1e-5)
    cza15, _ = solar.sun_position(np.array([epoch("2024-07-15T18:00:00Z")]), 41.7, -87.98)
    assert cza15[0] > cza[0]


@pytest.mark.parametrize("row", table("natural_wet_bulb_liljegren_irradiance"))
def test_direct_fraction_and_natural_wet_bulb(row):
    tol = PUBLISHED["natural_wet_bulb_liljegren_irradiance"]["tolerance"]
    cza, dist = solar.sun_position(np.array([epoch(row["time"])]), row["lat"], row["lon"])
    assert cza[0] == pytest.approx(row["cos_zenith"], abs=1e-5)
    ghi, fdir = solar.direct_fraction(np.array([float(row["ghi"])]), cza, dist)
    assert fdir[0] == pytest.approx(row["fdir"], abs=tol["fdir"])
    tnw = heat_stress.natural_wet_bulb_liljegren_sun(
        np.array([float(row["ta"])]), np.array([float(row["rh"])]), np.array([row["v"]]),
        ghi, fdir, cza, row["p_hpa"] * 100.0)
    assert tnw[0] == pytest.approx(row["tnw"], abs=tol["tnw"])


def test_irradiance_above_the_top_of_the_atmosphere_is_capped():
    """0.85 of 1367 cos z / d² at most (Liljegren's code): 1100 W/m² at cos z 0.617 ->
    703.7 W/m², direct fraction 0.9 (its upper limit)."""
    cza, dist = solar.sun_position(np.array([epoch("2026-09-01T22:45:00Z")]), 33.45, -112.07)
    ghi, fdir = solar.direct_fraction(np.array([1100.0]), cza, dist)
    assert ghi[0] == pytest.approx(0.85 * 1367.0 * cza[0] / dist[0] ** 2, rel=1e-12)
    assert ghi[0] == pytest.approx(703.72, abs=0.05)
    assert fdir[0] == 0.9


def test_night_is_all_diffuse():
    ghi, fdir = solar.direct_fraction(np.array([5.0, np.nan]), np.array([-0.3, -0.3]),
                                      np.array([1.0, 1.0]))
    assert ghi[0] == 5.0 and fdir[0] == 0.0
    assert np.isnan(ghi[1]) and np.isnan(fdir[1])


def test_more_sun_warms_the_wick():
    t = np.array([epoch("2025-07-15T18:00:00Z")] * 3)
    cza, dist = solar.sun_position(t, 41.7, -87.98)
    ghi, fdir = solar.direct_fraction(np.array([0.0, 400.0, 850.0]), cza, dist)
    tnw = heat_stress.natural_wet_bulb_liljegren_sun(np.full(3, 32.0), np.full(3, 50.0),
                                                     np.full(3, 1.5), ghi, fdir, cza)
    assert tnw[0] < tnw[1] < tnw[2]


def test_sun_overhead_and_at_the_poles_without_warnings():
    """Subsolar point, both poles, the date line: finite values and no numpy warnings
    (tests turn warnings into errors)."""
    t = np.full(4, epoch("2025-03-20T12:00:00Z"))
    cza, dist = solar.sun_position(t, np.array([0.0, 90.0, -90.0, 0.0]),
                                   np.array([0.0, 0.0, 0.0, 180.0]))
    assert np.all(np.isfinite(cza)) and np.all(np.isfinite(dist))
    assert cza[0] > 0.999 and abs(cza[1]) < 0.03 and abs(cza[2]) < 0.03 and cza[3] < -0.99


def test_a_trace_of_irradiance_with_the_sun_up_is_all_diffuse_without_warnings():
    """A global irradiance next to zero (here subnormal, as a property test found at
    dawn; noon here) sends
    1.65/normalised to infinity in Liljegren's split; the direct fraction is its limit, 0,
    and numpy says nothing (tests turn warnings into errors)."""
    cza, dist = solar.sun_position(np.array([43200.0]), 0.0, 0.0)  # noon, 1 Jan 1970
    assert cza[0] > 0.5
    ghi, fdir = solar.direct_fraction(np.array([2.225073858507203e-309]), cza, dist)
    assert fdir[0] == 0.0 and ghi[0] == pytest.approx(0.0, abs=1e-300)


def test_the_beam_the_split_implies_never_exceeds_the_clearest_sky():
    """Over every elevation from 0.5° to 90° and every reading up to 1,400 W/m², the beam
    global x fraction / cos z is at most the clear-sky bound; above about 37° the bound is
    above anything the split can imply, so Liljegren's reference values stand (the published
    rows above)."""
    cza = np.sin(np.radians(np.repeat(np.linspace(0.5, 90.0, 120), 15)))
    ghi_in = np.tile(np.linspace(0.0, 1400.0, 15), 120)
    dist = np.ones_like(cza)
    ghi, fdir = solar.direct_fraction(ghi_in, cza, dist)
    bound = solar.clear_sky_direct_normal_bound(cza, dist)
    assert np.all(ghi * fdir / cza <= bound * (1 + 1e-9))
    high = cza > np.sin(np.radians(38.0))
    top = solar.SOLAR_CONSTANT_W_M2 * cza[high]
    assert np.all(bound[high] >= solar.NORMALISED_SOLAR_MAX * solar.DIRECT_FRACTION_MAX
                  * top / cza[high])


def test_the_bound_is_pvlibs_clear_sky_in_the_clearest_atmosphere():
    """The bound against pvlib's simplified Solis called directly (Ineichen 2008): aerosol
    optical depth 0, 0.2 cm water, 800 hPa; and above its default atmosphere's beam."""
    import pvlib

    elevation = np.array([0.5, 2.0, 10.0, 38.0, 80.0])
    cza = np.sin(np.radians(elevation))
    bound = solar.clear_sky_direct_normal_bound(cza, np.ones(5))
    direct = pvlib.clearsky.simplified_solis(elevation, aod700=0.0, precipitable_water=0.2,
                                             pressure=80_000.0, dni_extra=1367.0)["dni"]
    typical = pvlib.clearsky.simplified_solis(elevation, dni_extra=1367.0)["dni"]
    assert np.allclose(bound, direct, rtol=1e-9)
    assert np.all(bound > typical)
    assert solar.clear_sky_direct_normal_bound(np.array([-0.2, np.nan]), np.ones(2)).tolist() \
        == [0.0, 0.0]

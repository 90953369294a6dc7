"""The heat-stress alert through the engine, on hot-work spaces without a natural wet-bulb
sensor: an outdoor yard and an indoor shop with a globe, air temperature and humidity (and
air speed: the site's wind outdoors, a point indoors), whose WBGT rests on the natural wet
bulb the engine estimates (Liljegren et al. 2008).

Reference values: NIOSH (2016) Criteria for a Recommended Standard, Occupational Exposure to
Heat and Hot Environments, the RAL (unacclimatised) 59.9 - 14.1 log10 M and the REL
(acclimatised) 56.7 - 11.5 log10 M, °C WBGT, M in W, the same equations as ISO 7243:2017
Annex A; for work_class moderate, ISO 8996's 165 W/m² x 1.8 m² = 297 W: RAL 25.03 °C,
REL 28.26 °C.
"""

from __future__ import annotations

import datetime as dt
import math
import pathlib

import pytest

from tests.engine.conftest import validate_effects
from thermowarden.config import load_site
from thermowarden.effects import Publish
from thermowarden.engine import Engine
from thermowarden.rules import load_rule_packs
from thermowarden.site_model import build_site_model

M_MODERATE_W = 165 * 1.8
RAL = 59.9 - 14.1 * math.log10(M_MODERATE_W)  # NIOSH 2016, unacclimatised
REL = 56.7 - 11.5 * math.log10(M_MODERATE_W)  # NIOSH 2016, acclimatised

SITE = """\
site: {id: works, timezone: UTC, latitude: 51.5, longitude: -0.1, altitude_m: 20,
       outdoor_points: [{topic: w/out/wind, quantity: wind_speed, interval_s: 60},
                        {topic: w/out/sun, quantity: solar_irradiance, interval_s: 60}]}
output: {prefix: tw/works}
defaults: {occupancy: {always: true}, rule_packs: [heat_stress]}
templates:
  - {topic: "w/{space}/ta", quantity: air_temperature, interval_s: 60}
  - {topic: "w/{space}/rh", quantity: relative_humidity, interval_s: 60}
  - {topic: "w/{space}/tg", quantity: globe_temperature, interval_s: 60}
spaces:
  - id: yard
    name: Yard
    kind: outdoor
    hot_work: true
    people: {work_class: moderate, clo: 0.6, acclimatised: ACCLIMATISED}
  - id: shop
    name: Shop
    hot_work: true
    people: {work_class: moderate, clo: 0.6, acclimatised: ACCLIMATISED}
    points: [{topic: w/shop/v, quantity: air_speed, interval_s: 60}]
"""

T0 = dt.datetime(2026, 7, 14, 9, 0, tzinfo=dt.UTC).timestamp()
"""A July morning in London: the sun is up for the whole run."""

# (minutes from T0, air °C, RH %, globe °C): a cool start, heat, then cooling down
COOL = (24.0, 40.0, 25.0)
WARM = (30.0, 50.0, 35.0)
HOT = (36.0, 50.0, 45.0)
PROFILE = [(0, COOL), (60, WARM), (90, HOT), (210, WARM), (250, COOL), (480, COOL)]


def site_engine(directory: pathlib.Path, acclimatised: bool = True) -> Engine:
    site = directory / "site.yaml"
    site.write_text(SITE.replace("ACCLIMATISED", "true" if acclimatised else "false"))
    config = load_site(site, {})
    packs = load_rule_packs(["heat_stress"], config.rule_dirs, base=site)
    return Engine(config, build_site_model(config), packs, conditions_every_s=60.0,
                  start=T0)


def conditions_at(profile, minute):
    """The readings of ``profile`` at ``minute``: each step holds until the next."""
    current = profile[0][1]
    for start, values in profile:
        if minute >= start:
            current = values
    return current


def drive(engine, profile, minutes, space_ids=("yard", "shop"), sun=850.0, wind=1.0,
          air_speed=0.5):
    """Feed the profile once a minute and tick; returns (minute, effects) per minute."""
    out = []
    for m in range(minutes):
        t = T0 + 60 * m
        ta, rh, tg = conditions_at(profile, m)
        for sp in space_ids:
            engine.message(f"w/{sp}/ta", str(ta).encode(), t)
            engine.message(f"w/{sp}/rh", str(rh).encode(), t)
            engine.message(f"w/{sp}/tg", str(tg).encode(), t)
        engine.message("w/shop/v", str(air_speed).encode(), t)
        engine.message("w/out/wind", str(wind).encode(), t)
        engine.message("w/out/sun", str(sun).encode(), t)
        effects = engine.tick(t)
        validate_effects(effects)
        out.append((m, effects))
    return out


def events_of(run, space):
    return [(m, x.payload) for m, effects in run for x in effects
            if isinstance(x, Publish) and f"/events/safety/{space}" in x.topic]


def conditions_of(run, space):
    return {m: x.payload for m, effects in run for x in effects
            if isinstance(x, Publish) and x.topic.endswith(f"/spaces/{space}/conditions")}


def value(payload, name):
    return payload["advisory"]["numbers"][name]["value"]


@pytest.mark.long
@pytest.mark.parametrize("space", ["yard", "shop"])
def test_a_hot_work_space_without_a_wet_bulb_sensor_gets_the_alert(tmp_path, space):
    """Outdoors (the site's wind, with solar load) and indoors (an air-speed point): the
    heat-stress rule applies wherever the WBGT can be known, and raises when the 60-minute
    mean crosses the references, each event with the numbers of its moment."""
    engine = site_engine(tmp_path)
    run = drive(engine, PROFILE, 480)
    cond = conditions_of(run, space)
    assert cond[30]["indices"]["natural_wet_bulb_estimated"]["value"] is not None
    assert cond[30]["indices"]["wbgt"]["value"] is not None
    evs = events_of(run, space)
    kinds = [(p["event"], p["advisory"]["priority"]) for _, p in evs]
    assert kinds[:3] == [("raised", "medium"), ("escalated", "high"),
                         ("escalated", "urgent")], kinds
    for m, p in evs[:3]:
        twa = cond[m]["indices"]["wbgt_time_weighted"]["value"]
        assert twa is not None and value(p, "wbgt_time_weighted") == pytest.approx(twa, abs=0.01)
        eff = value(p, "wbgt_effective")
        assert value(p, "wbgt_reference_unacclimatised") == pytest.approx(RAL, abs=0.01)
        assert value(p, "wbgt_reference") == pytest.approx(REL, abs=0.01)  # acclimatised
        if p["advisory"]["priority"] == "medium":
            assert RAL - 1.0 < eff <= RAL
        elif p["advisory"]["priority"] == "high":
            assert RAL < eff <= REL
        else:
            assert eff > REL
        # the minute before, the mean was below what raised this level
        before = cond[m - 1]["indices"]["wbgt_effective"]["value"]
        limit = {"medium": RAL - 1.0, "high": RAL, "urgent": REL}[p["advisory"]["priority"]]
        assert before < limit <= eff + 1e-9
    # ... and down again as the mean falls: each level let go 0.3 K below its threshold
    # (clear_hysteresis_k) once the lower level has held 5 minutes, the lowest cleared
    # 1.3 K below the action value after the 15-minute off-delay
    assert kinds[3:] == [("renotified", "urgent"), ("deescalated", "high"),
                         ("deescalated", "medium"), ("cleared", "medium")], kinds
    name = {"yard": "Yard", "shop": "Shop"}[space]
    for m, p in evs[4:6]:
        a = p["advisory"]
        eff = value(p, "wbgt_effective")
        assert eff == pytest.approx(cond[m]["indices"]["wbgt_effective"]["value"], abs=0.01)
        assert a["title"] == f"Heat stress easing in {name}: WBGT {eff:.1f} °C"
        assert f"The heat stress in {name} is easing: WBGT {eff:.1f} °C now" in a["advice"]
        assert "Reduce exposure" not in a["advice"] and "above the limit" not in a["title"]
        let_go = REL if a["priority"] == "high" else RAL
        assert eff < let_go - 0.3
        held = cond[m - 5]["indices"]["wbgt_effective"]["value"]
        assert held < let_go - 0.3 + 0.05  # (the hold counted from the step past it)
    # the last easing event said when it would clear, at the trend of the moment
    m_easing, p_easing = evs[5]
    said = float(p_easing["advisory"]["advice"].split("clears in about ")[1].split(" min")[0])
    m_cleared, p_cleared = evs[6]
    assert abs((m_cleared - m_easing) - said) <= 3, (said, m_cleared - m_easing)
    a = p_cleared["advisory"]
    eff = value(p_cleared, "wbgt_effective")
    assert eff == pytest.approx(cond[m_cleared]["indices"]["wbgt_effective"]["value"], abs=0.01)
    assert eff < RAL - 1.3
    assert a["title"] == f"Heat stress cleared in {name}: WBGT {eff:.1f} °C"
    assert a["advice"].startswith(f"The heat-stress alert for {name} cleared at WBGT {eff:.1f}")
    assert a["history"][-1]["values"]["wbgt_effective"] == pytest.approx(eff, abs=0.01)
    # every retained record after the first easing says the numbers of its moment and no
    # urgent words: easing, with its own time
    retained = [(m, x.payload) for m, effects in run for x in effects
                if isinstance(x, Publish) and x.payload is not None
                and x.topic == f"tw/works/spaces/{space}/advisories/heat_stress.wbgt"]
    later = [(m, r) for m, r in retained if m_easing - 14 <= m < m_cleared]
    assert later
    for m, r in later:
        if m >= evs[4][0]:
            assert r["title"].startswith(f"Heat stress easing in {name}: WBGT"), r["title"]
            assert r["numbers_at"] == dt.datetime.fromtimestamp(
                T0 + 60 * m, dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


def test_the_mean_stays_in_full_sun_with_the_globe_beyond_its_method(tmp_path):
    """A yard in full sun with little wind: the globe reads far more than 70 K above the
    air by its mean radiant temperature (ISO 7726), beyond the globe method's range of the
    wick estimate. The natural wet bulb then comes from the irradiance and the sun's
    position, so the spot WBGT and its 60-minute mean go on; indoors there is no such
    method and the shop's WBGT is absent with the reason."""
    engine = site_engine(tmp_path)
    blazing = (30.0, 40.0, 75.0)
    run = drive(engine, [(0, blazing)], 70, wind=0.5, air_speed=0.1)
    yard = conditions_of(run, "yard")
    mrt = yard[65]["indices"]["mean_radiant_temperature"]["value"]
    assert mrt - 30.0 > 70.0
    assert yard[65]["indices"]["natural_wet_bulb_estimated"]["value"] is not None
    assert yard[65]["indices"]["wbgt_time_weighted"]["value"] is not None
    shop = conditions_of(run, "shop")
    assert shop[65]["indices"]["mean_radiant_temperature"]["value"] - 30.0 > 70.0
    assert shop[65]["indices"]["wbgt"]["value"] is None
    assert "-10..70 K" in shop[65]["indices"]["natural_wet_bulb_estimated"]["reason"]


def test_the_rationale_says_what_the_wbgt_rests_on(tmp_path):
    engine = site_engine(tmp_path)
    blazing = (30.0, 40.0, 75.0)
    run = drive(engine, [(0, WARM), (5, HOT), (40, blazing)], 75, wind=0.5, air_speed=0.5)
    retained = [x.payload for _, effects in run for x in effects if isinstance(x, Publish)
                and x.topic == "tw/works/spaces/yard/advisories/heat_stress.wbgt"]
    first, last = retained[0]["rationale"], retained[-1]["rationale"]
    assert "the spot value (the 60-minute mean is not complete yet); natural wet bulb " \
           "estimated from the globe, air temperature, humidity and air speed" in first
    assert "the 60-minute time-weighted mean; natural wet bulb estimated (Liljegren et al. " \
           "2008) from the solar irradiance and the sun's position, the globe reading more " \
           "than 70 K above the air" in last


@pytest.mark.parametrize("acclimatised", [False, True])
def test_references_follow_the_workers_acclimatisation(tmp_path, acclimatised):
    """The conditions, the advisory's numbers and texts, the overview card, the space page
    and the advisory page show the reference of the space's workers as configured:
    not acclimatised, the RAL (25.0 °C for moderate work) and never "reference
    (acclimatised)"; acclimatised, the REL (28.3 °C)."""
    import datetime as _dt

    from thermowarden.shell.web.advisory_page import advisory_page
    from thermowarden.shell.web.live import SiteDirectory
    from thermowarden.shell.web.overview_page import overview
    from thermowarden.shell.web.space_page import space_page

    engine = site_engine(tmp_path, acclimatised=acclimatised)
    run = drive(engine, PROFILE, 150, space_ids=("shop",))
    own = REL if acclimatised else RAL
    cond = conditions_of(run, "shop")[149]
    assert cond["indices"]["wbgt_reference"]["value"] == pytest.approx(own, abs=0.01)
    assert cond["indices"]["wbgt_margin"]["value"] == pytest.approx(
        own - cond["indices"]["wbgt_effective"]["value"], abs=0.01)
    evs = events_of(run, "shop")
    assert [p["advisory"]["priority"] for _, p in evs] == ["medium", "high", "urgent"]
    for _, p in evs:
        a = p["advisory"]
        assert a["numbers"]["wbgt_reference"]["value"] == pytest.approx(own, abs=0.01)
        assert "wbgt_reference_acclimatised" not in a["numbers"]
        text = " ".join((a["title"], a["advice"], a["rationale"]))
        if acclimatised:
            assert "for acclimatised workers, as configured here: 28.3 °C" in a["rationale"]
        else:
            assert "for workers not acclimatised, as configured here: 25.0 °C" in a["rationale"]
            assert "acclimatised workers, as configured" not in text
            assert "action value" not in text  # their reference is not an action value
    if not acclimatised:
        titles = [p["advisory"]["title"] for _, p in evs]
        assert titles == [
            "Heat stress approaching the reference for workers not acclimatised in Shop",
            "Heat stress above the reference for workers not acclimatised in Shop",
            "Heat stress above even the limit for acclimatised workers in Shop"]
        assert "above 28.3 °C even acclimatised workers would be over their limit" in \
            evs[2][1]["advisory"]["rationale"]
    directory = SiteDirectory.build(engine.config, {})
    space = directory.space("shop")
    assert space is not None
    card = overview(directory, {"shop": cond}.get, [], None, _dt.UTC)
    page = space_page(directory, space, cond, [], [], [], T0, T0 + 3600, None, _dt.UTC)
    adv_page = advisory_page(directory, evs[-1][1]["advisory"], True, None, _dt.UTC, 1800)
    want = "WBGT reference (acclimatised)" if acclimatised else \
        "WBGT reference (not acclimatised)"
    for html in (card, page):
        assert want in html
        assert f"{own:.1f}" in html.split(want)[1][:200]
    if not acclimatised:
        for html in (card, page, adv_page):
            assert "reference (acclimatised)" not in html
            assert "(acclimatised)" not in html


def test_advice_naming_two_methods_says_which_governs(tmp_path):
    """The urgent advice says stop or postpone heavy work (WBGT screening, ISO 7243) and
    quotes the ISO 7933 PHS durations: it says that the screening governs and that the PHS
    minutes are no allowance, never "allows" beside "stop"."""
    engine = site_engine(tmp_path, acclimatised=False)
    run = drive(engine, PROFILE, 150, space_ids=("shop",))
    evs = events_of(run, "shop")
    urgent = next(p["advisory"] for _, p in evs if p["advisory"]["priority"] == "urgent")
    high = next(p["advisory"] for _, p in evs if p["advisory"]["priority"] == "high")
    assert urgent["numbers"]["phs_limit_rectal"]["value"] is not None  # PHS is quoted
    for adv in (urgent, high):
        advice = adv["advice"]
        assert "allows" not in advice
        assert "The WBGT screening (ISO 7243) governs" in advice
        assert "ISO 7933 PHS, the detailed model ISO 7243 refers to" in advice
    assert "stop or postpone heavy work" in urgent["advice"]
    assert "does not lift the WBGT limit" in urgent["advice"]

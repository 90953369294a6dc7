"""Rule packs: every pack in the repository loads; bad packs are refused with the file,
line, rule id and the column of the error."""

from __future__ import annotations

import subprocess
import sys
import textwrap

import pytest

from tests.conftest import COMMAND_LIMIT_S, REPO
from thermowarden.config import load_rule_pack_file
from thermowarden.rules import RulePackError, builtin_pack_names, load_rule_packs


def test_every_rule_file_in_the_repo_loads():
    files = sorted((REPO / "rules").glob("*.yaml"))
    assert len(files) == 10  # ahead.yaml (issue 29) is the tenth
    assert [f.stem for f in files] == builtin_pack_names()
    packs = load_rule_packs(builtin_pack_names())
    for f in files:
        config, _ = load_rule_pack_file(f)
        assert config.pack == f.stem
        assert len(packs[f.stem].rules) == len(config.rules)
        for rule in config.rules:
            assert rule.messages.rationale.strip()


def test_heat_stress_rules_carry_cautions():
    packs = load_rule_packs(["heat_stress", "outdoor_heat"])
    for pack in packs.values():
        for rule in pack.rules:
            assert rule.config.heat_stress_cautions
            assert rule.config.audience == "safety"


BAD = """\
pack: custom
description: test
rules:
  - id: warm
    title: Warm
    audience: facilities
    condition: operative_temprature > 26 and occupied
    messages: {title: t, advice: a, rationale: r}
"""


def write_pack(tmp_path, text, name="custom"):
    d = tmp_path / "packs"
    d.mkdir(exist_ok=True)
    (d / f"{name}.yaml").write_text(textwrap.dedent(text))
    return d


def test_bad_expression_names_rule_line_and_column(tmp_path):
    d = write_pack(tmp_path, BAD)
    with pytest.raises(RulePackError) as exc:
        load_rule_packs(["custom"], [str(d)])
    (issue,) = exc.value.issues
    text = str(issue)
    assert text.startswith(f"{d / 'custom.yaml'}:7:16: rule warm: condition: ")
    assert "unknown name 'operative_temprature' (did you mean 'operative_temperature'?)" in text
    assert "at column 1" in text


def test_bad_message_field(tmp_path):
    d = write_pack(tmp_path, BAD.replace("operative_temprature", "operative_temperature")
                   .replace("title: t,", "title: '{oprative_temperature:.1f}',"))
    with pytest.raises(RulePackError, match="messages.title: unknown name"):
        load_rule_packs(["custom"], [str(d)])


def test_schema_errors_have_positions(tmp_path):
    d = write_pack(tmp_path, BAD.replace("audience: facilities", "audience: everyone"))
    with pytest.raises(RulePackError) as exc:
        load_rule_packs(["custom"], [str(d)])
    assert ":6:15:" in str(exc.value.issues[0]) and "everyone" in str(exc.value.issues[0])


def test_unknown_pack_lists_builtins():
    with pytest.raises(RulePackError, match="built-in packs: ahead, comfort"):
        load_rule_packs(["nonexistent"])


def run_check(path):
    return subprocess.run([sys.executable, "-m", "thermowarden.cli", "check", str(path)],
                          capture_output=True, text=True, timeout=COMMAND_LIMIT_S)


def test_check_cli_valid_example_prints_map():
    r = run_check(REPO / "deploy" / "example-site.yaml")
    assert r.returncode == 0, r.stderr
    assert "space bakery-floor (indoor, hot work)" in r.stdout
    assert "larkfield/bakery-floor/senml" in r.stdout
    assert "valid (5 spaces" in r.stderr
    assert "0 warning(s)" in r.stderr  # the complete example gives no warnings of its own
    assert "warning:" not in r.stderr


def test_check_names_a_misspelt_pack_with_position_and_suggestion(tmp_path):
    site = tmp_path / "site.yaml"
    site.write_text(textwrap.dedent("""\
        site: {id: s, timezone: UTC}
        defaults: {rule_packs: [comfrot]}
        templates:
          - {topic: "b/{space}/t", quantity: air_temperature}
        spaces:
          - id: a
            rule_packs: [comfort, humdity]
          - id: b
            rule_packs: [comfort]
        """))
    r = run_check(site)
    assert r.returncode == 1
    # defaults.rule_packs is checked although every space names its own packs
    assert (f"{site}:2:25: defaults.rule_packs.0: unknown rule pack 'comfrot'; did you mean "
            "'comfort'?") in r.stderr
    assert (f"{site}:7:27: spaces.0.rule_packs.1: unknown rule pack 'humdity'; did you mean "
            "'humidity'?") in r.stderr


def test_check_groups_identical_warnings(tmp_path):
    site = tmp_path / "site.yaml"
    spaces = "".join(f"  - id: s{i:04d}\n" for i in range(300))
    site.write_text("site: {id: s, timezone: UTC}\ndefaults: {rule_packs: [humidity]}\n"
                    "templates:\n  - {topic: \"b/{space}/t\", quantity: air_temperature}\n"
                    "spaces:\n" + spaces)
    r = run_check(site)
    assert r.returncode == 0, r.stderr
    warnings = [ln for ln in r.stderr.splitlines() if ln.startswith("warning:")]
    assert len(warnings) == 2  # too_humid and too_dry, each once for all 300 spaces
    assert warnings[0].startswith(f"warning: {site}:6:5: 300 spaces (s0000, s0001, s0002 "
                                  "and 297 more): rule humidity.")
    assert "600 warning(s) in 2 group(s)" in r.stderr


def test_environment_overrides_top_level_keys(tmp_path):
    import os

    (tmp_path / "mine").mkdir()
    (tmp_path / "mine" / "own.yaml").write_text(
        (REPO / "rules" / "humidity.yaml").read_text().replace("pack: humidity", "pack: own"))
    site = tmp_path / "site.yaml"
    site.write_text("site: {id: s, timezone: UTC}\ndefaults: {rule_packs: [own]}\n"
                    "templates:\n  - {topic: \"b/{space}/rh\", quantity: relative_humidity}\n"
                    "spaces:\n  - id: a\n")
    env = {**os.environ, "THERMOWARDEN_RULE_DIRS": "[mine]"}
    r = subprocess.run([sys.executable, "-m", "thermowarden.cli", "check", str(site)],
                       capture_output=True, text=True, timeout=120, env=env)
    assert r.returncode == 0, r.stderr
    env = {**os.environ, "THERMOWARDEN_RULE_DIR": "[mine]"}
    r = subprocess.run([sys.executable, "-m", "thermowarden.cli", "check", str(site)],
                       capture_output=True, text=True, timeout=120, env=env)
    assert r.returncode == 1
    assert "THERMOWARDEN_RULE_DIR: no top-level setting 'rule_dir'; did you mean " \
           "THERMOWARDEN_RULE_DIRS?" in r.stderr


def test_check_cli_reports_every_problem_and_fails(tmp_path):
    site = tmp_path / "site.yaml"
    site.write_text(textwrap.dedent("""\
        site: {id: s, timezone: Mars/Olympus}
        defaults: {rule_packs: [custom]}
        rule_dirs: [packs]
        spaces:
          - id: a
            kindd: indoor
        """))
    write_pack(tmp_path, BAD)
    r = run_check(site)
    assert r.returncode == 1
    lines = r.stderr.strip().splitlines()
    assert any(f"{site}:1:" in ln and "Mars/Olympus" in ln for ln in lines)
    assert any(f"{site}:6:5:" in ln and "did you mean 'kind'" in ln for ln in lines)
    assert "nothing was started" in lines[-1]


def test_check_cli_reports_rule_pack_errors(tmp_path):
    site = tmp_path / "site.yaml"
    site.write_text("site: {id: s}\ndefaults: {rule_packs: [custom]}\nrule_dirs: [packs]\n"
                    "spaces:\n  - id: a\n")
    write_pack(tmp_path, BAD)
    r = run_check(site)
    assert r.returncode == 1 and "rule warm: condition" in r.stderr


def test_check_reports_a_bad_file_without_loading_the_comfort_models(tmp_path):
    """`check` of a file it refuses answers without numba or pythermalcomfort (they take
    seconds to load; a valid site loads them to see which rules can ever finish)."""
    bad = tmp_path / "site.yaml"
    bad.write_text("site: {id: x\n  name: [\n")
    code = ("import sys\nfrom thermowarden.cli import main\n"
            f"rc = main(['check', '--quiet', {str(bad)!r}])\n"
            "loaded = sorted({m.split('.')[0] for m in sys.modules} & {'numba', "
            "'pythermalcomfort'})\nprint(rc, loaded)\n")
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                       timeout=COMMAND_LIMIT_S)
    assert r.stdout.strip().splitlines()[-1] == "1 []", r.stdout + r.stderr


def test_a_message_whose_every_sentence_is_left_out_is_empty():
    """A sentence whose number is unknown is left out; where that leaves only punctuation
    (the fans advice's closing "." after an optional segment) the message is empty, so the
    caller falls back on what the advisory said before, never on a lone "."."""
    from thermowarden.rules import _template

    t = _template("Fans: about {v:.2f} m/s[[ (SET {s:.1f} °C)]].", {"v", "s"})
    assert t.render({"v": 0.31, "s": 26.1}) == "Fans: about 0.31 m/s (SET 26.1 °C)."
    assert t.render({"v": 0.31, "s": float("nan")}) == "Fans: about 0.31 m/s."
    assert t.render({"v": float("nan"), "s": float("nan")}) == ""


def test_check_says_what_each_hot_work_wbgt_rests_on_and_warns_where_nothing(tmp_path):
    """Per hot-work space: measured, estimated (and how), or nothing; a hot-work space with
    no heat-stress evaluation is a loud warning naming what to add."""
    site = tmp_path / "site.yaml"
    site.write_text(textwrap.dedent("""\
        site: {id: s, timezone: UTC, latitude: 51.5, longitude: -0.1,
               outdoor_points: [{topic: o/wind, quantity: wind_speed},
                                {topic: o/sun, quantity: solar_irradiance}]}
        defaults: {rule_packs: [heat_stress], people: {work_class: moderate, clo: 0.6}}
        templates:
          - {topic: "b/{space}/ta", quantity: air_temperature}
          - {topic: "b/{space}/rh", quantity: relative_humidity}
        spaces:
          - id: measured
            hot_work: true
            points:
              - {topic: m/tg, quantity: globe_temperature}
              - {topic: m/tnw, quantity: natural_wet_bulb}
          - id: yard
            kind: outdoor
            hot_work: true
            points: [{topic: y/tg, quantity: globe_temperature}]
          - id: shop
            hot_work: true
            points: [{topic: s/tg, quantity: globe_temperature}]
          - id: bare
            name: Bare kiln room
            hot_work: true
          - id: unpacked
            hot_work: true
            rule_packs: [humidity]
            people: {clo: 0.6}
            points:
              - {topic: u/tg, quantity: globe_temperature}
              - {topic: u/tnw, quantity: natural_wet_bulb}
        """))
    r = run_check(site)
    assert r.returncode == 3, r.stderr  # valid, but people in three spaces are unprotected
    assert "3 hot-work space(s) without a heat-stress evaluation (exit code 3)" in r.stderr
    out = r.stdout
    block = {sid: out.split(f"space {sid} ")[1].split("\nspace ")[0]
             for sid in ("measured", "yard", "shop", "bare")}
    assert "WBGT rests on a measured natural wet bulb and the globe" in block["measured"]
    assert "natural wet bulb estimated from the globe" in block["yard"]
    assert "from the solar irradiance and the sun's position" in block["yard"]
    assert "WBGT rests on nothing" in block["shop"]
    assert "air_speed" in block["shop"]
    warnings = [ln.removeprefix("warning: ") for ln in r.stderr.splitlines()
                if ln.startswith("warning:")]
    # each names where its space is written: file:line:column first
    loud = {w.split(": ")[1]: w for w in warnings if "HOT WORK" in w}
    assert set(loud) == {"space shop", "space bare", "space unpacked"}, warnings
    assert loud["space shop"].startswith(f"{site}:18:5: space shop: HOT WORK")
    assert loud["space bare"].startswith(f"{site}:21:5: space bare: HOT WORK")
    assert "the safety lead will never be alerted for Bare kiln room: add" in loud["space bare"]
    assert "a globe_temperature point" in loud["space bare"]
    assert "an air_speed point (or assume: {air_speed: 0.1})" in loud["space shop"]
    assert "heat_stress to its rule_packs" in loud["space unpacked"]
    assert "work_class" in loud["space unpacked"]
    assert not any("needs wbgt" in w for w in warnings)


def test_texts_people_read_carry_no_development_notes():
    """Every message of the built-in packs (titles, advice, rationale, level and easing
    texts) names its source or says common practice; none carries a note about how it was
    written ("from memory", "recalled", "decision", "TODO")."""
    import re

    packs = load_rule_packs(builtin_pack_names())
    notes = re.compile(r"from memory|recalled|\bdecision\b|TODO|FIXME|no copy", re.I)
    for pack in packs.values():
        for rule in pack.rules:
            for template in rule.templates:
                assert not notes.search(template.text), (rule.key, template.text)
    outdoor = packs["outdoor_heat"].rules[0]
    assert "National Weather Service heat-index chart" in outdoor.rationale.text
    assert "UTCI assessment scale" in outdoor.rationale.text
    for rule in packs["humidity"].rules:
        assert "common practice" in rule.rationale.text


def test_an_outdoor_hot_work_space_without_a_globe_has_a_wbgt_where_the_site_has_the_sun():
    """Outdoors with solar load, the site's position and a pyranometer give an estimated
    globe and natural wet bulb (Liljegren et al. 2008), so the heat-stress rule applies;
    indoors, or without the sun, a globe is still needed (ISO 7243)."""
    from thermowarden.wbgt_basis import wbgt_basis

    have = {"air_temperature", "relative_humidity", "air_speed"}
    sunny = wbgt_basis(have, outdoor=True, solar_load=True, site_has_sun=True)
    assert sunny.known and "solar irradiance" in sunny.description
    no_sun = wbgt_basis(have, outdoor=True, solar_load=True, site_has_sun=False)
    assert not no_sun.known and any("latitude" in a for a in no_sun.to_add)
    indoors = wbgt_basis(have, outdoor=False, solar_load=False, site_has_sun=True)
    assert not indoors.known and "globe_temperature" in indoors.to_add[0]
    lacking = wbgt_basis({"air_temperature"}, outdoor=True, solar_load=True,
                         site_has_sun=True)
    assert not lacking.known and "from the sun" in lacking.to_add[-1]

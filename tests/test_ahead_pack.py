"""The ahead pack's rules (rules/ahead.yaml) and the ``foresees`` field of a rule."""

from __future__ import annotations

import textwrap

import pytest

from thermowarden.rules import RulePackError, builtin_pack_names, load_rule_packs

BAD = """\
pack: custom
description: test
rules:
  - id: warm
    title: Warm
    audience: facilities
    condition: operative_temperature > 26 and occupied
    messages: {title: t, advice: a, rationale: r}
"""


def write_pack(tmp_path, text, name="custom"):
    d = tmp_path / "packs"
    d.mkdir(exist_ok=True)
    (d / f"{name}.yaml").write_text(textwrap.dedent(text))
    return d


def test_the_ahead_pack_foresees_rules_that_exist(tmp_path):
    packs = load_rule_packs(builtin_pack_names())
    keys = {r.key for p in packs.values() for r in p.rules}
    for rule in packs["ahead"].rules:
        f = rule.config.foresees
        assert f is not None and f.rule in keys, rule.key
        assert rule.config.heat_stress_cautions == (rule.config.audience == "safety")


@pytest.mark.parametrize("foresees,expected", [
    ("{rule: heat_stress}", "foresees.rule: String should match pattern"),
    ("{rule: heat_stress.wbgt, priority: severe}", "foresees.priority: Input should be"),
    ("{rule: heat_stress.wbgt, level: high}", "unknown key 'level'"),
])
def test_a_bad_foresees_is_refused_with_its_position(tmp_path, foresees, expected):
    text = BAD.replace("    messages:", f"    foresees: {foresees}\n    messages:")
    d = write_pack(tmp_path, text)
    with pytest.raises(RulePackError) as exc:
        load_rule_packs(["custom"], [str(d)])
    (issue,) = exc.value.issues
    assert str(issue).startswith(f"{d / 'custom.yaml'}:8:") and expected in str(issue), issue

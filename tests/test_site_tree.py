"""A site written as a tree: buildings, floors and areas pass settings down, topic templates
name any level (also inside a segment), CSV rows carry every field a YAML space has, and
every mistake is refused with its file and line."""

from __future__ import annotations

import pathlib
import textwrap

import pytest

from tests.conftest import REPO
from thermowarden.config import ConfigError, load_site
from thermowarden.core.topics import TemplateError, TopicTemplate
from thermowarden.engine.ingest import Ingestor
from thermowarden.engine.state import SiteState
from thermowarden.site_check import check_site
from thermowarden.site_model import build_site_model

TREE = """\
site: {id: tree, timezone: UTC}
defaults:
  people: {met: 1.2, clo: 0.6}
  occupancy: {always: true}
  rule_packs: [comfort]
  trust:
    air_temperature: {plausible_min: 5, plausible_max: 45}
templates:
  - {topic: "t/{building}/{floor}/{space}/ta", quantity: air_temperature}
  - {topic: "t/{building}/{floor}/desk-{space}/rad/{side}", quantity: plane_radiant_temperature}
buildings:
  - id: b1
    people: {met: 1.4, clo: 0.6}
    parameters: {comfort_limit_c: 26, other: 1}
    floors:
      - id: f1
        parameters: {comfort_limit_c: 27}
        trust:
          air_temperature: {plausible_max: 35}
        spaces:
          - {id: b1-101, topic_name: "101"}
          - {id: b1-102, topic_name: "102", people: {met: 1.0, clo: 1.0}}
      - id: f2
        assume: {air_speed: 0.2}
        spaces:
          - {id: b1-101b, topic_name: "101", assume: {mean_radiant_temperature: air}}
  - id: b2
    floors:
      - id: f1
        spaces:
          - {id: b2-101, topic_name: "101"}
areas:
  - id: yard
    rule_packs: [heat_stress]
    spaces:
      - id: yard-1
        kind: outdoor
        points:
          - {topic: t/yard/ta, quantity: air_temperature}
spaces:
  - {id: loose, building: b2, floor: f1, topic_name: "102"}
"""


def write(tmp: pathlib.Path, text: str, name: str = "site.yaml") -> pathlib.Path:
    p = tmp / name
    p.write_text(textwrap.dedent(text), encoding="utf-8")
    return p


def problems(path: pathlib.Path) -> list[str]:
    with pytest.raises(ConfigError) as exc:
        load_site(path, {})
    return [str(i) for i in exc.value.issues]


def test_tree_flattens_with_levels_and_inheritance(tmp_path):
    c = load_site(write(tmp_path, TREE), {})
    by_id = {s.id: s for s in c.spaces}
    assert [s.id for s in c.spaces] == ["loose", "b1-101", "b1-102", "b1-101b", "b2-101",
                                        "yard-1"]
    assert (by_id["b1-101"].building, by_id["b1-101"].floor) == ("b1", "f1")
    assert (by_id["yard-1"].building, by_id["yard-1"].area) == (None, "yard")
    # people: nearest level, the space's own wins; defaults for the rest
    assert c.people(by_id["b1-101"]).met == 1.4
    assert c.people(by_id["b1-102"]).met == 1.0
    assert c.people(by_id["b2-101"]).met == 1.2
    # parameters merge key by key, inner over outer
    assert c.parameters(by_id["b1-101"]) == {"comfort_limit_c": 27, "other": 1}
    assert c.parameters(by_id["b1-101b"]) == {"comfort_limit_c": 26, "other": 1}
    # assumptions merge field by field
    a = c.assumptions(by_id["b1-101b"])
    assert (a.air_speed, a.mean_radiant_temperature) == (0.2, "air")
    # rule packs: the area's
    assert c.rule_packs(by_id["yard-1"]) == ["heat_stress"]
    assert c.rule_packs(by_id["b1-101"]) == ["comfort"]
    # a flat space naming its building inherits from it too
    assert c.people(by_id["loose"]).met == 1.2 and by_id["loose"].floor == "f1"
    # validating a dump again gives the same spaces (the tree's spaces moved to the list)
    again = type(c).model_validate(c.model_dump())
    assert again.spaces == c.spaces


def test_tree_templates_route_topics_to_spaces(tmp_path):
    c = load_site(write(tmp_path, TREE), {})
    model = build_site_model(c)
    topics = {p.topic: model.space_ids[p.space] for p in model.points if p.space >= 0}
    assert topics["t/b1/f1/101/ta"] == "b1-101"
    assert topics["t/b1/f2/101/ta"] == "b1-101b"      # same room number, another floor
    assert topics["t/b2/f1/101/ta"] == "b2-101"       # and another building
    assert topics["t/b2/f1/102/ta"] == "loose"
    assert "t/yard/ta" in topics and not any(t.startswith("t/yard/") and t != "t/yard/ta"
                                             for t in topics)
    # point trust inherited: the floor narrows the site's default range
    pt = {p.key: p for p in model.points}
    assert (pt["b1-101/air_temperature"].low, pt["b1-101/air_temperature"].high) == (5, 35)
    assert pt["b2-101/air_temperature"].high == 45
    # a lazy template ({side}) inside a segment finds its space by the tree's values
    ing = Ingestor(model, SiteState(model))
    found = ing.resolve("t/b1/f2/desk-101/rad/window")
    assert isinstance(found, list) and model.points[found[0]].space == \
        model.space_index["b1-101b"]
    miss = ing.resolve("t/b9/f1/desk-101/rad/window")
    assert not isinstance(miss, list) and "building 'b9'" in miss.detail
    subs = model.subscriptions()
    assert "t/+/+/+/ta" in subs and "t/+/+/+/rad/+" in subs
    per_space = model.subscriptions(per_space=True, spaces=[model.space_index["b1-101b"]])
    assert "t/b1/f2/101/ta" in per_space and "t/b1/f2/desk-101/rad/+" in per_space


def test_placeholders_inside_segments():
    t = TopicTemplate.parse("site/{building}-{floor}/desk-{space}/x")
    assert t.subscription == "site/+/+/x"
    assert t.match("site/north-f1/desk-12/x".split("/")) == {
        "building": "north", "floor": "f1", "space": "12"}
    assert t.match("site/north-f1/chair-12/x".split("/")) is None
    assert t.render(building="a", floor="b", space="c") == "site/a-b/desk-c/x"
    for bad, why in (("a/{floor}{space}", "literal text between"),
                     ("a/{space}/{space}", "used twice"), ("a/{room}", "unknown placeholder"),
                     ("a/{space", "unbalanced")):
        with pytest.raises(TemplateError, match=why):
            TopicTemplate.parse(bad)


def test_tree_errors_point_at_their_lines(tmp_path):
    text = TREE.replace("floor: f1, topic_name", "floor: f9, topic_name")
    (msg,) = problems(write(tmp_path, text))
    line = next(i for i, s in enumerate(text.splitlines(), 1) if "f9" in s)
    assert f"site.yaml:{line}:" in msg and "no floor 'f9' in building 'b2'" in msg
    assert "(known: f1)" in msg

    text = TREE.replace("{id: loose, building: b2", "{id: loose, building: b3")
    (msg,) = problems(write(tmp_path, text))
    assert "no building 'b3' in the site (known: b1, b2)" in msg

    # two spaces that the template cannot tell apart: refused at the template
    text = TREE.replace('"t/{building}/{floor}/{space}/ta"', '"t/{space}/ta"')
    (msg,) = problems(write(tmp_path, text))
    line = next(i for i, s in enumerate(text.splitlines(), 1) if '"t/{space}/ta"' in s)
    assert f"site.yaml:{line}:" in msg and "the same topic" in msg

    # a template whose segments cannot be read back
    text = TREE.replace('"t/{building}/{floor}/{space}/ta"', '"t/{building}-{floor}/{space}/ta"'
                        ).replace("id: b2\n", "id: b-2\n").replace("building: b2", "building: b-2")
    text = text.replace("  - id: f1\n        spaces:\n          - {id: b2-101",
                        "  - id: f-1\n        spaces:\n          - {id: b2-101").replace(
        "building: b-2, floor: f1", "building: b-2, floor: f-1")
    msgs = problems(write(tmp_path, text))
    assert any("cannot be read back" in m for m in msgs), msgs

    # a nested space that contradicts its place in the tree
    text = TREE.replace('{id: b2-101, topic_name: "101"}',
                        '{id: b2-101, topic_name: "101", building: b1}')
    (msg,) = problems(write(tmp_path, text))
    assert "is in building 'b2' of the tree but says building 'b1'" in msg

    # a bad value inside a floor is reported at the floor, once
    text = TREE.replace("parameters: {comfort_limit_c: 27}",
                        "parameters: {comfort_limit_c: 27}\n        peeple: {met: 1}")
    (msg,) = problems(write(tmp_path, text))
    assert "buildings.0.floors.0.peeple: unknown key" in msg and "did you mean 'people'" in msg

    # trust outside the physical range
    text = TREE.replace("plausible_max: 35}", "plausible_max: 500}")
    (msg,) = problems(write(tmp_path, text))
    assert "outside the physical range" in msg and "buildings.0.floors.0.trust" in msg

    # an unknown rule pack on a level: once, at the level
    text = TREE.replace("rule_packs: [heat_stress]", "rule_packs: [heat_stres]")
    (msg,) = problems(write(tmp_path, text))
    assert "areas.0.rule_packs.0: unknown rule pack 'heat_stres'" in msg


def test_csv_rows_carry_every_field(tmp_path):
    header = ("id,building,floor,topic_name,people.met,people.clo,occupancy.hours.mon,"
              "parameters.comfort_limit_c,assume.air_speed,"
              "trust.air_temperature.plausible_max,points,external.haystack_tags")
    row = ('c-1,b1,f1,201,1.3,0.5,"[""08:00-12:00""]",25,0.15,33,'
           '"[{topic: csv/c-1/rh, quantity: relative_humidity}]",a;b')
    write(tmp_path, f"{header}\n{row}\nc-2,b2,f1,202,,,,,,,,\n", "more.csv")
    site = write(tmp_path, TREE + "spaces_csv: more.csv\n")
    c = load_site(site, {})
    by_id = {s.id: s for s in c.spaces}
    s1 = by_id["c-1"]
    assert (s1.building, s1.floor, s1.topic_name) == ("b1", "f1", "201")
    assert c.people(s1).met == 1.3 and c.occupancy(s1).hours == {"mon": ["08:00-12:00"]}
    assert c.parameters(s1) == {"comfort_limit_c": 25, "other": 1}
    assert c.assumptions(s1).air_speed == 0.15
    assert c.trust(s1)["air_temperature"].plausible_max == 33
    assert c.trust(s1)["air_temperature"].plausible_min == 5
    assert s1.points[0].topic == "csv/c-1/rh" and s1.external is not None
    assert s1.external.haystack_tags == ["a", "b"]
    assert c.people(by_id["c-2"]).met == 1.2  # building b2 has no people: the defaults'
    model = build_site_model(c)
    assert any(p.topic == "t/b1/f1/201/ta" for p in model.points)

    # a wrong cell: the CSV's file, line and column
    write(tmp_path, "id,building,people.met\nc-1,b1,fast\n", "more.csv")
    (msg,) = problems(site)
    assert msg.startswith(f"{tmp_path / 'more.csv'}:2:3: ") and "people.met" in msg
    write(tmp_path, "id,buildng\nc-1,b1\n", "more.csv")
    (msg,) = problems(site)
    assert "more.csv:1:2: unknown column 'buildng'; did you mean 'building'?" in msg
    write(tmp_path, "id,people.met.x\nc-1,1\n", "more.csv")
    (msg,) = problems(site)
    assert "unknown column 'people.met.x'" in msg and "holds no further keys" in msg


def test_sample_campus_site_checks(tmp_path):
    report = check_site(str(REPO / "deploy" / "campus-site.yaml"))
    assert report.ok, [str(i) for i in report.issues]
    assert not report.warnings, report.warnings
    c = report.config
    assert c is not None and report.model is not None
    assert {s.building for s in c.spaces} == {"north", "south", "east", None}
    assert {(s.building, s.floor) for s in c.spaces if s.building} == {
        (b, f) for b in ("north", "south", "east") for f in ("f1", "f2")}
    assert c.level_name("building", None, "north") == "North Building"
    assert c.level_name("floor", "north", "f2") == "First floor"
    topics = {p.topic for p in report.model.points}
    assert "ashgrove/south/f2/201/ta" in topics and "ashgrove/east/f1/desk-102/rh" in topics

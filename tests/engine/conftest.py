"""A small synthetic site and rule pack for engine tests, and schema validation."""

from __future__ import annotations

import json
import pathlib
import textwrap

import pytest
from jsonschema import Draft202012Validator
from referencing import Registry, Resource

from tests.conftest import REPO
from thermowarden.config import load_site
from thermowarden.engine import Engine
from thermowarden.rules import load_rule_packs
from thermowarden.site_model import build_site_model

SCHEMAS = REPO / "daemon" / "thermowarden" / "schemas"

SITE = """\
site: {id: lab, timezone: UTC}
output: {prefix: tw/lab}
rule_dirs: [packs]
defaults:
  occupancy: {always: true}
  rule_packs: [testpack]
spaces:
  - id: room-1
    points:
      - {topic: lab/room-1/ta, quantity: air_temperature, interval_s: 60}
      - {topic: lab/room-1/blinds, quantity: shading_position, format: state, interval_s: 600}
  - id: room-2
    points:
      - {topic: lab/room-2/ta, quantity: air_temperature, interval_s: 60}
"""

PACK = """\
pack: testpack
description: rules for engine tests
rules:
  - id: hot
    title: Hot
    audience: facilities
    needs: [air_temperature]
    condition: air_temperature > 30
    clear: air_temperature < 29
    on_delay_s: 60
    off_delay_s: 120
    renotify_s: 600
    max_shelve_s: 3600
    acted_on: shading_position >= 80
    numbers:
      - {name: air_temperature, threshold: limit}
    parameters: {limit: 30}
    messages:
      title: "{space_name} is hot"
      advice: "Cool {space_name}: {air_temperature:.1f} °C."
      rationale: "Above {limit:.0f} °C."
  - id: levels
    title: Levels
    audience: safety
    needs: [air_temperature]
    levels:
      - {priority: medium, when: air_temperature > 33}
      - {priority: high, when: air_temperature > 35}
      - {priority: urgent, when: air_temperature > 37}
    clear: air_temperature < 32
    off_delay_s: 60
    max_shelve_s: 600
    heat_stress_cautions: true
    messages:
      title: "Levels in {space_name}"
      advice: "Act."
      rationale: "{air_temperature:.1f} °C."
"""


def lab_engine(directory: pathlib.Path, pack: str = PACK, site_text: str = SITE,
               **options: float) -> Engine:
    """An engine of the lab site and test pack (``pack``: its YAML) written to
    ``directory`` (created), started at 0 s; ``options`` go to :class:`Engine`
    (conditions every 60 s unless given)."""
    (directory / "packs").mkdir(parents=True, exist_ok=True)
    (directory / "packs" / "testpack.yaml").write_text(pack)
    site = directory / "site.yaml"
    site.write_text(textwrap.dedent(site_text))
    config = load_site(site, {})
    packs = load_rule_packs(["testpack"], config.rule_dirs, base=site)
    return Engine(config, build_site_model(config), packs,
                  **{"conditions_every_s": 60.0, "start": 0.0, **options})


@pytest.fixture
def lab(tmp_path):
    return lab_engine(tmp_path)


def _registry() -> Registry:
    resources = []
    for p in SCHEMAS.glob("*.json"):
        doc = json.loads(p.read_text())
        res = Resource.from_contents(doc)
        resources.append((p.name, res))
        resources.append((doc["$id"], res))
    return Registry().with_resources(resources)


REGISTRY = _registry()


def validator(name: str) -> Draft202012Validator:
    doc = json.loads((SCHEMAS / name).read_text())
    return Draft202012Validator(doc, registry=REGISTRY)


def validate_effects(effects) -> None:
    """Every published payload matches its JSON Schema."""
    from thermowarden.effects import Publish

    by_schema = {"thermowarden.advisory/1": "advisory.v1.json",
                 "thermowarden.event/1": "event.v1.json",
                 "thermowarden.conditions/1": "conditions.v1.json",
                 "thermowarden.reply/1": "reply.v1.json"}
    for e in effects:
        if isinstance(e, Publish) and e.payload is not None:
            validator(by_schema[e.payload["schema"]]).validate(e.payload)
            assert "NaN" not in json.dumps(e.payload)


@pytest.fixture
def schema_check():
    return validate_effects


def path_of(tmp: pathlib.Path) -> pathlib.Path:
    return tmp

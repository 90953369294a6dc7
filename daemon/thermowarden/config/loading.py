"""From files and the environment to validated models: the site file (YAML, with positions),
the spaces table (CSV), environment overrides, secrets kept out of the site file, rule pack
names and files, and the broker password."""

from __future__ import annotations

import csv
import difflib
import os
import pathlib
from collections.abc import Mapping
from typing import Any

import yaml
from pydantic import ValidationError

from thermowarden.config.broker import BrokerConfig
from thermowarden.config.errors import ConfigError, ConfigIssue, issues_from_validation
from thermowarden.config.positions import (
    Path,
    Position,
    SourceMap,
    YamlSourceError,
    load_yaml_with_positions,
)
from thermowarden.config.rule_packs import RulePackConfig
from thermowarden.config.site import SiteConfig, TreeIssues
from thermowarden.config.site_checks import rule_pack_name_issues, window_issues

ENV_PREFIX = "THERMOWARDEN_"


def _set_path(data: dict[str, Any], path: list[str], value: Any) -> None:
    node = data
    for part in path[:-1]:
        nxt = node.get(part)
        if not isinstance(nxt, dict):
            nxt = {}
            node[part] = nxt
        node = nxt
    node[path[-1]] = value


def _apply_environment(data: dict[str, Any], environ: Mapping[str, str],
                       issues: list[ConfigIssue] | None = None) -> dict[Path, str]:
    """Override settings from THERMOWARDEN_SECTION__KEY variables, or THERMOWARDEN_KEY for a
    top-level key (``rule_dirs``, ``spaces_csv``, a whole section); values parse as YAML.

    A single-level name that is no top-level key is left alone (it may belong to something
    else), unless it is close to one: then it is refused with the likely name.
    """
    applied: dict[Path, str] = {}
    top = sorted(SiteConfig.model_fields)
    for name, raw in sorted(environ.items()):
        if not name.startswith(ENV_PREFIX):
            continue
        path = [p.lower() for p in name[len(ENV_PREFIX):].split("__") if p]
        if not path:
            continue
        if "__" not in name and path[0] not in top:
            close = difflib.get_close_matches(path[0], top, n=1, cutoff=0.8)
            if close and issues is not None:
                issues.append(ConfigIssue(None, f"environment variable {name}: no top-level "
                                                f"setting {path[0]!r}; did you mean "
                                                f"{ENV_PREFIX}{close[0].upper()}?"))
            continue
        try:
            value = yaml.safe_load(raw) if path[-1] != "password" else raw
        except yaml.YAMLError:
            value = raw
        _set_path(data, path, value)
        applied[tuple(path)] = name
    return applied


CSV_COLUMNS = ("id", "name", "kind", "hot_work", "ventilation", "met", "work_class", "clo",
               "acclimatised", "clothing", "posture", "rule_packs", "brick_class", "brick_uri",
               "haystack_id", "haystack_tags", "phs_edition")
"""The table's original columns (still accepted as they are)."""
_CSV_SHORT = {"met": ("people", "met"), "work_class": ("people", "work_class"),
              "clo": ("people", "clo"), "acclimatised": ("people", "acclimatised"),
              "clothing": ("people", "clothing"), "posture": ("people", "posture"),
              "brick_class": ("external", "brick_class"),
              "brick_uri": ("external", "brick_uri"),
              "haystack_id": ("external", "haystack_id"),
              "haystack_tags": ("external", "haystack_tags")}
_CSV_TEXT = frozenset({"id", "name", "kind", "ventilation", "building", "floor", "area",
                       "topic_name", "phs_edition", "combine"})
"""Fields taken as text exactly as written; every other cell is read as YAML (numbers,
true/false, and flow collections such as ``[{quantity: air_temperature, topic: a/b}]``)."""
_CSV_LISTS = frozenset({("rule_packs",), ("external", "haystack_tags")})
"""List fields a cell may also give as ``a;b;c``."""


def _csv_column_path(col: str) -> tuple[str, ...] | str:
    """The space field a column fills (``people.met``, ``occupancy.hours.mon``,
    ``parameters.comfort_limit_c``), or why it fills none."""
    import typing

    from pydantic import BaseModel

    from thermowarden.config.site import SpaceConfig

    if col in _CSV_SHORT:
        return _CSV_SHORT[col]
    path = tuple(col.split("."))
    annotation: Any = SpaceConfig
    for k, part in enumerate(path):
        args = (annotation, *typing.get_args(annotation))
        mapping = next((a for a in args if typing.get_origin(a) is dict), None)
        model = next((a for a in args if isinstance(a, type) and issubclass(a, BaseModel)),
                     None)
        if mapping is not None:
            annotation = typing.get_args(mapping)[1]  # any key: a parameter, a weekday...
            continue
        if model is None:
            return f" ({'.'.join(path[:k])} holds no further keys)"
        field = model.model_fields.get(part)
        if field is None:
            names = list(model.model_fields) + (list(_CSV_SHORT) if k == 0 else [])
            close = difflib.get_close_matches(part, names, n=1)
            return f"; did you mean {close[0]!r}?" if close else ""
        annotation = field.annotation
    return path


def _spaces_from_csv(path: pathlib.Path, shown: str) -> tuple[list[dict[str, Any]], SourceMap,
                                                               list[ConfigIssue]]:
    """Spaces listed one per row, a column per field a YAML space has: a plain name
    (``building``, ``hot_work``), a dotted path into the space (``people.met``,
    ``occupancy.always``, ``occupancy.hours.mon``, ``parameters.comfort_limit_c``,
    ``assume.air_speed``, ``trust.air_temperature.plausible_max``), or a whole field as a
    YAML flow value (``points``, ``occupancy``). The original short columns (met, clo,
    brick_class...) still work; list cells may use ``;``."""
    spaces: list[dict[str, Any]] = []
    smap = SourceMap()
    issues: list[ConfigIssue] = []
    with open(path, encoding="utf-8", newline="") as fh:
        reader = csv.DictReader(fh)
        header = reader.fieldnames or []
        paths: dict[str, tuple[str, ...]] = {}
        for col_no, col in enumerate(header, start=1):
            found = _csv_column_path(col.strip())
            if isinstance(found, str):
                issues.append(ConfigIssue(Position(shown, 1, col_no),
                                          f"unknown column {col!r}{found}"))
            else:
                paths[col] = found
        if "id" not in header:
            issues.append(ConfigIssue(Position(shown, 1, 1), "the table needs an id column"))
        if issues:
            return [], smap, issues
        for i, row in enumerate(reader):
            line = reader.line_num
            space: dict[str, Any] = {}
            for col_no, col in enumerate(header, start=1):
                raw = (row.get(col) or "").strip()
                if raw == "":
                    continue
                pos = Position(shown, line, col_no)
                key = paths[col]
                value: Any
                if len(key) == 1 and key[0] in _CSV_TEXT or key in (
                        ("people", "work_class"), ("people", "clothing"), ("people", "posture"),
                        ("external", "brick_class"), ("external", "brick_uri"),
                        ("external", "haystack_id")):
                    value = raw
                elif key in _CSV_LISTS and not raw.startswith("["):
                    value = [t.strip() for t in raw.split(";") if t.strip()]
                else:
                    try:
                        value = yaml.safe_load(raw)
                    except yaml.YAMLError as exc:
                        problem = getattr(exc, "problem", None) or "not valid YAML"
                        issues.append(ConfigIssue(pos, f"{col}: {problem} (got {raw[:40]!r})"))
                        continue
                node = space
                for part in key[:-1]:
                    nxt = node.setdefault(part, {})
                    if not isinstance(nxt, dict):
                        issues.append(ConfigIssue(pos, f"{col}: {part} is given twice"))
                        break
                    node = nxt
                else:
                    node[key[-1]] = value
                smap.values[(i,) + key] = pos
                smap.keys[(i,) + key] = pos
            people = space.get("people")
            short = {c for c in header if c in _CSV_SHORT and _CSV_SHORT[c][0] == "people"}
            if isinstance(people, dict) and "clo" not in people and short and not any(
                    c.startswith("people.") for c in header):
                # the original short columns without clo: clothing follows the weather
                people.setdefault("clothing_model", "outdoor")
            smap.values[(i,)] = Position(shown, line, 1)
            spaces.append(space)
    return spaces, smap, issues


def read_yaml_file(path: str | os.PathLike[str]) -> tuple[Any, SourceMap]:
    """Read and parse a YAML file, keeping positions; problems become :class:`ConfigError`."""
    shown = str(path)
    try:
        text = pathlib.Path(path).read_text(encoding="utf-8")
    except OSError as exc:
        raise ConfigError([ConfigIssue(None, f"{shown}: cannot read: {exc.strerror}")]) from None
    try:
        return load_yaml_with_positions(text, shown)
    except YamlSourceError as exc:
        raise ConfigError([ConfigIssue(exc.position, exc.message)]) from None


def _secrets_in_file(data: dict[str, Any], smap: SourceMap) -> list[ConfigIssue]:
    """Delivery secrets written into the site file are refused (like the broker password)."""
    issues: list[ConfigIssue] = []
    delivery = data.get("delivery")
    audiences = delivery.get("audiences") if isinstance(delivery, dict) else None
    if not isinstance(audiences, dict):
        return issues
    places: list[tuple[tuple[str, ...], Any]] = []
    for name, aud in audiences.items():
        if not isinstance(aud, dict):
            continue
        places.append(((name,), aud))
        if isinstance(aud.get("escalation"), dict):
            places.append(((name, "escalation"), aud["escalation"]))
        for b, rec in (aud.get("buildings") or {}).items() \
                if isinstance(aud.get("buildings"), dict) else []:
            if isinstance(rec, dict):
                places.append(((name, "buildings", str(b)), rec))
                if isinstance(rec.get("escalation"), dict):
                    places.append(((name, "buildings", str(b), "escalation"),
                                   rec["escalation"]))
    for prefix, holder in places:
        for path in (("webhook", "secret"), ("email", "smtp", "password")):
            node: Any = holder
            for part in path[:-1]:
                node = node.get(part) if isinstance(node, dict) else None
            if isinstance(node, dict) and path[-1] in node:
                where = ("delivery", "audiences") + prefix + path
                env = ENV_PREFIX + "__".join(str(p).upper() for p in where)
                issues.append(ConfigIssue(smap.find(where, key=True),
                                          f"{'.'.join(map(str, where))}: secrets do not belong "
                                          f"in the site file; set {env} or "
                                          f"{path[-1]}_file"))
    return issues


def load_site(path: str | os.PathLike[str], environ: Mapping[str, str] | None = None
              ) -> SiteConfig:
    """Load and validate a site file (and the CSV it refers to).

    Raises :class:`ConfigError` listing every problem with its file, line and column.
    ``environ`` defaults to the process environment (the shell passes it; tests pass
    their own).
    """
    return load_site_with_positions(path, environ)[0]


def load_site_with_positions(path: str | os.PathLike[str],
                             environ: Mapping[str, str] | None = None
                             ) -> tuple[SiteConfig, SourceMap]:
    """:func:`load_site`, and where each setting is written (file, line, column; spaces
    from the CSV at their row), for messages about a valid site (``check``'s warnings)."""
    environ = os.environ if environ is None else environ
    p = pathlib.Path(path)
    shown = str(path)
    data, smap = read_yaml_file(path)
    if not isinstance(data, dict):
        raise ConfigError([ConfigIssue(Position(shown, 1, 1), "the site file must be a "
                                       "mapping with at least a 'site' section")])
    issues: list[ConfigIssue] = []
    broker = data.get("broker")
    if isinstance(broker, dict) and "password" in broker:
        issues.append(ConfigIssue(smap.find(("broker", "password"), key=True),
                                  "broker.password: secrets do not belong in the site file; "
                                  "set THERMOWARDEN_BROKER__PASSWORD or broker.password_file"))
    issues.extend(_secrets_in_file(data, smap))
    env_paths = _apply_environment(data, environ, issues)
    csv_name = data.get("spaces_csv")
    if isinstance(csv_name, str):
        csv_path = (p.parent / csv_name) if not os.path.isabs(csv_name) else pathlib.Path(csv_name)
        try:
            rows, csv_map, csv_issues = _spaces_from_csv(csv_path, str(csv_path))
        except OSError as exc:
            issues.append(ConfigIssue(smap.find(("spaces_csv",)),
                                      f"spaces_csv: cannot read {csv_path}: {exc.strerror}"))
            rows, csv_map, csv_issues = [], SourceMap(), []
        issues.extend(csv_issues)
        spaces = data.get("spaces")
        if spaces is None:
            spaces = []
        if isinstance(spaces, list):
            offset = len(spaces)
            data["spaces"] = spaces + rows
            smap.update(csv_map, ("spaces",))
            # re-key CSV rows after the YAML spaces
            shifted = SourceMap()
            for k, v in csv_map.values.items():
                shifted.values[("spaces", offset + int(k[0])) + k[1:]] = v
            for k, v in csv_map.keys.items():
                shifted.keys[("spaces", offset + int(k[0])) + k[1:]] = v
            smap.update(shifted, ())
    try:
        config = SiteConfig.model_validate(data)
    except ValidationError as exc:
        issues.extend(issues_from_validation(exc, smap, env_paths))
        raise ConfigError(issues) from None
    except TreeIssues as exc:
        for where, message in exc.issues:
            issues.append(ConfigIssue(smap.find(where, key=True),
                                      f"{'.'.join(map(str, where))}: {message}"))
        raise ConfigError(issues) from None
    issues.extend(rule_pack_name_issues(config, smap, p))
    issues.extend(window_issues(config, smap))
    if issues:
        raise ConfigError(issues)
    return config, smap


def read_password(broker: BrokerConfig) -> str | None:
    """The broker password: from the environment override, else from ``password_file``."""
    if broker.password is not None:
        return broker.password.get_secret_value()
    if broker.password_file:
        return pathlib.Path(broker.password_file).read_text(encoding="utf-8").strip()
    return None


def load_rule_pack_file(path: str | os.PathLike[str]) -> tuple[RulePackConfig, SourceMap]:
    """Load one rule pack file; raises :class:`ConfigError` with positions."""
    data, smap = read_yaml_file(path)
    try:
        return RulePackConfig.model_validate(data), smap
    except ValidationError as exc:
        raise ConfigError(issues_from_validation(exc, smap, {})) from None

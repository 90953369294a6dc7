"""Problems in a configuration, with their file, line and column: :class:`ConfigIssue`,
:class:`ConfigError`, and the mapping of pydantic's validation errors onto positions (with
the closest valid key suggested for a misspelt one)."""

from __future__ import annotations

import difflib
import json
from dataclasses import dataclass

from pydantic import BaseModel, ValidationError

from thermowarden.config.base import Strict
from thermowarden.config.positions import Path, Position, SourceMap


@dataclass(frozen=True)
class ConfigIssue:
    """One problem in a configuration: where, and what is wrong."""

    position: Position | None
    message: str

    def __str__(self) -> str:
        return f"{self.position}: {self.message}" if self.position else self.message


class ConfigError(Exception):
    """A configuration was refused; ``issues`` lists every problem found."""

    def __init__(self, issues: list[ConfigIssue]) -> None:
        super().__init__("\n".join(str(i) for i in issues))
        self.issues = issues


def _all_field_names() -> list[str]:
    """Every key of every configuration model (all subclasses of :class:`Strict`), for
    suggesting the closest one to a misspelt key."""
    names: set[str] = set()
    stack: list[type[BaseModel]] = [Strict]
    seen: set[type[BaseModel]] = set()
    while stack:
        model = stack.pop()
        if model in seen:
            continue
        seen.add(model)
        names.update(model.model_fields)
        stack.extend(model.__subclasses__())
    return sorted(names)


def _suggest(word: str) -> str:
    close = difflib.get_close_matches(word, _all_field_names(), n=1, cutoff=0.6)
    return f"; did you mean {close[0]!r}?" if close else ""


def _clip(value: object) -> str:
    text = json.dumps(value, default=str, ensure_ascii=False)
    return text if len(text) <= 60 else text[:57] + "..."


def issues_from_validation(exc: ValidationError, smap: SourceMap,
                           env_paths: dict[Path, str]) -> list[ConfigIssue]:
    """pydantic's errors as issues at their positions in the file; ``env_paths`` marks the
    settings an environment variable set (path -> variable name)."""
    issues = []
    for err in exc.errors():
        # drop the union tags pydantic inserts for the discriminated payload formats
        loc: Path = tuple(p for p in err["loc"] if p not in ("number", "json", "senml",
                                                              "state"))
        where = ".".join(str(p) for p in loc) or "(top level)"
        if err["type"] == "extra_forbidden":
            key = str(loc[-1])
            pos = smap.find(loc, key=True)
            msg = f"{where}: unknown key {key!r}{_suggest(key)}"
        else:
            pos = smap.find(loc)
            text = str(err["msg"]).removeprefix("Value error, ")
            value = err.get("input")
            shown = "" if isinstance(value, dict | list) or err["type"] == "missing" else \
                f" (got {_clip(value)})"
            msg = f"{where}: {text}{shown}"
        env = next((v for k, v in env_paths.items() if loc[:len(k)] == k), None)
        if env is not None:
            msg += f" [set by environment variable {env}]"
        issues.append(ConfigIssue(pos, msg))
    return issues

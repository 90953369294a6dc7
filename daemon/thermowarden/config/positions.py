"""YAML loading that remembers where every value came from (file, line, column).

Configuration errors must point at the offending line; pydantic reports a path
(``spaces.3.people.met``) and this module maps it back to the YAML source.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import yaml

Path = tuple[str | int, ...]


@dataclass(frozen=True)
class Position:
    """Where a value sits in a source file (1-based line and column)."""

    file: str
    line: int
    column: int

    def __str__(self) -> str:
        return f"{self.file}:{self.line}:{self.column}"


class SourceMap:
    """Path -> position of the value, and of the key for mapping entries."""

    def __init__(self) -> None:
        self.values: dict[Path, Position] = {}
        self.keys: dict[Path, Position] = {}

    def find(self, path: Path, *, key: bool = False) -> Position | None:
        """The position of ``path`` or of its nearest ancestor that has one."""
        table = self.keys if key else self.values
        p = tuple(path)
        while p:
            if p in table:
                return table[p]
            if p in self.values:
                return self.values[p]
            p = p[:-1]
        return self.values.get((), None)

    def update(self, other: SourceMap, prefix: Path) -> None:
        for k, v in other.values.items():
            self.values[prefix + k] = v
        for k, v in other.keys.items():
            self.keys[prefix + k] = v


class YamlSourceError(ValueError):
    """The file is not valid YAML; ``position`` says where."""

    def __init__(self, position: Position, message: str) -> None:
        super().__init__(f"{position}: {message}")
        self.position = position
        self.message = message


def load_yaml_with_positions(text: str, file: str) -> tuple[Any, SourceMap]:
    """Parse YAML text; return the data and a :class:`SourceMap` of its values."""
    loader = yaml.SafeLoader(text)
    smap = SourceMap()
    try:
        node = loader.get_single_node()
        if node is None:
            return None, smap

        def pos(n: yaml.Node) -> Position:
            return Position(file, n.start_mark.line + 1, n.start_mark.column + 1)

        def walk(n: yaml.Node, path: Path) -> Any:
            smap.values[path] = pos(n)
            if isinstance(n, yaml.MappingNode):
                loader.flatten_mapping(n)
                out: dict[Any, Any] = {}
                for k_node, v_node in n.value:
                    key = loader.construct_object(k_node, deep=True)
                    if not isinstance(key, str | int | float | bool):
                        raise YamlSourceError(pos(k_node), "a key must be a plain value")
                    k = str(key) if not isinstance(key, str) else key
                    if k in out:
                        raise YamlSourceError(pos(k_node), f"duplicate key {k!r}")
                    smap.keys[path + (k,)] = pos(k_node)
                    out[k] = walk(v_node, path + (k,))
                return out
            if isinstance(n, yaml.SequenceNode):
                return [walk(item, path + (i,)) for i, item in enumerate(n.value)]
            return loader.construct_object(n, deep=True)

        return walk(node, ()), smap
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        line = mark.line + 1 if mark else 1
        col = mark.column + 1 if mark else 1
        raise YamlSourceError(Position(file, line, col),
                              f"not valid YAML: {exc.problem or exc.context}") from None
    finally:
        loader.dispose()

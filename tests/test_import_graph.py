"""The package's import graph: no circle among its modules, and the shell never reaching up
into a command module.

Read from the source with :mod:`ast`, so nothing is imported. Every import counts: at
module level, inside functions and under ``TYPE_CHECKING`` (a type-only circle is still two
modules that must change together). A circle is reported with its modules in order; break
it by moving what both sides need into a module of its own, or by describing what one side
uses as a :class:`typing.Protocol` next to it.
"""

from __future__ import annotations

import ast
import pathlib

import pytest

PACKAGE = pathlib.Path(__file__).resolve().parents[1] / "daemon" / "thermowarden"

LAYERS = ("core", "engine", "config", "shell")
"""Subpackages with a place on the data's path (DEVELOPERS.md, Architecture)."""
ENGINE_SIDE = ("effects", "rules", "site_model", "wbgt_basis", "numba_cache")
"""Top-level modules of the engine side that the shell may use. Every other top-level module
serves a command (``cli``, ``report``, ``replay``, ``demo``, ...): the shell must not import
it; what both need moves into a layer or into one of these."""


def _modules() -> dict[str, tuple[pathlib.Path, bool]]:
    """Dotted module name -> (file, is a package's ``__init__``)."""
    found: dict[str, tuple[pathlib.Path, bool]] = {}
    for path in sorted(PACKAGE.rglob("*.py")):
        parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
        is_package = parts[-1] == "__init__"
        if is_package:
            parts.pop()
        found[".".join(parts)] = (path, is_package)
    return found


def import_graph() -> dict[str, set[str]]:
    """Module -> the package's modules it imports (a ``from m import name`` counts as an
    import of ``m.name`` when that is a module, else of ``m``)."""
    modules = _modules()
    graph: dict[str, set[str]] = {}
    for name, (path, is_package) in modules.items():
        package = name if is_package else name.rpartition(".")[0]
        targets: set[str] = set()
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"), str(path))):
            if isinstance(node, ast.Import):
                targets.update(alias.name for alias in node.names)
            elif isinstance(node, ast.ImportFrom):
                if node.level:
                    base = package.split(".")[: len(package.split(".")) - node.level + 1]
                    module = ".".join(base + ([node.module] if node.module else []))
                else:
                    module = node.module or ""
                for alias in node.names:
                    sub = f"{module}.{alias.name}"
                    targets.add(sub if sub in modules else module)
        graph[name] = {t for t in targets if t in modules and t != name}
    return graph


def circles(graph: dict[str, set[str]]) -> list[list[str]]:
    """The strongly connected components of more than one module (Tarjan), each as one
    circle through its modules in import order."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    components: list[list[str]] = []

    def visit(v: str) -> None:  # recursion depth is bounded by the module count
        index[v] = low[v] = len(index)
        stack.append(v)
        on_stack.add(v)
        for w in sorted(graph[v]):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on_stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            component = []
            while True:
                w = stack.pop()
                on_stack.discard(w)
                component.append(w)
                if w == v:
                    break
            if len(component) > 1:
                components.append(component)

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return [_one_circle(graph, set(c)) for c in components]


def _one_circle(graph: dict[str, set[str]], members: set[str]) -> list[str]:
    """A path from the first member (by name) back to itself within ``members``."""
    start = min(members)
    paths = {start: [start]}
    frontier = [start]
    while frontier:
        nxt = []
        for v in frontier:
            for w in sorted(graph[v] & members):
                if w == start:
                    return paths[v] + [start]
                if w not in paths:
                    paths[w] = paths[v] + [w]
                    nxt.append(w)
        frontier = nxt
    raise AssertionError(f"no circle through {start}")  # a component always has one


def _is_command_module(name: str) -> bool:
    parts = name.split(".")
    return (len(parts) >= 2 and parts[1] not in LAYERS and parts[1] not in ENGINE_SIDE
            and name != "thermowarden")


def test_the_walk_finds_the_known_edges() -> None:
    """The walk itself: edges of each kind of import statement are found."""
    graph = import_graph()
    assert "thermowarden.engine.engine" in graph["thermowarden.engine"]  # from package import
    assert "thermowarden.shell.systemd" in graph["thermowarden.shell.service"]  # submodule
    assert "thermowarden.engine.advisory" in graph["thermowarden.engine.publication"]  # typing
    assert _is_command_module("thermowarden.cli")
    assert not _is_command_module("thermowarden.shell.service")
    assert not _is_command_module("thermowarden.rules")


def test_circles_are_found_with_their_path() -> None:
    graph = {"a": {"b"}, "b": {"c"}, "c": {"a", "d"}, "d": set(), "e": {"e2"}, "e2": set()}
    assert circles(graph) == [["a", "b", "c", "a"]]
    assert circles({"a": {"b"}, "b": set()}) == []


def test_no_import_circle() -> None:
    found = circles(import_graph())
    assert not found, "import circles:\n" + "\n".join(" -> ".join(c) for c in found)


@pytest.mark.parametrize("layer", ["shell", "engine", "core", "config"])
def test_no_layer_imports_a_command_module(layer: str) -> None:
    graph = import_graph()
    wrong = sorted((m, t) for m, targets in graph.items()
                   if m.startswith(f"thermowarden.{layer}.") or m == f"thermowarden.{layer}"
                   for t in targets if _is_command_module(t))
    assert not wrong, "\n".join(f"{m} imports the command module {t}" for m, t in wrong)


def test_core_imports_nothing_above_it() -> None:
    """The pure core: no engine, shell or config."""
    graph = import_graph()
    wrong = sorted((m, t) for m, targets in graph.items() if m.startswith("thermowarden.core")
                   for t in targets if not t.startswith("thermowarden.core"))
    assert not wrong, "\n".join(f"{m} imports {t}" for m, t in wrong)

"""Can a rule condition ever be true with the names a space can provide?

A rule whose clear condition can never become true stays live for ever once raised (unknown
never clears); one whose raise condition can never become true is dead weight. This module
answers the question symbolically, on the expression tree, in Kleene's three-valued logic:
every name is either *available* (its value may be anything) or *unavailable* (always
unknown). A boolean expression is summarised by the set of truth values it can take.
"""

from __future__ import annotations

from collections.abc import Set
from typing import Final

from thermowarden.core.expressions import Binary, Bool, Call, Expression, Name, Node, Num, Unary

T: Final = "true"
F: Final = "false"
U: Final = "unknown"
_COMPARISONS: Final = frozenset({"<", "<=", ">", ">=", "==", "!="})


def _and(a: str, b: str) -> str:
    if F in (a, b):
        return F
    return T if a == b == T else U


def _or(a: str, b: str) -> str:
    if T in (a, b):
        return T
    return F if a == b == F else U


def _numeric_known(node: Node, available: Set[str]) -> bool:
    """A numeric sub-expression is known only when every name it reads is available."""
    if isinstance(node, Num | Bool):
        return True
    if isinstance(node, Name):
        return node.name in available
    if isinstance(node, Call):
        return all(_numeric_known(a, available) for a in node.args)
    if isinstance(node, Unary):
        return _numeric_known(node.operand, available)
    if isinstance(node, Binary):
        return _numeric_known(node.left, available) and _numeric_known(node.right, available)
    return False


def outcomes(node: Node, available: Set[str]) -> frozenset[str]:
    """The truth values boolean ``node`` can take when only ``available`` names are ever
    known (the values of available names being free)."""
    if isinstance(node, Bool):
        return frozenset({T if node.value else F})
    if isinstance(node, Name):  # a flag: always known
        return frozenset({T, F}) if node.name in available else frozenset({U})
    if isinstance(node, Call) and node.func == "known":
        return frozenset({T, F}) if _numeric_known(node.args[0], available) else frozenset({F})
    if isinstance(node, Unary) and node.op == "not":
        inner = outcomes(node.operand, available)
        return frozenset({T: F, F: T, U: U}[x] for x in inner)
    if isinstance(node, Binary) and node.op in ("and", "or"):
        left, right = outcomes(node.left, available), outcomes(node.right, available)
        combine = _and if node.op == "and" else _or
        return frozenset(combine(a, b) for a in left for b in right)
    if isinstance(node, Binary) and node.op in _COMPARISONS:
        known = _numeric_known(node.left, available) and _numeric_known(node.right, available)
        return frozenset({T, F}) if known else frozenset({U})
    return frozenset({U})


def can_become_true(expr: Expression, available: Set[str]) -> bool:
    """Whether ``expr`` can ever evaluate to true with only ``available`` names known."""
    return T in outcomes(expr.root, available)


def blocking_names(expr: Expression, available: Set[str]) -> list[str]:
    """The names ``expr`` reads that are not available, in order of first use."""
    seen: list[str] = []

    def walk(node: Node) -> None:
        if isinstance(node, Name) and node.name not in available and node.name not in seen:
            seen.append(node.name)
        elif isinstance(node, Call):
            for a in node.args:
                walk(a)
        elif isinstance(node, Unary):
            walk(node.operand)
        elif isinstance(node, Binary):
            walk(node.left)
            walk(node.right)

    walk(expr.root)
    return seen

"""The rule language: short, safe expressions over indices, readings, parameters and flags.

Grammar (lowest precedence first)::

    expr       := and_expr ("or" and_expr)*
    and_expr   := not_expr ("and" not_expr)*
    not_expr   := "not" not_expr | comparison
    comparison := sum (("<" | "<=" | ">" | ">=" | "==" | "!=") sum)?
    sum        := term (("+" | "-") term)*
    term       := unary (("*" | "/") unary)*
    unary      := "-" unary | primary
    primary    := NUMBER | "true" | "false" | NAME | NAME "(" expr ("," expr)* ")"
                | "(" expr ")"

Expressions are parsed once into a tree of frozen nodes (no Python ``eval``, no attribute
access, no imports) with every name and function checked against a table, and types
checked (numbers vs truth values). They are evaluated for all spaces at once on arrays
with three-valued logic: a number is unknown where it is NaN; a truth value is a pair
(value, known). A comparison with an unknown side is unknown; ``and`` is false if either
side is known false, ``or`` is true if either side is known true (Kleene logic).
"""

from __future__ import annotations

import difflib
import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Final, Literal

import numpy as np

from thermowarden.core import comfort, local_discomfort
from thermowarden.core.columns import BoolArray, FloatArray

Kind = Literal["number", "bool"]


class ExpressionError(ValueError):
    """A rule expression that cannot be used; ``position`` is the 0-based column."""

    def __init__(self, message: str, position: int, text: str) -> None:
        super().__init__(f"{message} at column {position + 1}: {text}")
        self.message = message
        self.position = position
        self.text = text


@dataclass(frozen=True)
class Truth:
    """A three-valued truth per space: ``value`` where ``known``."""

    value: BoolArray
    known: BoolArray

    @property
    def true(self) -> BoolArray:
        """Known and true."""
        result: BoolArray = self.value & self.known
        return result

    @property
    def false(self) -> BoolArray:
        """Known and false."""
        result: BoolArray = ~self.value & self.known
        return result


Value = FloatArray | Truth
Environment = Mapping[str, FloatArray | BoolArray]

_FUNCTIONS: Final[dict[str, tuple[int, int, Callable[..., FloatArray]]]] = {
    # name: (min args, max args, implementation on float arrays)
    "min": (2, 8, lambda *a: _reduce(np.minimum, a)),
    "max": (2, 8, lambda *a: _reduce(np.maximum, a)),
    "abs": (1, 1, lambda a: np.abs(a)),
    "ppd": (1, 1, comfort.ppd_from_pmv),
    "pd_warm_wall": (1, 1, local_discomfort.warm_wall_pd),
    "pd_cool_wall": (1, 1, local_discomfort.cool_wall_pd),
    "pd_warm_ceiling": (1, 1, local_discomfort.warm_ceiling_pd),
    "pd_cool_ceiling": (1, 1, local_discomfort.cool_ceiling_pd),
}
BOOL_FUNCTIONS: Final = {"known"}
FUNCTION_NAMES: Final = frozenset(_FUNCTIONS) | BOOL_FUNCTIONS


def _reduce(f: Callable[[FloatArray, FloatArray], FloatArray], args: tuple[FloatArray, ...]
            ) -> FloatArray:
    out = args[0]
    for a in args[1:]:
        out = f(out, a)
    return out


# ---------------------------------------------------------------- syntax tree

@dataclass(frozen=True)
class Node:
    pos: int


@dataclass(frozen=True)
class Num(Node):
    value: float


@dataclass(frozen=True)
class Bool(Node):
    value: bool


@dataclass(frozen=True)
class Name(Node):
    name: str


@dataclass(frozen=True)
class Call(Node):
    func: str
    args: tuple[Node, ...]


@dataclass(frozen=True)
class Unary(Node):
    op: str
    operand: Node


@dataclass(frozen=True)
class Binary(Node):
    op: str
    left: Node
    right: Node


_TOKEN = re.compile(r"""
    (?P<ws>\s+)
  | (?P<num>\d+(?:\.\d*)?(?:[eE][-+]?\d+)?|\.\d+(?:[eE][-+]?\d+)?)
  | (?P<name>[A-Za-z_][A-Za-z0-9_]*)
  | (?P<op><=|>=|==|!=|[<>+\-*/(),])
""", re.VERBOSE)
KEYWORDS: Final = frozenset({"and", "or", "not", "true", "false"})


@dataclass(frozen=True)
class _Tok:
    kind: str
    text: str
    pos: int


def _tokenize(text: str) -> list[_Tok]:
    out: list[_Tok] = []
    i = 0
    while i < len(text):
        m = _TOKEN.match(text, i)
        if m is None:
            raise ExpressionError(f"unexpected character {text[i]!r}", i, text)
        kind = m.lastgroup or ""
        if kind != "ws":
            tok = m.group()
            if kind == "name" and tok in KEYWORDS:
                kind = tok
            out.append(_Tok(kind, tok, i))
        i = m.end()
    out.append(_Tok("end", "", len(text)))
    return out


class _Parser:
    def __init__(self, text: str) -> None:
        self.text = text
        self.toks = _tokenize(text)
        self.i = 0

    def peek(self) -> _Tok:
        return self.toks[self.i]

    def take(self, *kinds: str) -> _Tok:
        tok = self.toks[self.i]
        if tok.kind not in kinds and tok.text not in kinds:
            want = " or ".join(repr(k) for k in kinds)
            got = "the end" if tok.kind == "end" else repr(tok.text)
            raise ExpressionError(f"expected {want}, found {got}", tok.pos, self.text)
        self.i += 1
        return tok

    def parse(self) -> Node:
        node = self.or_expr()
        if self.peek().kind != "end":
            tok = self.peek()
            raise ExpressionError(f"unexpected {tok.text!r}", tok.pos, self.text)
        return node

    def or_expr(self) -> Node:
        node = self.and_expr()
        while self.peek().kind == "or":
            tok = self.take("or")
            node = Binary(tok.pos, "or", node, self.and_expr())
        return node

    def and_expr(self) -> Node:
        node = self.not_expr()
        while self.peek().kind == "and":
            tok = self.take("and")
            node = Binary(tok.pos, "and", node, self.not_expr())
        return node

    def not_expr(self) -> Node:
        if self.peek().kind == "not":
            tok = self.take("not")
            return Unary(tok.pos, "not", self.not_expr())
        return self.comparison()

    def comparison(self) -> Node:
        node = self.sum()
        if self.peek().text in ("<", "<=", ">", ">=", "==", "!="):
            tok = self.take("op")
            node = Binary(tok.pos, tok.text, node, self.sum())
            if self.peek().text in ("<", "<=", ">", ">=", "==", "!="):
                t2 = self.peek()
                raise ExpressionError("comparisons do not chain; use 'and'", t2.pos, self.text)
        return node

    def sum(self) -> Node:
        node = self.term()
        while self.peek().text in ("+", "-"):
            tok = self.take("op")
            node = Binary(tok.pos, tok.text, node, self.term())
        return node

    def term(self) -> Node:
        node = self.unary()
        while self.peek().text in ("*", "/"):
            tok = self.take("op")
            node = Binary(tok.pos, tok.text, node, self.unary())
        return node

    def unary(self) -> Node:
        if self.peek().text == "-":
            tok = self.take("op")
            return Unary(tok.pos, "-", self.unary())
        return self.primary()

    def primary(self) -> Node:
        tok = self.peek()
        if tok.kind == "num":
            self.i += 1
            return Num(tok.pos, float(tok.text))
        if tok.kind in ("true", "false"):
            self.i += 1
            return Bool(tok.pos, tok.kind == "true")
        if tok.kind == "name":
            self.i += 1
            if self.peek().text == "(":
                self.take("(")
                args = [self.or_expr()]
                while self.peek().text == ",":
                    self.take(",")
                    args.append(self.or_expr())
                self.take(")")
                return Call(tok.pos, tok.text, tuple(args))
            return Name(tok.pos, tok.text)
        if tok.text == "(":
            self.take("(")
            node = self.or_expr()
            self.take(")")
            return node
        got = "the end" if tok.kind == "end" else repr(tok.text)
        raise ExpressionError(f"expected a number, name or '(', found {got}", tok.pos, self.text)


# ---------------------------------------------------------------- checking

@dataclass(frozen=True)
class Expression:
    """A parsed, checked expression; ``names`` are the variables it reads."""

    text: str
    root: Node
    kind: Kind
    names: frozenset[str]

    def evaluate(self, env: Environment, n: int) -> Value:
        """Evaluate for ``n`` spaces; ``env`` maps names to (N,) arrays."""
        return _eval(self.root, env, n)

    def evaluate_truth(self, env: Environment, n: int) -> Truth:
        v = self.evaluate(env, n)
        assert isinstance(v, Truth)
        return v

    def evaluate_number(self, env: Environment, n: int) -> FloatArray:
        v = self.evaluate(env, n)
        assert not isinstance(v, Truth)
        return v


def _check(node: Node, names: Mapping[str, Kind], text: str, used: set[str]) -> Kind:
    if isinstance(node, Num):
        return "number"
    if isinstance(node, Bool):
        return "bool"
    if isinstance(node, Name):
        if node.name not in names:
            close = difflib.get_close_matches(node.name, list(names), n=1)
            hint = f" (did you mean {close[0]!r}?)" if close else ""
            raise ExpressionError(f"unknown name {node.name!r}{hint}", node.pos, text)
        used.add(node.name)
        return names[node.name]
    if isinstance(node, Call):
        if node.func == "known":
            if len(node.args) != 1:
                raise ExpressionError("known() takes one argument", node.pos, text)
            _check(node.args[0], names, text, used)
            return "bool"
        if node.func not in _FUNCTIONS:
            close = difflib.get_close_matches(node.func, list(FUNCTION_NAMES), n=1)
            hint = f" (did you mean {close[0]!r}?)" if close else ""
            raise ExpressionError(f"unknown function {node.func!r}{hint}", node.pos, text)
        lo, hi, _ = _FUNCTIONS[node.func]
        if not lo <= len(node.args) <= hi:
            raise ExpressionError(f"{node.func}() takes {lo}" + (f" to {hi}" if hi != lo else "")
                                  + " arguments", node.pos, text)
        for a in node.args:
            if _check(a, names, text, used) != "number":
                raise ExpressionError(f"{node.func}() takes numbers", a.pos, text)
        return "number"
    if isinstance(node, Unary):
        k = _check(node.operand, names, text, used)
        if node.op == "not" and k != "bool":
            raise ExpressionError("'not' needs a truth value", node.pos, text)
        if node.op == "-" and k != "number":
            raise ExpressionError("'-' needs a number", node.pos, text)
        return k
    assert isinstance(node, Binary)
    lk = _check(node.left, names, text, used)
    rk = _check(node.right, names, text, used)
    if node.op in ("and", "or"):
        if lk != "bool" or rk != "bool":
            raise ExpressionError(f"'{node.op}' joins truth values (comparisons)", node.pos, text)
        return "bool"
    if node.op in ("==", "!="):
        if lk != rk:
            raise ExpressionError(f"'{node.op}' compares two numbers or two truth values",
                                  node.pos, text)
        return "bool"
    if lk != "number" or rk != "number":
        raise ExpressionError(f"'{node.op}' needs numbers", node.pos, text)
    return "bool" if node.op in ("<", "<=", ">", ">=") else "number"


def parse_expression(text: str, names: Mapping[str, Kind], want: Kind | None = None
                     ) -> Expression:
    """Parse and check ``text`` against the name table; optionally require its kind."""
    if not isinstance(text, str) or not text.strip():
        raise ExpressionError("empty expression", 0, str(text))
    if len(text) > 2000:
        raise ExpressionError("expression longer than 2000 characters", 2000, text[:40])
    root = _Parser(text).parse()
    used: set[str] = set()
    kind = _check(root, names, text, used)
    if want is not None and kind != want:
        what = "a condition (true/false)" if want == "bool" else "a number"
        raise ExpressionError(f"expected {what}", 0, text)
    return Expression(text, root, kind, frozenset(used))


# ---------------------------------------------------------------- evaluation

def _eval(node: Node, env: Environment, n: int) -> Value:
    if isinstance(node, Num):
        return np.full(n, node.value)
    if isinstance(node, Bool):
        return Truth(np.full(n, node.value), np.ones(n, dtype=bool))
    if isinstance(node, Name):
        arr = env[node.name]
        if arr.dtype == np.bool_:
            return Truth(np.asarray(arr, dtype=bool), np.ones(n, dtype=bool))
        return np.asarray(arr, dtype=np.float64)
    if isinstance(node, Call):
        if node.func == "known":
            v = _eval(node.args[0], env, n)
            known = v.known if isinstance(v, Truth) else np.isfinite(v)
            return Truth(known, np.ones(n, dtype=bool))
        args = [_eval(a, env, n) for a in node.args]
        with np.errstate(all="ignore"):
            return np.asarray(_FUNCTIONS[node.func][2](*args), dtype=np.float64)
    if isinstance(node, Unary):
        v = _eval(node.operand, env, n)
        if isinstance(v, Truth):
            return Truth(~v.value, v.known)
        return -v
    assert isinstance(node, Binary)
    left = _eval(node.left, env, n)
    right = _eval(node.right, env, n)
    if isinstance(left, Truth) and isinstance(right, Truth):
        if node.op == "and":
            value = left.value & right.value
            known = (left.known & right.known) | left.false | right.false
            return Truth(value & known, known)
        if node.op == "or":
            known = (left.known & right.known) | left.true | right.true
            return Truth((left.true | right.true), known)
        eq = left.value == right.value
        return Truth(eq if node.op == "==" else ~eq, left.known & right.known)
    assert not isinstance(left, Truth) and not isinstance(right, Truth)
    with np.errstate(all="ignore"):
        if node.op in ("+", "-", "*", "/"):
            if node.op == "+":
                return left + right
            if node.op == "-":
                return left - right
            if node.op == "*":
                return left * right
            out = left / right
            return np.where(np.isfinite(out), out, np.nan)
        known = np.isfinite(left) & np.isfinite(right)
        ops: dict[str, Callable[[FloatArray, FloatArray], BoolArray]] = {
            "<": np.less, "<=": np.less_equal, ">": np.greater, ">=": np.greater_equal,
            "==": np.equal, "!=": np.not_equal}
        value = ops[node.op](left, right)
        return Truth(value & known, known)

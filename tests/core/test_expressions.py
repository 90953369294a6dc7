"""The rule language: parsing, safety, types, and three-valued evaluation on arrays."""

from __future__ import annotations

import numpy as np
import pytest

from thermowarden.core.expressions import ExpressionError, parse_expression

NAMES = {"a": "number", "b": "number", "c": "number", "flag": "bool", "occupied": "bool"}
NAN = float("nan")


def ev(text, **env):
    n = len(next(iter(env.values())))
    arrays = {k: (np.array(v, dtype=bool) if isinstance(v[0], bool) else
                  np.array(v, dtype=float)) for k, v in env.items()}
    return parse_expression(text, NAMES).evaluate(arrays, n)


@pytest.mark.parametrize("text,message,column", [
    ("a >", "expected a number, name or '('", 4),
    ("a > 1 and", "expected a number, name or '('", 10),
    ("a >> 1", "expected a number, name or '('", 4),
    ("aa > 1", "unknown name 'aa' (did you mean 'a'?)", 1),
    ("a.b > 1", "unexpected character '.'", 2),
    ("__import__('os')", "unexpected character", 12),
    ("open(a)", "unknown function 'open'", 1),
    ("a < b < c", "comparisons do not chain", 7),
    ("a and flag", "'and' joins truth values", 3),
    ("not a", "'not' needs a truth value", 1),
    ("flag + 1", "'+' needs numbers", 6),
    ("min(a)", "min() takes 2 to 8 arguments", 1),
    ("(a > 1", "expected ')'", 7),
    ("a; b", "unexpected character ';'", 2),
])
def test_bad_expressions_are_refused_with_position(text, message, column):
    with pytest.raises(ExpressionError) as exc:
        parse_expression(text, NAMES)
    assert message in str(exc.value)
    assert exc.value.position + 1 == column


def test_condition_must_be_a_truth_value():
    with pytest.raises(ExpressionError, match="expected a condition"):
        parse_expression("a + 1", NAMES, want="bool")


def test_arithmetic_and_functions():
    v = ev("max(a, b) - abs(c) * 2 + min(a, 1) / 2", a=[3.0], b=[5.0], c=[-1.0])
    assert v[0] == pytest.approx(5 - 2 + 0.5)
    assert np.isnan(ev("a / b", a=[1.0], b=[0.0])[0])  # division by zero is unknown


def test_comparison_with_unknown_is_unknown():
    t = ev("a > 1", a=[2.0, 0.0, NAN])
    assert t.value.tolist() == [True, False, False]
    assert t.known.tolist() == [True, True, False]


def test_kleene_and_or_not():
    # a > 1: true, false, unknown (x3 against b > 1: true, false, unknown)
    a = [2.0, 2.0, 2.0, 0.0, 0.0, 0.0, NAN, NAN, NAN]
    b = [2.0, 0.0, NAN] * 3
    t_and = ev("a > 1 and b > 1", a=a, b=b)
    t_or = ev("a > 1 or b > 1", a=a, b=b)
    T, F, U = "T", "F", "U"

    def show(t):
        return [U if not k else (T if v else F) for v, k in zip(t.value, t.known, strict=True)]

    assert show(t_and) == [T, F, U, F, F, F, U, F, U]
    assert show(t_or) == [T, T, T, T, F, U, T, U, U]
    t_not = ev("not a > 1", a=[2.0, 0.0, NAN])
    assert show(t_not) == [F, T, U]


def test_known_function_and_flags():
    t = ev("known(a) and flag", a=[1.0, NAN], flag=[True, True])
    assert t.true.tolist() == [True, False] and t.known.all()


def test_long_expression_refused():
    with pytest.raises(ExpressionError, match="longer than 2000"):
        parse_expression("a + " * 600 + "a", NAMES)

"""The easing trend samples a rule's number expression for several spaces at once
(numbers_at): each value is exactly the one space's evaluation (number_at) gives."""

from __future__ import annotations

import math

import numpy as np

from thermowarden.core.expressions import parse_expression
from thermowarden.engine.texts import number_at, numbers_at


def test_several_spaces_at_once_as_one_by_one():
    rng = np.random.default_rng(7)
    n = 50
    env = {"ta": rng.uniform(15, 40, n), "pmv": rng.uniform(-3, 3, n),
           "wbgt": np.where(rng.random(n) < 0.2, np.nan, rng.uniform(20, 35, n))}
    params = {"limit": rng.uniform(25, 30, n)}
    names = {"ta": "number", "pmv": "number", "wbgt": "number", "limit": "number"}
    spaces = [3, 0, 17, 49, 17, 22, 8]
    for text in ("ta", "wbgt - limit", "max(ta, wbgt) / (limit - 27)", "ppd(pmv)",
                 "abs(min(pmv, 1.5) * -2) + 0.1", "2"):
        expr = parse_expression(text, names, want="number")
        got = numbers_at(expr, env, params, spaces)
        want = [number_at(expr, env, params, i) for i in spaces]
        assert len(got) == len(want)
        for g, w in zip(got, want, strict=True):
            assert type(g) is float
            assert (g == w) or (math.isnan(g) and math.isnan(w)), text

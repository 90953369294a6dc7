"""What an advisory says: its numbers, expected benefit, title, advice and rationale for one
space, rendered from the rule's templates with the values of the moment
(:class:`RenderContext`, the evaluation in progress), its level's texts or the rule's easing
and cleared texts, and the time since advice was acted on."""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from collections.abc import Set as AbstractSet
from dataclasses import dataclass
from typing import Any

import numpy as np

from thermowarden.config import SiteConfig
from thermowarden.core.columns import BoolArray, IndexColumn
from thermowarden.core.expressions import Expression
from thermowarden.core.json_values import num
from thermowarden.core.quantities import QUANTITIES
from thermowarden.rules import CompiledRule, MessageTemplate
from thermowarden.site_model import SiteModel


def no_details(i: int, wanted: AbstractSet[str]) -> dict[str, object]:
    return {}


@dataclass
class RenderContext:
    """The evaluation in progress, for rendering texts with the numbers of the moment."""

    base: Mapping[str, Any]
    table: Mapping[str, IndexColumn] | None
    details: Callable[[int, AbstractSet[str]], dict[str, object]] = no_details
    """Text fields of one space that are not arrays (sensor names, the WBGT basis)."""
    evaluated: BoolArray | None = None
    """The spaces this evaluation computed (None: all). A space taken over from another
    instance since has no numbers of its own here yet: its texts are not rendered again
    until it has been evaluated."""

    def has_numbers(self, i: int) -> bool:
        return self.table is not None and (self.evaluated is None or bool(self.evaluated[i]))


def one_space(expr: Expression, env: Mapping[str, Any], params: Mapping[str, Any],
              i: int) -> dict[str, Any]:
    """The environment of ``expr`` for space ``i`` alone (one-element arrays), the rule's
    per-space ``params`` over ``env``: evaluating it costs one space, not the whole site."""
    return {name: (params[name] if name in params else env[name])[i:i + 1]
            for name in expr.names}


def number_at(expr: Expression, env: Mapping[str, Any], params: Mapping[str, Any],
              i: int) -> float:
    """Space ``i``'s value of a number expression."""
    return float(expr.evaluate_number(one_space(expr, env, params, i), 1)[0])


def numbers_at(expr: Expression, env: Mapping[str, Any], params: Mapping[str, Any],
               spaces: list[int]) -> list[float]:
    """The values of a number expression in each of ``spaces``, as :func:`number_at` gives
    them one by one (expressions are element-wise), evaluated once over those spaces."""
    idx = np.array(spaces, dtype=np.intp)
    sub = {name: (params[name] if name in params else env[name])[idx]
           for name in expr.names}
    values: list[float] = expr.evaluate_number(sub, len(spaces)).tolist()
    return values


def values_at(rule: CompiledRule, env: Mapping[str, Any], params: Mapping[str, Any],
              table: Mapping[str, IndexColumn] | None, i: int, n: int
              ) -> tuple[dict[str, Any], dict[str, Any], dict[str, object]]:
    """The advisory's ``numbers`` (value, unit, method, threshold, reason when absent), its
    ``benefit`` and the template fields of space ``i``, from the environment ``env``
    (name -> array over the ``n`` spaces) and the rule's per-space ``params``."""
    numbers: dict[str, Any] = {}
    fields: dict[str, object] = {}

    def lookup(name: str) -> Any:
        return params[name] if name in params else env.get(name)

    for name in rule.template_names:
        arr = lookup(name)
        if isinstance(arr, np.ndarray) and arr.dtype != np.bool_ and arr.shape == (n,):
            fields[name] = float(arr[i])

    def at(expr: Expression) -> float:
        return number_at(expr, env, params, i)

    for name, th in rule.numbers:
        arr = lookup(name)
        v = float(arr[i]) if arr is not None else math.nan
        item: dict[str, Any] = {"value": num(v)}
        if table is not None and name in table:
            col = table[name]
            item["unit"] = col.unit
            item["method"] = col.method
            if not math.isfinite(v):
                item["reason"] = col.reason_at(i) or "input missing or stale"
        else:
            q = QUANTITIES.get(name)
            item["unit"] = q.unit if q else ""
            item["method"] = "measured" if q else "thermowarden"
            if not math.isfinite(v):
                item["reason"] = "input missing or stale"
        if th is not None:
            item["threshold"] = num(at(th))
        numbers[name] = item
    benefit: dict[str, Any] = {}
    for name, expr in rule.benefit:
        v = at(expr)
        benefit[name] = {"value": num(v)}
        fields[name] = v
    return numbers, benefit, fields


NOT_NOW = ("The measurements behind this advisory are not available at the moment; see its "
           "numbers for the reasons.")


def values_now(rule: CompiledRule, ctx: RenderContext, params: Mapping[str, Any], i: int,
               n: int) -> dict[str, Any]:
    """The values of the rule's numbers for space ``i`` in this evaluation (units as in
    an advisory's ``numbers``; None where not known)."""
    numbers, _, _ = values_at(rule, ctx.base, params, ctx.table, i, n)
    return {name: item["value"] for name, item in numbers.items()}


class Texts:
    """Renders advisories of one site."""

    def __init__(self, config: SiteConfig, model: SiteModel) -> None:
        self.config = config
        self.model = model
        self.site_name = config.site.name or config.site.id

    def show(self, rule: CompiledRule, adv: Any, ctx: RenderContext,
             params: Mapping[str, Any], level: int, now: float | None = None,
             mode: str = "level", clear_in_min: float | None = None) -> None:
        """Render ``adv``'s texts with the numbers of this evaluation (``ctx``) at priority
        index ``level``: its level's texts, or (``mode``) the rule's ``easing`` texts (with
        the projected ``clear_in_min``) or ``cleared`` texts. Not again where nothing they
        read has changed since the last rendering; ``now`` (None: keep) is when the
        advisory's numbers are of."""
        extra = dict(ctx.details(adv.space, rule.template_names))
        texts = None
        easing = rule.easing
        if easing is not None and mode == "easing":
            texts = (easing.title, easing.advice)
            if clear_in_min is not None:
                extra["clear_in_min"] = clear_in_min
        elif easing is not None and mode == "cleared":
            texts = (easing.cleared_title, easing.cleared_advice)
        if adv.acted_on is not None and now is not None:
            t0 = float(adv.acted_on.get("_t", adv.updated_at))
            extra["acted_minutes_ago"] = max(0.0, (now - t0) / 60)
            effect = adv.acted_on.get("effect")
            if effect is not None and effect.get("predicted") is not None:
                extra["effect_predicted"] = effect["predicted"]
        key = (adv.effect_overdue, mode, self.render_key(
            rule, adv.space, ctx.base, params, ctx.table, level, extra))
        adv.numbers_at = now if now is not None else adv.numbers_at
        if key == adv.rendered_from:
            return  # the same values as at the last rendering: the same texts
        self.render(rule, adv, ctx.base, params, ctx.table, level, extra, texts)
        if adv.effect_overdue and adv.no_effect_text:
            adv.advice = adv.no_effect_text
        adv.rendered_from = key

    def render(self, rule: CompiledRule, adv: Any, env: Mapping[str, Any],
               params: Mapping[str, Any], table: Mapping[str, IndexColumn] | None, level: int,
               extra: Mapping[str, object] | None = None,
               texts: tuple[MessageTemplate, MessageTemplate] | None = None) -> None:
        """Fill ``adv``'s numbers, benefit, title, advice and rationale with the values of
        the moment (``env`` and ``table`` are the current evaluation) at priority index
        ``level``; ``extra`` adds text fields (sensor names, the basis of a WBGT); ``texts``
        (title, advice) instead of the level's (easing, cleared)."""
        i = adv.space
        n = self.model.n_spaces
        numbers, benefit, fields = values_at(rule, env, params, table, i, n)
        space = self.model.space(i)
        fields["space_name"] = space.name or space.id
        fields["space_id"] = space.id
        fields["site_name"] = self.site_name
        if extra:
            fields.update(extra)

        def holds(expr: Expression) -> bool:
            return bool(expr.evaluate_truth(one_space(expr, env, params, i), 1).true[0])

        title_t, advice_t = texts or rule.texts_at(level)
        notes = self._assumed(i, env)
        for q, note in notes.items():
            if q in numbers:
                numbers[q]["assumed"] = note
        adv.numbers = numbers
        adv.benefit = benefit
        # where every sentence needs a number that is not known now, the last text stays
        # (or a plain sentence, the first time); it never says "unknown"
        adv.title = title_t.render(fields, holds) or adv.title or rule.config.title
        adv.advice = advice_t.render(fields, holds) or adv.advice or NOT_NOW
        adv.rationale = rule.rationale.render(fields, holds) or adv.rationale or NOT_NOW
        if notes:
            shown = "; ".join(f"{q.replace('_', ' ')} {n.removeprefix('assumed: ')}"
                              for q, n in notes.items())
            suffix = f" Not measured here, assumed: {shown}."
            if not adv.rationale.endswith(suffix):
                adv.rationale += suffix
        adv.no_effect_text = (rule.no_effect.render(fields, holds)
                              if rule.no_effect is not None else "")

    def render_key(self, rule: CompiledRule, i: int, env: Mapping[str, Any],
                   params: Mapping[str, Any], table: Mapping[str, IndexColumn] | None,
                   level: int, extra: Mapping[str, object]) -> tuple[object, ...]:
        """Everything :meth:`render` of space ``i`` reads that can change between
        renderings: the values of the names the rule's texts read, the methods and reasons of
        its numbers, the assumptions standing in, the level and the ``extra`` fields. Equal
        keys: rendering again gives the same texts (a rendering falls back only on the texts
        of the one before, so it repeats itself)."""
        values: list[object] = [self, rule, level, table is None, sorted(extra.items())]
        for name in sorted(rule.render_names):
            arr = params[name] if name in params else env.get(name)
            v = arr[i].item() if isinstance(arr, np.ndarray) else arr
            values.append("nan" if v != v else v)  # NaN equals itself here
        if table is not None:
            for name, _ in rule.numbers:
                col = table.get(name)
                if col is not None:
                    values.append(col.method)
                    values.append(col.reason_at(i))
        flags = env.get("_assumed", {})
        values.extend(bool(flags[q][i]) for q in sorted(flags))
        return tuple(values)

    def _assumed(self, i: int, env: Mapping[str, Any]) -> dict[str, str]:
        """The assumptions standing in for space ``i``'s readings at this evaluation."""
        flags = env.get("_assumed", {})
        declared = self.config.assumptions(self.model.space(i)).notes()
        return {q: n for q, n in declared.items()
                if q in flags and bool(flags[q][i])}

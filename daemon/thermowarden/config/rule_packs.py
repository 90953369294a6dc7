"""Rule pack models: a pack file, its rules, their levels, messages, numbers and effect
checks. The rule language and compilation live in :mod:`thermowarden.rules`."""

from __future__ import annotations

from typing import Literal

from pydantic import Field, field_validator, model_validator

from thermowarden.config.base import Strict

Audience = Literal["facilities", "safety", "integrator"]
Priority = Literal["low", "medium", "high", "urgent"]
PRIORITIES: tuple[str, ...] = ("low", "medium", "high", "urgent")
AUDIENCES: tuple[str, ...] = ("facilities", "safety", "integrator")
RULE_ID = r"^[a-z][a-z0-9_]{0,47}$"


class AppliesTo(Strict):
    """Which spaces a rule applies to (besides having its pack enabled)."""

    kind: Literal["indoor", "outdoor"] | None = None
    hot_work: bool | None = None
    ventilation: Literal["mechanical", "natural"] | None = None
    windows: bool | None = None
    """The space declares windows (for the sun on a facade)."""


class RuleLevel(Strict):
    """One priority level of an escalating rule: the priority while ``when`` holds, with
    its own title and advice (what "approaching" asks is not what "above the limit" asks)
    and its own renotification interval (None: the rule's)."""

    priority: Priority
    when: str
    title: str | None = None
    advice: str | None = None
    renotify_s: float | None = Field(None, ge=60, le=7 * 86_400)
    leave_when: str | None = None
    """Hysteresis on the way down: the advisory is lowered below this level only while this
    holds (besides the lower level holding for five minutes); None: as soon as ``when`` is
    false."""


class RuleEasing(Strict):
    """How an escalating advisory says that it eases and that it cleared, with the numbers
    of the moment. ``quantity`` (an expression) moves ``direction`` (``down`` or ``up``) as
    the hazard eases and the advisory clears near ``clears_at`` (an expression): its trend
    over the last 15 minutes gives ``{clear_in_min}``, the minutes until then at the
    present trend (left out when it is not moving that way). ``title`` and ``advice`` are
    said while it eases (lowered from a higher level, or its raise condition false while
    it waits to clear); ``cleared_title`` and ``cleared_advice`` at the clearing, with the
    values it cleared at. For ``rearm_s`` after a clearing the lowest level is raised
    again only while ``quantity`` is moving against the easing direction (a space still
    cooling is not told that the heat is approaching)."""

    quantity: str
    direction: Literal["down", "up"] = "down"
    clears_at: str
    title: str
    advice: str
    cleared_title: str
    cleared_advice: str
    rearm_s: float = Field(0.0, ge=0, le=86_400)
    rearm_rise: float = Field(0.0, ge=0)
    """How much ``quantity`` must have moved against the easing over the last 15 minutes
    (fitted trend) for the lowest level to be raised again while re-arming."""


class RuleMessages(Strict):
    """Message templates: ``{name}`` or ``{name:.1f}`` inserts a number (see the rule
    language in the README), ``{space_name}`` and ``{site_name}`` the names."""

    title: str
    advice: str
    rationale: str
    no_effect: str | None = None
    """Sent once when the advice was acted on (``acted_on``) but the condition has not
    cleared ``effect.wait_s`` later; it should name the numbers and what to check."""


class RuleEffect(Strict):
    """How to tell whether acting on the advice helped: ``quantity`` (a name) is recorded
    when the advice is acted on and at ``checks_s`` afterwards, and compared with
    ``predicted`` (a benefit name: the value expected after the action)."""

    quantity: str
    predicted: str | None = None
    wait_s: float = Field(1800.0, ge=60, le=86_400)
    """The advice helped when the advisory cleared within this time of being acted on."""
    checks_s: list[float] = Field(default_factory=lambda: [900.0, 1800.0, 3600.0])


class RuleNumber(Strict):
    """A number shown with an advisory, optionally with the threshold it is compared to."""

    name: str
    threshold: str | None = None


class RuleForesees(Strict):
    """What an ahead-of-time rule foresees: the advisory of ``rule`` (``pack.id``) in the
    same space reaching ``priority`` (default: any). When it does, the ahead-of-time
    advisory ends (it has turned into that advisory); ``replay --summary`` measures the
    lead time against it."""

    rule: str = Field(pattern=r"^[a-z][a-z0-9_]{0,47}\.[a-z][a-z0-9_]{0,47}$")
    priority: Priority | None = None


class RuleConfig(Strict):
    """One rule of a pack. See rules/*.yaml for the default packs."""

    id: str = Field(pattern=RULE_ID)
    title: str
    audience: Audience
    priority: Priority = "medium"
    applies_to: AppliesTo = Field(default_factory=AppliesTo)
    needs: list[str] = Field(default_factory=list)
    measured: list[str] = Field(default_factory=list)
    """Inputs a declared assumption (``assume``) may not stand in for: a rule about the
    humidity itself says nothing when the humidity is only assumed. Where one is assumed the
    rule is unknown (never raised, never cleared), and ``check`` warns."""
    condition: str | None = None
    levels: list[RuleLevel] = Field(default_factory=list)
    clear: str | None = None
    on_delay_s: float = Field(0.0, ge=0, le=86_400)
    off_delay_s: float = Field(0.0, ge=0, le=86_400)
    renotify_s: float | None = Field(None, ge=60, le=7 * 86_400)
    occupied_only: bool = False
    hold_back: str | None = None
    acted_on: str | None = None
    parameters: dict[str, float | bool] = Field(default_factory=dict)
    numbers: list[RuleNumber] = Field(default_factory=list)
    benefit: dict[str, str] = Field(default_factory=dict)
    messages: RuleMessages
    max_shelve_s: float = Field(8 * 3600.0, ge=60, le=30 * 86_400)
    max_shelved_per_day_s: float | None = Field(None, ge=60, le=86_400)
    """Total time one advisory of this rule may spend shelved in any 24 hours, however
    often it is shelved (default: ``max_shelve_s``, at most a day)."""
    heat_stress_cautions: bool = False
    effect: RuleEffect | None = None
    foresees: RuleForesees | None = None
    """An ahead-of-time rule: the advisory it announces (see :class:`RuleForesees`)."""
    easing: RuleEasing | None = None

    @field_validator("numbers", mode="before")
    @classmethod
    def _numbers(cls, v: object) -> object:
        if isinstance(v, list):
            return [{"name": x} if isinstance(x, str) else x for x in v]
        return v

    @model_validator(mode="after")
    def _check(self) -> RuleConfig:
        if self.condition is None and not self.levels:
            raise ValueError("a rule needs a condition or levels")
        order = [PRIORITIES.index(level.priority) for level in self.levels]
        if order != sorted(order) or len(set(order)) != len(order):
            raise ValueError("levels go from the lowest priority to the highest, each once")
        if self.easing is not None and not self.levels:
            raise ValueError("easing is for rules with levels")
        return self


class RulePackConfig(Strict):
    """A rule pack file: a name, a description and its rules."""

    pack: str = Field(pattern=RULE_ID)
    description: str
    health: bool = False
    """A pack about the points and the other rules rather than the conditions (the built-in
    ``sensor_health``): its rules are evaluated after every other rule of the space, so
    they may read ``rules_unknown_long``, and are not counted there themselves."""
    rules: list[RuleConfig]

    @model_validator(mode="after")
    def _unique(self) -> RulePackConfig:
        ids = [r.id for r in self.rules]
        dup = {i for i in ids if ids.count(i) > 1}
        if dup:
            raise ValueError(f"rule ids appear twice: {', '.join(sorted(dup))}")
        return self

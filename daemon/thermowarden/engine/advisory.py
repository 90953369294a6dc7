"""An advisory: one occurrence of a rule's advice or alert for one space, as published.

The record the lifecycle steps (:mod:`thermowarden.engine.advisories`) and the payloads are
built from (:mod:`thermowarden.engine.publication`); times are epoch seconds.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from thermowarden.core.lifecycle import State


@dataclass
class Advisory:
    """One occurrence of an advisory for one space and rule."""

    id: str
    space: int
    rule: str
    audience: str
    priority: str
    state: State
    raised_at: float
    updated_at: float
    title: str = ""
    advice: str = ""
    rationale: str = ""
    numbers: dict[str, Any] = field(default_factory=dict)
    benefit: dict[str, Any] = field(default_factory=dict)
    cautions: list[str] = field(default_factory=list)
    cleared_at: float | None = None
    acknowledged: dict[str, Any] | None = None
    shelved: dict[str, Any] | None = None
    acted_on: dict[str, Any] | None = None
    chattering: bool = False
    history: list[dict[str, Any]] = field(default_factory=list)
    no_effect_text: str = ""
    """What to say if the advice is acted on and does not help (rendered with the rest)."""
    effect_overdue: bool = False
    """Acted on, not cleared in the expected time, and said so."""
    rendered_from: tuple[object, ...] | None = field(default=None, repr=False, compare=False)
    """What the texts were last rendered from (:meth:`Texts.render_key`)."""
    lowered: bool = False
    """Its last change of level was down (it is easing until it escalates again)."""
    numbers_at: float | None = None
    """When the texts and numbers were last rendered (epoch s): the last evaluation at an
    event, or at advice acted on, where the rule's condition was not known to be false.
    None: not known (a record from before)."""
    seq: int = 0
    """The order of its records: one more with every retained record (and its event)
    published, continued by a new holder from the record it takes over
    (:mod:`thermowarden.core.record_order`)."""

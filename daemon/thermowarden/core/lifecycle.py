"""The advisory lifecycle, per space and rule: one table, one file.

States::

    idle ──condition true──▶ pending ──on-delay elapsed──▶ active ──acknowledge──▶ acknowledged
      ▲                        │ (false or unknown)          │  ▲                     │
      └────────────────────────┘                             │  └──unshelve/expiry──┐ │
      ▲                                     shelve ◀─────────┴──────────────────────┴─┘
      └──────────── off-delay elapsed (cleared) ◀── active / acknowledged / shelved

``TABLE`` maps (state, trigger) to (next state, event published or None). Anything not in
the table is illegal: :func:`transition` raises :class:`IllegalTransition` and nothing
changes. ``NEXT`` is the same table as an array for vectorised use by the engine.
"""

from __future__ import annotations

from enum import IntEnum
from typing import Final

import numpy as np
import numpy.typing as npt


class State(IntEnum):
    """Lifecycle state of one (space, rule). ``idle`` means no advisory exists."""

    IDLE = 0
    PENDING = 1
    ACTIVE = 2
    ACKNOWLEDGED = 3
    SHELVED = 4


class Trigger(IntEnum):
    """What can happen to an advisory."""

    CONDITION_TRUE = 0
    CONDITION_FALSE = 1
    CONDITION_UNKNOWN = 2
    ON_DELAY_ELAPSED = 3
    OFF_DELAY_ELAPSED = 4
    ACKNOWLEDGE = 5
    SHELVE = 6
    UNSHELVE = 7
    SHELVE_EXPIRED = 8
    RENOTIFY_DUE = 9
    ESCALATE = 10
    DEESCALATE = 11
    EFFECT_OVERDUE = 12
    """The advice was acted on but the condition has not cleared in the expected time."""


EVENTS: Final = ("raised", "escalated", "deescalated", "renotified", "no_effect",
                 "acknowledged", "shelved", "unshelved", "cleared", "summary")
"""Every event name an audience can receive."""

S, T = State, Trigger
TABLE: Final[dict[tuple[State, Trigger], tuple[State, str | None]]] = {
    # condition evaluation while no advisory exists
    (S.IDLE, T.CONDITION_TRUE): (S.PENDING, None),
    (S.PENDING, T.CONDITION_TRUE): (S.PENDING, None),
    (S.PENDING, T.CONDITION_FALSE): (S.IDLE, None),
    (S.PENDING, T.CONDITION_UNKNOWN): (S.IDLE, None),  # unknown never raises
    (S.PENDING, T.ON_DELAY_ELAPSED): (S.ACTIVE, "raised"),
    # people acting on an advisory
    (S.ACTIVE, T.ACKNOWLEDGE): (S.ACKNOWLEDGED, "acknowledged"),
    (S.ACTIVE, T.SHELVE): (S.SHELVED, "shelved"),
    (S.ACKNOWLEDGED, T.SHELVE): (S.SHELVED, "shelved"),
    (S.SHELVED, T.SHELVE): (S.SHELVED, "shelved"),  # extend or shorten a shelving
    (S.SHELVED, T.UNSHELVE): (S.ACTIVE, "unshelved"),
    (S.SHELVED, T.SHELVE_EXPIRED): (S.ACTIVE, "unshelved"),
    # while it lasts
    (S.ACTIVE, T.RENOTIFY_DUE): (S.ACTIVE, "renotified"),
    # an acknowledged urgent advisory is reminded of (the hazard persists); still acknowledged
    (S.ACKNOWLEDGED, T.RENOTIFY_DUE): (S.ACKNOWLEDGED, "renotified"),
    (S.ACTIVE, T.ESCALATE): (S.ACTIVE, "escalated"),
    (S.ACKNOWLEDGED, T.ESCALATE): (S.ACTIVE, "escalated"),  # a worse level needs a new ack
    (S.SHELVED, T.ESCALATE): (S.ACTIVE, "escalated"),  # a worse level ends the shelving
    (S.ACTIVE, T.EFFECT_OVERDUE): (S.ACTIVE, "no_effect"),
    (S.ACKNOWLEDGED, T.EFFECT_OVERDUE): (S.ACKNOWLEDGED, "no_effect"),
    (S.ACTIVE, T.DEESCALATE): (S.ACTIVE, "deescalated"),
    (S.ACKNOWLEDGED, T.DEESCALATE): (S.ACKNOWLEDGED, "deescalated"),
    (S.SHELVED, T.DEESCALATE): (S.SHELVED, "deescalated"),
    # the end
    (S.ACTIVE, T.OFF_DELAY_ELAPSED): (S.IDLE, "cleared"),
    (S.ACKNOWLEDGED, T.OFF_DELAY_ELAPSED): (S.IDLE, "cleared"),
    (S.SHELVED, T.OFF_DELAY_ELAPSED): (S.IDLE, "cleared"),
}

LIVE: Final = frozenset({S.ACTIVE, S.ACKNOWLEDGED, S.SHELVED})
"""States in which an advisory exists and is published."""


class IllegalTransition(ValueError):
    """A trigger that the table does not allow in the current state."""

    def __init__(self, state: State, trigger: Trigger) -> None:
        super().__init__(f"cannot {trigger.name.lower().replace('_', ' ')} an advisory that is "
                         f"{state.name.lower()}")
        self.state = state
        self.trigger = trigger


def transition(state: State, trigger: Trigger) -> tuple[State, str | None]:
    """The next state and the event to publish; raises :class:`IllegalTransition`."""
    try:
        return TABLE[(state, trigger)]
    except KeyError:
        raise IllegalTransition(state, trigger) from None


def _next_array() -> npt.NDArray[np.int8]:
    nxt = np.full((len(State), len(Trigger)), -1, dtype=np.int8)
    for (s, t), (n, _) in TABLE.items():
        nxt[s, t] = n
    return nxt


NEXT: Final = _next_array()
"""NEXT[state, trigger] -> next state, or -1 where the transition is illegal."""

"""The lifecycle table: every (state, trigger) pair, exhaustively."""

from __future__ import annotations

import itertools

import pytest

from thermowarden.core.lifecycle import (
    EVENTS,
    NEXT,
    TABLE,
    IllegalTransition,
    State,
    Trigger,
    transition,
)


@pytest.mark.parametrize("state,trigger", list(itertools.product(State, Trigger)))
def test_every_pair_is_in_the_table_or_illegal(state, trigger):
    if (state, trigger) in TABLE:
        new, event = transition(state, trigger)
        assert (new, event) == TABLE[(state, trigger)]
        assert NEXT[state, trigger] == new
        assert event is None or event in EVENTS
    else:
        with pytest.raises(IllegalTransition):
            transition(state, trigger)
        assert NEXT[state, trigger] == -1


def test_key_rules_of_the_table():
    # unknown never raises: a pending advisory falls back to idle
    assert transition(State.PENDING, Trigger.CONDITION_UNKNOWN) == (State.IDLE, None)
    # nothing can be acknowledged or shelved before it is raised
    for trig in (Trigger.ACKNOWLEDGE, Trigger.SHELVE, Trigger.UNSHELVE):
        with pytest.raises(IllegalTransition):
            transition(State.IDLE, trig)
    # acknowledging twice is refused
    with pytest.raises(IllegalTransition, match="acknowledge an advisory that is acknowledged"):
        transition(State.ACKNOWLEDGED, Trigger.ACKNOWLEDGE)
    # a worse level needs a new acknowledgement and ends a shelving
    assert transition(State.ACKNOWLEDGED, Trigger.ESCALATE) == (State.ACTIVE, "escalated")
    assert transition(State.SHELVED, Trigger.ESCALATE) == (State.ACTIVE, "escalated")
    # every live state can clear
    for s in (State.ACTIVE, State.ACKNOWLEDGED, State.SHELVED):
        assert transition(s, Trigger.OFF_DELAY_ELAPSED) == (State.IDLE, "cleared")


def test_every_event_but_summary_comes_from_the_table():
    produced = {e for _, e in TABLE.values() if e}
    assert produced == set(EVENTS) - {"summary"}

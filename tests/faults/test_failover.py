"""Failover of a group of three instances on a three-node nats-server cluster, by causing the
faults: the holder killed (SIGKILL), the holder frozen (SIGSTOP for twice the lease TTL, then
SIGCONT), the holder's broker node frozen for 30 s, the holder cut off in a network namespace
for 30 s, the holder's wall clock stepped, and the group scaled out and in. Each run raises
heat-stress alerts in spaces the victim holds, escalates them during the fault, acknowledges
one before and one during the fault and shelves one during it, and then checks every
invariant of :mod:`tests.faults.invariants` over what a watcher received.

The lease store is the JetStream key-value bucket on the same cluster, and for the kill,
the freeze and the partition also PostgreSQL (127.0.0.1:5432, database ``test``).
"""

from __future__ import annotations

import dataclasses
import time
from collections.abc import Callable
from dataclasses import dataclass

import pytest

from tests.faults.group_run import FaultRun
from tests.faults.harness import Timing, pause_node, resume_node, wait_until
from tests.shell.conftest import SLOW

pytestmark = [pytest.mark.broker, pytest.mark.faults]

TIMING = Timing(tick_s=1.0, keepalive_s=8.0, lease_ttl_s=15.0)
"""15 s: longer than a JetStream stream leader election after a node's end (README,
"Choosing the TTL")."""


@dataclass
class Fault:
    """``begin`` and ``end`` act on the run and the victim's name; ``hold_s`` is how long
    the fault lasts; the commands of the test go out ``commands_at_s`` into it (half-way
    when None)."""

    name: str
    begin: Callable[[FaultRun, str], None]
    end: Callable[[FaultRun, str], None]
    hold_s: float
    commands_at_s: float | None = None


def _nothing(run: FaultRun, victim: str) -> None:
    pass


def _node_of(run: FaultRun, victim: str) -> int:
    return run.names.index(victim) % len(run.cluster.nodes)


def _step(offset: str) -> Callable[[FaultRun, str], None]:
    def act(run: FaultRun, victim: str) -> None:
        run.wall_offset_file.write_text(offset + "\n")
    return act


KILL = Fault("kill", lambda r, v: r.instances[v].kill(), _nothing, 0.0)
PAUSE = Fault("pause", lambda r, v: r.instances[v].pause(), lambda r, v: r.instances[v].resume(),
              2 * TIMING.lease_ttl_s)
NODE_PAUSE = Fault("node-pause", lambda r, v: pause_node(r.cluster, _node_of(r, v)),
                   lambda r, v: resume_node(r.cluster, _node_of(r, v)), 30.0,
                   commands_at_s=2.0)
"""The commands go out 2 s after the holder's node stopped: before its MQTT client can
notice (it waits a keepalive, 8 s, for an answer to its ping), so they go to the stopped
node and must be kept for the holder until it has moved to another."""
PARTITION = Fault("partition", lambda r, v: r.ns.cut(), lambda r, v: r.ns.heal(), 30.0)
CLOCK_STEP = Fault("clock-step", _step("300"), _step("0"), 3 * TIMING.lease_ttl_s)


def hold(seconds: float) -> None:
    """The fault lasts this long (an input of the fault, not a wait for a result)."""
    end = time.monotonic() + seconds
    while time.monotonic() < end:
        time.sleep(min(0.2, max(0.0, end - time.monotonic())))


def run_fault(tmp_path, store: str | None, fault: Fault, *, victim: str = "b",
              n_spaces: int = 30, warm: bool = False, timing: Timing = TIMING) -> None:
    run = FaultRun(tmp_path, store=store, n_spaces=n_spaces, timing=timing,
                   netns_for=victim if fault is PARTITION else None,
                   clock_step_for=victim if fault is CLOCK_STEP else None)
    try:
        run.start()
        t_from = time.monotonic()
        hot = run.wait_holding(victim, 1)[:3]
        if len(hot) < 3:  # the victim holds few spaces: the other alerts are elsewhere
            # (the victim's own last: they escalate and take the commands during the fault)
            hot = [s for s in run.spaces if s not in hot and s in run.holders()][
                :3 - len(hot)] + hot
            run.scenario.notes.append(f"{victim} held {len(run.spaces_of(victim))} space(s)")
        ids = run.raise_heat(hot)
        if warm:
            run.warm_window(hot)
        run.command("acknowledge", ids[hot[0]], during_fault=False)
        run.scenario.fault_started = time.monotonic()
        run.scenario.fault_started_wall = time.time()
        fault.begin(run, victim)
        run.escalate(hot[1:])
        at = fault.hold_s / 2 if fault.commands_at_s is None else fault.commands_at_s
        hold(at)
        run.command("acknowledge", ids[hot[1]], during_fault=True)
        run.command("shelve", ids[hot[2]], during_fault=True)
        hold(fault.hold_s - at)
        fault.end(run, victim)
        run.scenario.fault_ended = time.monotonic()
        t_urgent = wait_until(lambda: all((run.heat_record(s) or {}).get("priority") ==
                                          "urgent" for s in hot[1:]),
                              6 * SLOW if warm else 3 * SLOW)
        firsts = [run.first_urgent(s) for s in hot[1:]]
        if t_urgent is not None and None not in firsts:
            run.scenario.notes.append(
                f"urgent {max(firsts) - run.scenario.fault_started:.1f} s after the fault "
                f"began (it lasted {fault.hold_s:g} s)")
        rep = run.settle_and_check(t_from)
        print(f"\n{fault.name} ({store or 'main group'}): {rep.summary()}")
        assert t_urgent is not None, "the alerts never became urgent after the fault"
        assert not rep.failed(), rep.summary()
        if warm:  # the window check had whole windows to keep
            assert rep.figures["twa_present_before"] >= len(hot), rep.summary()
    finally:
        run.close()


# ------------------------------------------------------------------ quick (default suite)
def test_holder_killed_nats(tmp_path):
    run_fault(tmp_path, "nats", KILL)


def test_holder_killed_postgres(tmp_path):
    run_fault(tmp_path, "postgres", KILL)


def scale_out_and_in(tmp_path, warm: bool) -> None:
    """Two instances, a third joins (scale out), then the first stops in order (scale in).
    The group's rebalance time is short (20 s): what keeps a handed-over shard's window
    whole is the rule that a holder hands a shard over only to a standby that has stood by
    for it for the WBGT window and a TTL (core/shards.py, ``warm_s``).

    Quick (``warm`` false): the first instance stops soon after the newcomer joined, so the
    shards it held go to standbys that have stood by for less than the window; the run is
    shorter than the window, so no window is whole and the window check is left out (the
    slow variant makes it). Slow: the newcomer joins, the hot spaces' windows fill (about
    ten minutes), the newcomer takes its share once it has stood by for the window, then
    the first instance stops; every window must be whole after every takeover."""
    run = FaultRun(tmp_path, store="nats", timing=dataclasses.replace(
        TIMING, rebalance_after_s=20.0))
    warm_s = run.timing.wbgt_window_s + run.timing.lease_ttl_s
    try:
        run.start(first=("a", "b"))
        t_from = time.monotonic()
        hot = run.wait_holding("a", 3)[:3]
        ids = run.raise_heat(hot)
        if warm:
            # scale out: c joins and stands by while the windows fill
            run.add_instance("c")
            run.wait_ready(["c"])
            joined = time.monotonic()
            run.warm_window(hot)
        run.command("acknowledge", ids[hot[0]], during_fault=False)
        run.scenario.fault_started = time.monotonic()
        run.scenario.fault_started_wall = time.time()
        if warm:
            # c takes its share only once it has stood by for the window (not after the
            # 20 s the rebalance time alone would allow)
            run.wait_holding("c", 1, timeout=warm_s + 3 * SLOW)
            took = time.monotonic() - joined
            run.scenario.notes.append(f"c took its first shard {took:.0f} s after it "
                                      f"joined (warm after {warm_s:g} s)")
            assert took >= run.timing.wbgt_window_s - run.timing.lease_ttl_s, \
                f"c took a shard {took:.0f} s after joining, before its window was whole"
        else:
            run.add_instance("c")
            run.wait_ready(["c"])
        run.escalate(hot[1:])
        run.command("acknowledge", ids[hot[1]], during_fault=True)
        # scale in: a stops in order, its shards go to their standbys
        run.instances["a"].stop()
        run.command("shelve", ids[hot[2]], during_fault=True)
        run.scenario.fault_ended = time.monotonic()
        # with a whole window the time-weighted WBGT crosses the limit only after minutes
        run.wait_urgent(hot[1:], 6 * SLOW if warm else 3 * SLOW)
        assert not run.spaces_of("a")
        if not warm:
            run.wait_holding("c", 1)
            run.scenario.whole_exempt |= set(run.spaces)
        rep = run.settle_and_check(t_from)
        print(f"\nscale out and in ({'whole window' if warm else 'quick'}): "
              f"{rep.summary()}")
        assert not rep.failed(), rep.summary()
        if warm:  # the window check had whole windows to keep
            assert rep.figures["twa_present_before"] >= len(hot), rep.summary()
    finally:
        run.close()


def test_scale_out_and_in(tmp_path):
    scale_out_and_in(tmp_path, warm=False)


# ------------------------------------------------------------------ slow (-m slow)
@pytest.mark.slow
@pytest.mark.parametrize("store", ["nats", "postgres"])
def test_holder_paused(tmp_path, store):
    run_fault(tmp_path, store, PAUSE, warm=store == "nats")


@pytest.mark.slow
def test_holder_broker_node_paused(tmp_path):
    run_fault(tmp_path, "nats", NODE_PAUSE, warm=True)


@pytest.mark.slow
@pytest.mark.parametrize("store", ["nats", "postgres"])
def test_holder_partitioned(tmp_path, store):
    run_fault(tmp_path, store, PARTITION, victim="c")


@pytest.mark.slow
def test_holder_clock_stepped(tmp_path):
    run_fault(tmp_path, "nats", CLOCK_STEP)


@pytest.mark.slow
def test_scale_out_and_in_whole_window(tmp_path):
    """The newcomer takes its share only once it has stood by for the window, and every
    window is whole after every takeover."""
    scale_out_and_in(tmp_path, warm=True)


@pytest.mark.slow
def test_holder_killed_whole_window(tmp_path):
    run_fault(tmp_path, "nats", KILL, warm=True)

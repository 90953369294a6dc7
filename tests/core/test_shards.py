"""Shards and the assignment rule (pure): stable shard names, the fair share, standbys that
take first, damping of hand-overs, nothing for an instance that cannot reach the store.
The simulation drives several instances through one shared table of leases, as a store
would (a take succeeds only on a free shard), round by round."""

from __future__ import annotations

import math
import random

from hypothesis import given, settings
from hypothesis import strategies as st

from thermowarden.core.shards import (
    Plan,
    View,
    bucket_name,
    first_standbys,
    plan,
    ranking,
    shard_of,
    share,
    standbys,
)

SHARDS = [f"bucket-{k:02d}" for k in range(16)]


def test_shard_names_are_stable_and_declared_first() -> None:
    # fixed values: a change of the hash would move every undeclared space of every site
    assert bucket_name("hall-1", 16) == bucket_name("hall-1", 16)
    assert {bucket_name(f"s{k}", 16) for k in range(2000)} == set(SHARDS)
    assert bucket_name("s1", 100).startswith("bucket-") and len(bucket_name("s1", 100)) == 9
    assert shard_of("s1", "furnace-bay", "works-a", 16) == "furnace-bay"
    assert shard_of("s1", None, "works-a", 16) == "works-a"
    assert shard_of("s1", None, None, 16) == bucket_name("s1", 16)


def test_standbys_leave_out_the_holder() -> None:
    live = ["a", "b", "c", "d"]
    order = ranking("bucket-03", live)
    assert sorted(order) == live
    assert standbys("bucket-03", order[0], live, 1) == [order[1]]
    assert standbys("bucket-03", order[1], live, 2) == [order[0], order[2]]
    assert share(16, 3) == 6 and share(16, 0) == 0


def test_cut_off_from_the_store_takes_nothing_and_lets_go() -> None:
    v = View("a", frozenset({"b"}), SHARDS, {"bucket-00": "a"}, now=100.0)
    p = plan(v, replicas=1, grace_s=1.0, settle_s=3.0)
    assert p.take == () and p.standby == frozenset() and p.release == ("bucket-00",)


def test_alone_it_takes_its_share_only_of_what_it_sees() -> None:
    # it sees two live instances (the other's leases not yet taken): never more than half
    v = View("a", frozenset({"a", "b"}), SHARDS, {}, now=100.0,
             free_since={s: 0.0 for s in SHARDS})
    p = plan(v, replicas=1, grace_s=1.0, settle_s=3.0)
    assert len(p.take) == 8


class Store:
    """A lease table as the stores keep it: a take succeeds only on a free shard."""

    def __init__(self) -> None:
        self.holders: dict[str, str] = {}
        self.takers: list[tuple[str, str]] = []

    def take(self, shard: str, me: str) -> bool:
        if shard in self.holders:
            return False
        self.holders[shard] = me
        self.takers.append((shard, me))
        return True


class Sim:
    def __init__(self, names: list[str], replicas: int = 1, seed: int = 1,
                 settle_s: float = 3.0, shards: list[str] = SHARDS) -> None:
        self.settle_s = settle_s
        self.shards = shards
        self.store = Store()
        self.live = set(names)
        self.now = 0.0
        self.free_since: dict[str, dict[str, float]] = {n: {} for n in names}
        self.live_since = 0.0
        self.replicas = replicas
        self.rng = random.Random(seed)
        self.plans: dict[str, Plan] = {}
        self.last_holder: dict[str, dict[str, str]] = {n: {} for n in names}
        self.warm_s = 0.0
        self.first: dict[str, dict[str, str]] = {n: {} for n in names}
        self.standby_since: dict[str, dict[str, float]] = {n: {} for n in names}
        self.evaluating_since: dict[str, dict[str, float]] = {n: {} for n in names}
        self.slack_s = 0.0

    def round(self) -> None:
        self.now += 1.0
        order = sorted(self.live)
        self.rng.shuffle(order)  # instances act in any order within a round
        for me in order:
            seen = dict(self.store.holders)
            fs = self.free_since.setdefault(me, {})
            last = self.last_holder.setdefault(me, {})
            last.update(seen)
            for s in self.shards:
                if s in seen:
                    fs.pop(s, None)
                else:
                    fs.setdefault(s, self.now)
            first = first_standbys(self.shards, seen, last, self.live)
            since = self.standby_since.setdefault(me, {})
            mine = self.first.setdefault(me, {})
            for sh, m in first.items():
                if mine.get(sh) != m:
                    mine[sh] = m
                    since[sh] = self.now
            evaluating = self.evaluating_since.setdefault(me, {})
            p = plan(View(me, frozenset(self.live), self.shards, seen, self.now, dict(fs),
                          self.live_since, dict(last), dict(since), dict(evaluating)),
                     replicas=self.replicas, grace_s=1.0, settle_s=self.settle_s,
                     warm_s=self.warm_s, slack_s=self.slack_s)
            self.plans[me] = p
            for s in p.release:
                del self.store.holders[s]
            for s in p.take:
                self.store.take(s, me)
            for s in self.shards:
                if self.store.holders.get(s) == me or s in p.standby:
                    evaluating.setdefault(s, self.now)
                else:
                    evaluating.pop(s, None)

    def counts(self) -> dict[str, int]:
        out = {m: 0 for m in self.live}
        for h in self.store.holders.values():
            out[h] += 1
        return out

    def settled(self) -> bool:
        """Every shard held, nobody above its share, nothing to hand over."""
        c = self.counts()
        return (len(self.store.holders) == len(self.shards)
                and max(c.values()) <= share(len(self.shards), len(self.live))
                and all(not p.release for p in self.plans.values()))

    def run(self, rounds: int = 60) -> int:
        for k in range(rounds):
            self.round()
            if self.settled():
                return k + 1
        raise AssertionError(f"not settled: {self.counts()}")


def test_three_instances_settle_and_a_dead_one_goes_to_its_standbys() -> None:
    sim = Sim(["a", "b", "c"], settle_s=30.0)
    sim.run()
    assert max(sim.counts().values()) <= 6
    # every held shard has a standby that is not its holder, and everyone computes the same
    before = dict(sim.store.holders)
    sim.round()
    stand = {s: {m for m, p in sim.plans.items() if s in p.standby} for s in SHARDS}
    for s, h in before.items():
        assert len(stand[s]) == 1 and h not in stand[s]
    # "b" dies: its presence and leases expire together
    dead = [s for s, h in sim.store.holders.items() if h == "b"]
    sim.live.discard("b")
    sim.live_since = sim.now
    for s in dead:
        del sim.store.holders[s]
    sim.store.takers.clear()
    for _ in range(5):
        sim.round()
    # the warm standby took each (above its share if need be), and nothing else moved
    assert dict(sim.store.takers) == {s: next(iter(stand[s])) for s in dead}
    assert max(sim.counts().values()) <= 2 * share(16, 2)
    # once the live set has been steady for settle_s, shards above the share go, one a
    # round, each to its standby (which has stood by for it since the takeover)
    sim.store.takers.clear()
    sim.round()
    standing = {s: {m for m, p in sim.plans.items() if s in p.standby} for s in SHARDS}
    sim.run()
    assert max(sim.counts().values()) <= share(16, 2)
    for s, m in sim.store.takers:
        assert m in standing[s]


def test_a_newcomer_gets_its_share_one_shard_a_round_after_settling() -> None:
    sim = Sim(["a", "b"])
    sim.run()
    moves_before = len(sim.store.takers)
    sim.live.add("c")
    sim.live_since = sim.now
    rounds = sim.run()
    assert rounds >= 3  # nothing was handed over before the live set had settled
    moved = len(sim.store.takers) - moves_before
    assert moved == sim.counts()["c"] <= 6  # only what the newcomer took moved
    assert sim.counts()["c"] >= 4


def test_a_shard_is_handed_over_only_to_a_standby_that_stood_by_for_warm_s() -> None:
    """A newcomer with a short settle time and a long warm time: nothing moves until it has
    stood by for warm_s (its windows whole), and every shard moves to the instance that was
    its first standby all that time."""
    sim = Sim(["a", "b"], settle_s=2.0)
    sim.run()
    sim.warm_s = 20.0
    sim.live.add("c")
    sim.live_since = sim.now
    joined = sim.now
    sim.store.takers.clear()
    for _ in range(60):
        standby_before = first_standbys(SHARDS, sim.store.holders, {}, sim.live)
        moved = len(sim.store.takers)
        sim.round()
        for sh, taker in sim.store.takers[moved:]:
            assert sim.now - joined > sim.warm_s, "handed over before the standby was warm"
            assert taker == standby_before[sh]
    assert sim.store.takers and {m for _, m in sim.store.takers} == {"c"}
    assert sim.counts()["c"] >= 4


def test_instances_started_a_few_rounds_apart_share_at_once_without_waiting_warm_s() -> None:
    """The first of a group's instances takes every shard before the others are seen (they
    started a few rounds later); they stand by for its shards from then on, so their windows
    are as whole as its own: it hands them their share once the live set has settled,
    without waiting warm_s (the first instance would otherwise keep the whole site for it).
    A newcomer that comes later than the slack still waits warm_s."""
    sim = Sim(["a"], settle_s=3.0)
    sim.warm_s, sim.slack_s = 600.0, 5.0
    sim.run()
    assert sim.counts() == {"a": len(SHARDS)}
    sim.live |= {"b", "c"}
    sim.live_since = sim.now
    rounds = sim.run()
    assert rounds < 60 and max(sim.counts().values()) <= share(len(SHARDS), 3)
    for _, m in sim.store.takers[len(SHARDS):]:
        assert m in ("b", "c")
    # a fourth instance long after: nothing moves to it within warm_s
    for _ in range(20):
        sim.round()
    sim.live.add("d")
    sim.live_since = sim.now
    before = len(sim.store.takers)
    for _ in range(30):
        sim.round()
    assert len(sim.store.takers) == before, "handed over to a standby that was not warm"


@settings(max_examples=30, deadline=None)
@given(st.integers(1, 6), st.integers(0, 1000), st.integers(1, 2))
def test_every_shard_one_holder_never_above_share(n: int, seed: int, replicas: int) -> None:
    names = [f"i{k}" for k in range(n)]
    sim = Sim(names, replicas=replicas, seed=seed)
    for _ in range(40):
        sim.round()
        assert max(sim.counts().values(), default=0) <= math.ceil(len(SHARDS) / n)
    assert len(sim.store.holders) == len(SHARDS)
    # the standbys: ``replicas`` per shard (fewer only when there are not enough others)
    sim.round()
    for s in SHARDS:
        count = sum(1 for p in sim.plans.values() if s in p.standby)
        assert count == min(replicas, n - 1)


def test_a_newcomer_after_a_takeover_gets_its_share_without_ping_pong() -> None:
    """Six shards; a holder died and its standbys hold more than their share; a newcomer
    joins. Shards handed over go to an instance under its share (never back and forth
    between the two above it), and the newcomer ends with its share."""
    shards = [f"bucket-{k:02d}" for k in range(6)]
    for seed in range(20):
        sim = Sim(["a", "b", "c"], settle_s=30.0, shards=shards, seed=seed)
        sim.run()
        dead = [s for s, h in sim.store.holders.items() if h == "b"]
        sim.live.discard("b")
        sim.live_since = sim.now
        for s in dead:
            del sim.store.holders[s]
        for _ in range(5):
            sim.round()
        sim.live.add("d")
        sim.live_since = sim.now
        sim.settle_s = 2.0
        sim.store.takers.clear()
        sim.run()
        assert sim.counts()["d"] == 2, (seed, sim.counts())
        taken = [s for s, _ in sim.store.takers]
        assert len(taken) == len(set(taken)), (seed, sim.store.takers)  # no shard twice


def test_standbys_stay_put_while_a_dead_holders_lease_runs_out() -> None:
    """The lease of a dead holder has ended but its presence has not yet, and its standby is
    at its share (it cannot take the shard in this round): it must stay the standby (else it
    drops the shard's state and takes the shard back cold a moment later)."""
    live = frozenset({"a", "b", "c"})
    for k in range(16):
        shard = f"bucket-{k:02d}"
        holder = ranking(shard, live)[0]  # the dead holder ranks first: the worst case
        (standby,) = standbys(shard, holder, live, 1)
        other = "other-shard"
        shards = [shard, other, "third"]  # share: one each
        free = View(standby, live, shards, {other: standby, "third": holder}, 11.0,
                    {shard: 11.0}, last_holder={shard: holder})
        p = plan(free, replicas=1, grace_s=1.0, settle_s=3.0)
        assert shard not in p.take and shard in p.standby, (k, p)

"""Shards of a site and which instance of a group takes, keeps, gives up or stands by for
each. Pure: no clock (times are arguments, monotonic seconds), no store, no I/O.

**Shards.** A space belongs to the shard its site file declares (its ``area``, else its
``building``); a space that declares neither goes to one of a fixed number of hash buckets
(``bucket-00`` ...), chosen by a stable hash of its id (BLAKE2b, 8 bytes, modulo the number
of buckets), so every instance of every version computes the same shard for it.

**Who holds what** is decided by leases in a store (:mod:`thermowarden.shell.leases`); this
module only says what an instance should *try*, from what it last read there:

- its *share* is ``ceil(shards / live instances)``, the live instances being those whose
  presence in the store has not expired (itself included only when its own presence was
  written: an instance that cannot reach the store takes nothing, and its leases run out).
  It never takes a shard beyond its share, so an instance that sees fewer instances than
  there are does not take the site.
- a shard's *standbys* are the first ``replicas`` live instances other than its holder in
  the shard's rendezvous order (highest-random-weight hashing: Thaler and Ravishankar,
  "Using name-based mappings to increase hit rates", IEEE/ACM Trans. Networking 6(1),
  1998): every instance that reads the same holders and presence computes the same
  standbys, and a change of one instance moves only the shards it is in the order of.
- a free shard (no live lease) is taken at once by the standby of its last holder (the
  instance that has its windows, timers and acknowledgements): when that holder is gone,
  even if the standby then holds up to twice its share; when the holder lives (it handed
  the shard over), only if the standby is under its share. Otherwise the best-ranked live
  instance under its share takes it at once. Any other instance under its share takes it
  only after it has been free for ``grace_s`` (the first has had its turn).
- an instance holding more than its share (after a standby took a dead holder's shards,
  after a newcomer joined) gives up one shard per round, and only after the live set has
  been unchanged for ``settle_s`` and while some live instance holds less than its share
  (damping: no chain of hand-overs while instances come and go); it gives up only a shard
  whose first standby is under its share *and* is warm, the one whose standby holds the
  fewest, and that standby takes it. A standby is warm when it has stood by for the shard
  for ``warm_s`` (the longest window the rules use, the 60-minute WBGT, and a round: its
  windows are whole when it takes the shard), or when it has stood by for it since the
  holder itself began evaluating the shard, within ``slack_s`` (a round: its windows are
  then as whole as the holder's; this is what lets a group whose instances started a few
  seconds apart share the site at once, instead of the first one keeping every shard for
  ``warm_s``). How long a standby has stood by, each instance reads from its own rounds:
  the time since a shard's first standby (:func:`first_standbys`) last changed.

Rendezvous weights: BLAKE2b of ``shard`` and ``instance`` (8 bytes each), mixed with
SplitMix64's finaliser (Steele, Lea and Flood, "Fast splittable pseudorandom number
generators", OOPSLA 2014).
"""

from __future__ import annotations

import hashlib
import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Final

BUCKET_PREFIX: Final = "bucket-"
_MASK: Final = (1 << 64) - 1


def name_hash(name: str) -> int:
    """A stable 64-bit hash of ``name`` (BLAKE2b, 8 bytes, little-endian)."""
    return int.from_bytes(hashlib.blake2b(name.encode("utf-8"), digest_size=8).digest(),
                          "little")


def bucket_name(space_id: str, buckets: int) -> str:
    """The hash bucket of a space that declares no area or building."""
    width = max(2, len(str(buckets - 1)))
    return f"{BUCKET_PREFIX}{name_hash(space_id) % buckets:0{width}d}"


def shard_of(space_id: str, area: str | None, building: str | None, buckets: int) -> str:
    """The shard of one space: its area, else its building, else its hash bucket."""
    return area or building or bucket_name(space_id, buckets)


def weight(shard: str, instance: str) -> int:
    """The rendezvous weight of ``instance`` for ``shard`` (64-bit)."""
    z = name_hash(shard) ^ name_hash(instance)
    z = ((z ^ (z >> 30)) * 0xBF58476D1CE4E5B9) & _MASK
    z = ((z ^ (z >> 27)) * 0x94D049BB133111EB) & _MASK
    return z ^ (z >> 31)


def ranking(shard: str, instances: Iterable[str]) -> list[str]:
    """``instances`` in the shard's rendezvous order (ties by name)."""
    return sorted(set(instances), key=lambda m: (-weight(shard, m), m))


def standbys(shard: str, holder: str | None, live: Iterable[str], replicas: int) -> list[str]:
    """The shard's standbys: the first ``replicas`` live instances in its order, its holder
    left out (with no holder, the first in the order is the one to take it: it stands by)."""
    return [m for m in ranking(shard, live) if m != holder][:max(0, replicas)]


def first_standbys(shards: Iterable[str], holders: Mapping[str, str],
                   last_holder: Mapping[str, str], live: Iterable[str]) -> dict[str, str]:
    """Shard -> its first standby (a free shard: its last holder's), "" for none: what an
    instance follows over time to know how long each standby has stood by."""
    members = frozenset(live)
    out: dict[str, str] = {}
    for s in shards:
        first = standbys(s, holders.get(s, last_holder.get(s)), members, 1)
        out[s] = first[0] if first else ""
    return out


def share(n_shards: int, n_live: int) -> int:
    """The most shards one instance takes: ``ceil(shards / live instances)``."""
    return math.ceil(n_shards / n_live) if n_live > 0 else 0


@dataclass(frozen=True)
class View:
    """What one instance last read from the lease store, and when."""

    me: str
    live: frozenset[str]
    """Instances whose presence has not expired (``me`` only if its own was written)."""
    shards: Sequence[str]
    holders: Mapping[str, str]
    """Shard -> holder of its live lease (shards without one are free)."""
    now: float
    """Monotonic seconds."""
    free_since: Mapping[str, float] = field(default_factory=dict)
    """Shard -> when this instance first read it free (this episode)."""
    live_since: float = -math.inf
    """When the live set last changed, as this instance saw it."""
    last_holder: Mapping[str, str] = field(default_factory=dict)
    """Shard -> the holder this instance last read for it (for a free shard: whose
    standby takes it first)."""
    standby_since: Mapping[str, float] = field(default_factory=dict)
    """Shard -> since when (this instance's reading) its first standby has been the
    instance it is now (:func:`first_standbys`; missing: not known, not warm)."""
    evaluating_since: Mapping[str, float] = field(default_factory=dict)
    """Shard -> since when this instance has evaluated it (held or standing by) without a
    break: how old its own windows of the shard are."""


@dataclass(frozen=True)
class Plan:
    """What to try this round."""

    take: tuple[str, ...]
    """Free shards to take, in this order, while the store lets it."""
    release: tuple[str, ...]
    """Held shards to give up (at most one per round)."""
    standby: frozenset[str]
    """Shards this instance stands by for (ingests and evaluates without publishing)."""
    share: int


def plan(view: View, *, replicas: int, grace_s: float, settle_s: float,
         warm_s: float = 0.0, slack_s: float = 0.0) -> Plan:
    """See the module docstring. ``warm_s``: a held shard is handed over only to a first
    standby that has stood by at least this long (``View.standby_since``), or since at
    most ``slack_s`` after this instance began evaluating it (``View.evaluating_since``)."""
    me = view.me
    if me not in view.live:
        return Plan((), tuple(s for s in view.shards if view.holders.get(s) == me),
                    frozenset(), 0)
    limit = share(len(view.shards), len(view.live))
    counts: dict[str, int] = {m: 0 for m in view.live}
    for s in view.shards:
        h = view.holders.get(s)
        if h is not None:
            counts[h] = counts.get(h, 0) + 1
    mine = [s for s in view.shards if view.holders.get(s) == me]
    # a free shard keeps the standbys of its last holder until it is taken: they must not
    # change (and drop their state) in the moment between the lease's end and the take
    order = {s: standbys(s, view.holders.get(s, view.last_holder.get(s)), view.live,
                         max(1, replicas)) for s in view.shards}
    standing = frozenset(s for s in view.shards
                         if view.holders.get(s) != me and me in order[s][:max(0, replicas)])
    take: list[str] = []
    free = [s for s in view.shards if s not in view.holders]
    now_first: list[tuple[str, int]] = []
    later: list[str] = []
    for s in free:
        prev = view.last_holder.get(s)
        warm = standbys(s, prev, view.live, 1)[:1] if prev is not None else []
        # the standby of a holder that is gone may go up to twice its share; a shard handed
        # over (its holder lives) goes to an instance under its share
        cap = 2 * limit if prev is not None and prev not in view.live else limit
        if warm and counts.get(warm[0], 0) < cap:
            taker = warm[0]  # the holder's standby, which has its windows and timers
        else:
            below = [m for m in ranking(s, view.live) if counts.get(m, 0) < limit]
            taker, cap = (below[0] if below else ""), limit
        if taker == me:
            now_first.append((s, cap))
        elif view.now - view.free_since.get(s, view.now) >= grace_s:
            later.append(s)
    held = len(mine)
    for s, cap in now_first:
        if held < cap:
            take.append(s)
            held += 1
    for s in sorted(later, key=lambda s: (ranking(s, view.live).index(me), s)):
        if held < limit:
            take.append(s)
            held += 1
    release: tuple[str, ...] = ()
    if len(mine) > limit and view.now - view.live_since >= settle_s:
        under = {m for m in view.live if m != me and counts.get(m, 0) < limit}
        # only to a first standby under its share that is warm (its windows are whole, or
        # as whole as this instance's own), the one holding fewest
        ready = [s for s in mine if order[s] and order[s][0] in under
                 and _warm(view, s, warm_s, slack_s)]
        if ready:
            release = (min(ready, key=lambda s: (counts.get(order[s][0], 0), s)),)
    return Plan(tuple(take), release, standing, limit)


def _warm(view: View, shard: str, warm_s: float, slack_s: float) -> bool:
    """Whether the first standby of ``shard`` (held by ``view.me``) may be handed it: it has
    stood by for ``warm_s``, or since ``view.me`` began evaluating the shard (within
    ``slack_s``), so that its windows are as whole as the holder's."""
    if warm_s <= 0:
        return True
    since = view.standby_since.get(shard)
    if since is None:
        return False
    if view.now - since >= warm_s:
        return True
    mine = view.evaluating_since.get(shard)
    return mine is not None and since - mine <= slack_s

"""One instance of a group that shares a site (``thermowarden run --group NAME``): shard
leases, fenced publication and warm standbys.

The modules: :mod:`.state` (what one instance knows), :mod:`.scope` (the spaces its engine
evaluates), :mod:`.fencing` (what it may publish now), :mod:`.takeover` (the retained
advisories and kept commands it takes a shard over with), :mod:`.status` (its status
record, the coverage metrics and notice) and :mod:`.instance` (:class:`Group`, the steps
of the engine loop that tie them together).

The site's spaces fall into shards (:mod:`thermowarden.core.shards`). Each shard has a lease
in a store with compare-and-set and expiry (:mod:`thermowarden.shell.leases`: a JetStream
key-value bucket or a PostgreSQL table). Two threads:

- the **lease keeper** (:mod:`thermowarden.shell.lease_keeper`: a thread of its own,
  blocking store calls) runs a round every sixth of the lease TTL: it says this instance is
  present, renews the leases it holds (every other round: a third of the TTL), reads every
  shard's holder and the live instances, and takes or gives up shards as
  :func:`thermowarden.core.shards.plan` says. It hands each round's result to the engine
  thread (a queue) and touches nothing else.
- the **engine thread** (:meth:`Group.update`, every turn of the service's loop) evaluates
  the spaces of the shards it holds *and* of those it stands by for, and only those (its
  engine is rebuilt for them when they change, carrying the state over as a reload does;
  their sensors and the commands reach it, so windows, delays and timers are current),
  and publishes only for
  the shards whose lease is valid by its own clock: ``expires - margin`` on the monotonic
  clock, the expiry counted from before the request that took or renewed the lease. After
  a stall of its loop longer than the margin (a frozen process, a swapped-out host) it
  publishes nothing until a round that began after the stall has read the leases again.

**Fencing.** Every event, retained advisory and conditions record carries its shard and the
epoch it was published under (and the event id names both), and an advisory's records and
events a sequence number (:mod:`thermowarden.core.record_order`); :meth:`Group.fence` drops, at
the one place effects are carried out, anything of a shard this instance may not publish
for now, and an outbox row of an epoch it no longer holds is dropped instead of sent. A
retained advisory message is taken by the consumer rule of that module: one of an older epoch
than seen for its shard, or whose (epoch, seq) is not above the newest taken for its
advisory, is ignored.

**Taking over.** When a shard's lease becomes this instance's, its advisories are
reconciled with the retained advisory messages of the shard (:meth:`Engine.reconcile`:
published ids, history, acknowledgements, shelving win, but an acknowledgement or shelving
this instance applied that the message lacks is kept), the kept commands for the shard that
the advisory taken over lacks are applied, and it publishes under the new epoch. Every
instance keeps every command of the site for ``COMMANDS_KEPT_S`` (:meth:`route`), whatever
its shard: it may stand by for or take the shard a moment after the command arrived. Only
an instance whose lease for the advisory's shard is valid at that moment answers a command
(:meth:`may_publish`; for an advisory no one has, the first live instance in name order
replies), and the reply carries the shard and epoch, so that one the MQTT client would send
again after a reconnect is dropped like a record (:meth:`allows_bytes`).

People see: a retained status per instance (``<prefix>/status/<instance>``: the shards it
holds and stands by for), metrics (spaces held, live instances, seconds since every shard
had a holder, moves, fenced effects) and a notice to the integrator when a shard had no
holder for longer than twice the lease TTL (from the first instance in name order of those
that hold a shard).
"""

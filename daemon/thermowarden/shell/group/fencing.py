"""Fencing of a group instance's publication (:mod:`thermowarden.shell.group`): at the one
place effects are carried out, and before an outbox row or a message the MQTT client holds
is sent, whatever is of a shard this instance may not publish for now is dropped."""

from __future__ import annotations

from typing import Any

from thermowarden.effects import Effect, Publish
from thermowarden.shell.group.state import GroupState, json_or_none


class Fencing(GroupState):
    """Whether a record of a shard and epoch may go out now."""

    def may_publish(self, shard: object, epoch: object) -> bool:
        """Whether this instance may publish a record of ``shard`` under ``epoch`` now."""
        if not isinstance(shard, str) or self.publishing.get(shard) != epoch:
            return False
        assert self.round is not None
        lease = self.round.held.get(shard)
        return lease is not None and self.clock() < lease.expires_mono - self.margin_s \
            and self.round.started >= self.publish_after

    def fence(self, effects: list[Effect]) -> list[Effect]:
        """The effects this instance may carry out now: those of the shards it publishes
        for under their current epoch (records and events of the others are dropped, and
        counted); removals from its own store and site-wide records pass."""
        assert self.service is not None
        kept: list[Effect] = []
        dropped = 0
        for e in effects:
            shard, epoch = self._fence_of(e)
            if shard is None or self.may_publish(shard, epoch):
                kept.append(e)
            else:
                dropped += 1
        if dropped:
            self.service.metrics.group_fenced.inc(dropped)
        return kept

    def _fence_of(self, e: Effect) -> tuple[str | None, object]:
        """The shard and epoch an effect belongs to; (None, None) for one that is not of a
        shard (site-wide events, samples, a store row removed)."""
        assert self.service is not None
        pub = self.service.engine.publication
        if isinstance(e, Publish):
            p = e.payload
            if p is not None and "shard" in p:
                return p["shard"], p.get("epoch")
            if p is None and "/advisories/" in e.topic:  # a cleared advisory
                space = e.topic[len(self.advisory_prefix):].split("/", 1)[0]
                shard = self.shard_by_space.get(space)
                return (shard, pub.epochs.get(shard, 0)) if shard is not None else ("?", -1)
            return None, None
        if e.kind in ("advisory", "event") and e.record is not None:
            rec = e.record.get("payload", e.record)
            if isinstance(rec, dict) and "shard" in rec:
                return rec["shard"], rec.get("epoch")
        return None, None

    def allows(self, payload: dict[str, Any]) -> bool:
        """Whether an outbox row may still be sent: an event of a shard's epoch this
        instance publishes under now (or not of a shard)."""
        if "shard" not in payload:
            return True
        return self.may_publish(payload["shard"], payload.get("epoch"))

    def allows_bytes(self, payload: bytes) -> bool:
        """:meth:`allows` for a message the MQTT client holds (called on its network
        thread before a reconnect; reads only values the engine thread replaces whole)."""
        if b'"shard"' not in payload:
            return True
        data = json_or_none(payload)
        if not isinstance(data, dict):
            return True
        try:
            return self.allows(data)
        except AssertionError:
            return False

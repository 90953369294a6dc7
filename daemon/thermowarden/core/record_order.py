"""The order of the records published about one advisory, and the rule a consumer applies
to keep only the newest. Pure: no clock, no I/O.

Every retained advisory record and every event about an advisory carries the shard's lease
``epoch`` and a ``seq``: a number that grows by one with every record published for that
advisory (the event of a change carries its record's number). A new holder of the shard
continues the advisory's ``seq`` from the record it took over, and publishes under a higher
epoch. The **order key** is ``(epoch, seq)``, compared as a pair: a later epoch wins
whatever its ``seq``; within one epoch (one publisher) the higher ``seq`` is the newer.

**The consumer rule.** Keep, per advisory id, the highest order key taken, and drop a record
or event whose key is not higher: a copy delivered again (QoS 1 is at least once), a record
held up on a broker node that froze and delivered late, or one from a holder replaced since.
The record and the event of one change carry the same key, so a consumer reading both
applies the change once (it still tells people of each event id once). An emptied retained
topic means the advisory cleared; its ``cleared`` event carries the last key, so a record
of it delivered late is dropped like any other. Keep also the
highest epoch taken per shard, from any record (conditions records carry shard and epoch but
no ``seq``), and drop a record of an older epoch: it comes from a holder fenced since.
:class:`NewestSeen` does both.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Final

OrderKey = tuple[int, int]
"""``(epoch, seq)`` of one record."""

UNSEEN: Final[OrderKey] = (-1, -1)


def _whole(value: object) -> int | None:
    return value if isinstance(value, int) and not isinstance(value, bool) else None


def _advisory(record: Mapping[str, object]) -> Mapping[str, object]:
    """The advisory an event is about, or the record itself."""
    inner = record.get("advisory")
    return inner if isinstance(inner, Mapping) else record


def order_key(record: Mapping[str, object]) -> OrderKey | None:
    """The ``(epoch, seq)`` of an advisory record or of an event (its advisory's); None
    when either is missing or not a whole number (a conditions record, or a record from
    before sequence numbers: no order can be read from it)."""
    adv = _advisory(record)
    epoch, seq = _whole(adv.get("epoch")), _whole(adv.get("seq"))
    if epoch is None or seq is None:
        return None
    return epoch, seq


def shard_epoch(record: Mapping[str, object]) -> tuple[str, int] | None:
    """The shard and epoch of any record or event (None: it carries none)."""
    shard, epoch = record.get("shard"), _whole(record.get("epoch"))
    if not isinstance(shard, str) or epoch is None:
        adv = _advisory(record)
        shard, epoch = adv.get("shard"), _whole(adv.get("epoch"))
    if not isinstance(shard, str) or epoch is None:
        return None
    return shard, epoch


@dataclass
class NewestSeen:
    """The consumer rule (module docstring) over a stream of records and events.

    :meth:`accept` says whether a record is to be taken, and remembers it when it is."""

    by_advisory: dict[str, OrderKey] = field(default_factory=dict)
    """Advisory id -> the highest order key taken."""
    epoch_by_shard: dict[str, int] = field(default_factory=dict)
    """Shard -> the highest epoch taken (from any record or event)."""
    dropped: int = 0

    def accept(self, record: Mapping[str, object]) -> bool:
        """False (and counted) for a record to drop: of an older epoch than one taken for
        its shard, or an advisory record or event whose order key is not higher than the
        highest taken for its advisory id. True (and remembered) otherwise; a record that
        carries no shard and epoch is taken (nothing to compare it with)."""
        se = shard_epoch(record)
        if se is None:
            return True
        shard, epoch = se
        if epoch < self.epoch_by_shard.get(shard, -1):
            self.dropped += 1
            return False
        key = order_key(record)
        aid = _advisory(record).get("id")
        if key is not None and isinstance(aid, str):
            if key <= self.by_advisory.get(aid, UNSEEN):
                self.dropped += 1
                return False
            self.by_advisory[aid] = key
        self.epoch_by_shard[shard] = max(epoch, self.epoch_by_shard.get(shard, -1))
        return True

    def is_copy(self, record: Mapping[str, object]) -> bool:
        """Whether ``record`` carries exactly the key taken last for its advisory (a copy
        delivered again, or the record of an event already taken)."""
        aid = _advisory(record).get("id")
        key = order_key(record)
        return key is not None and isinstance(aid, str) and self.by_advisory.get(aid) == key

"""What one instance of a group knows (:mod:`thermowarden.shell.group`): its leases'
latest round, the shards it publishes and stands by for, the retained advisory messages
and kept commands of the site, its status; and small helpers of the group's modules."""

from __future__ import annotations

import datetime as dt
import json
import math
import queue
from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from thermowarden.config import GroupConfig, SiteConfig
from thermowarden.core.record_order import NewestSeen
from thermowarden.shell.lease_keeper import LeaseKeeper, Round, lease_clock
from thermowarden.shell.leases import LeaseStore

if TYPE_CHECKING:
    from thermowarden.shell.engine_host import EngineHost
    from thermowarden.shell.inbox import Incoming


@dataclass
class Buffered:
    """A command of the site, kept in case this instance takes its shard over."""

    message: Incoming
    at: float
    advisory_id: str
    shard: str | None
    """The advisory's shard when it arrived (None: no advisory of that id was known)."""


class GroupState:
    """The state of one group instance, shared by the steps in the group's modules (all on
    the service's engine thread but :attr:`rounds`, which the lease keeper fills)."""

    def __init__(self, name: str, instance: str, cfg: GroupConfig, store: LeaseStore,
                 prefix: str, clock: Callable[[], float] = lease_clock) -> None:
        self.name = name
        self.me = instance
        self.cfg = cfg
        self.store = store
        self.prefix = prefix
        self.clock = clock
        self.margin_s = cfg.margin
        self.bound_s = 2 * cfg.lease_ttl_s
        self.advisory_prefix = f"{prefix}/spaces/"
        self.rounds: queue.Queue[Round] = queue.Queue()
        self.round: Round | None = None
        self.keeper: LeaseKeeper | None = None
        self.service: EngineHost | None = None
        self.publishing: dict[str, int] = {}
        """Shard -> epoch, for the shards this instance may publish for now."""
        self.paused: dict[str, tuple[int, float]] = {}
        """Shard -> (epoch, wall time of the last tick before) when this instance last
        stopped publishing for it."""
        self.evaluating: frozenset[str] = frozenset()
        self.holding = np.zeros(0, dtype=bool)
        """Spaces of the shards this instance publishes for."""
        self.publish_after = -math.inf
        self.last_turn: float | None = None
        self.records: dict[str, dict[str, Any]] = {}
        """Retained advisory messages of the site (topic -> payload), newest epoch only."""
        self.seen = NewestSeen()
        """The consumer rule over the retained advisory messages (epoch per shard, order
        key per advisory)."""
        self.ignored = 0
        """Retained advisory messages not taken: not JSON, or of an older epoch."""
        self.commands: list[Buffered] = []
        self.uncovered_since: float | None = None
        self.gap_told = False
        self.status: dict[str, Any] = {}
        self.last_evaluated: float | None = None
        self.full: SiteConfig
        self.shard_by_space: dict[str, str] = {}
        self._shards: list[str] = []


def json_or_none(payload: bytes) -> object:
    """The JSON in a message from the broker, or None: anyone who may publish on the
    site's topics can send anything, and nothing they send may stop the service."""
    try:
        return json.loads(payload)
    except (ValueError, RecursionError):
        return None


def is_int(value: object) -> bool:
    return isinstance(value, int) and not isinstance(value, bool)


def iso(t: float) -> str:
    """An ISO 8601 UTC time of day to the second (``...Z``) for ``t`` (Unix seconds)."""
    return dt.datetime.fromtimestamp(t, dt.UTC).isoformat(timespec="seconds").replace(
        "+00:00", "Z")

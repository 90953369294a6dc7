"""What people see of a group instance (:mod:`thermowarden.shell.group`): its retained
status record (the shards it holds and stands by for), the coverage metrics, and the
integrator's notice when a shard had no holder for longer than twice the lease TTL."""

from __future__ import annotations

import logging
from typing import Any

from thermowarden.effects import Persist, Publish
from thermowarden.shell.group.scope import ShardScope
from thermowarden.shell.group.state import iso
from thermowarden.shell.lease_keeper import Round

log = logging.getLogger("thermowarden.group")


class GroupStatus(ShardScope):
    """The status record, the coverage metrics and the notice of a gap."""

    def connected(self) -> None:
        """A (re)connect: the status record says what this instance holds."""
        self._send_status()

    def _send_status(self) -> None:
        service = self.service
        if service is None:
            return
        link = service.link
        status = {"group": self.name, "shards": sorted(self.publishing),
                  "epochs": dict(sorted(self.publishing.items())),
                  "standby": sorted(self.evaluating - set(self.publishing)),
                  "owned_spaces": int(self.holding.sum())}
        link.status_online.update(status)
        if status != self.status and link.connected.is_set():
            link.publish(link.status_topic, dict(link.status_online), 1, True)
        self.status = status

    def _coverage(self, r: Round, mono: float) -> None:
        """Metrics and the integrator's notice when a shard has had no holder too long."""
        service = self.service
        assert service is not None
        service.metrics.group_members.set(len(r.live))
        free = [s for s in self.shards if s not in r.holders]
        if free and r.ok:
            if self.uncovered_since is None:
                self.uncovered_since = mono
            waited = mono - self.uncovered_since
        elif not free:
            self.uncovered_since = None
            self.gap_told = False
            waited = 0.0
        else:
            waited = mono - self.uncovered_since if self.uncovered_since is not None else 0.0
        service.metrics.group_uncovered.set(waited)
        # told by one instance: the first in name order of those that hold a shard (one
        # that holds none may be the very reason a shard has no holder)
        working = sorted(set(r.holders.values()) & r.live) or sorted(r.live)
        first = not working or working[0] == self.me
        if waited > self.bound_s and not self.gap_told and first and r.ok:
            self.gap_told = True
            spaces = [sid for sid, s in self.shard_by_space.items() if s in free]
            self._notice("spaces_unowned", service.clock.now(), {
                "count": len(spaces), "spaces": spaces[:100], "shards": free[:100],
                "text": f"{len(free)} shard(s) ({len(spaces)} space(s)) of group {self.name} "
                        f"had no holder for more than {self.bound_s:.0f} s: nobody "
                        "evaluated them"})

    def _notice(self, kind: str, now: float, fields: dict[str, Any]) -> None:
        assert self.service is not None
        log.error("%s", fields["text"])
        notice = {"schema": "thermowarden.event/1", "event": "notice", "at": iso(now),
                  "audience": "integrator", "kind": kind, "group": self.name,
                  "bound_s": self.bound_s, **fields}
        self.service.execute([
            Publish(f"{self.prefix}/events/integrator/_site", notice, qos=1),
            Persist("event", f"notice.{kind}.{int(now)}", notice)])

"""What a group instance takes a shard over with (:mod:`thermowarden.shell.group`): the
site's retained advisory messages (newest epoch only, by the consumer rule of
:mod:`thermowarden.core.record_order`) and every command of the site, kept for
``COMMANDS_KEPT_S``, applied at a takeover when the advisory taken over lacks its effect;
and which instance answers a command."""

from __future__ import annotations

import logging
from typing import TYPE_CHECKING, Any

from thermowarden.shell.group.fencing import Fencing
from thermowarden.shell.group.state import Buffered, is_int, iso, json_or_none

if TYPE_CHECKING:
    from thermowarden.shell.inbox import Incoming

log = logging.getLogger("thermowarden.group")

COMMANDS_KEPT_S = 600.0
"""Every instance keeps every command of the site this long, whichever shard it is for
(applied at a takeover if the old holder had not: a standby may have joined the shard, or
an instance taken it, just after the command arrived)."""


class Takeover(Fencing):
    """The retained advisories and kept commands of the site; the routing of commands."""

    def receive(self, topic: str, payload: bytes) -> None:
        """A retained advisory message of the site."""
        if "/advisories/" not in topic:
            return
        if not payload:
            self.records.pop(topic, None)
            return
        data = json_or_none(payload)
        if not isinstance(data, dict) or not isinstance(data.get("shard"), str) \
                or not is_int(data.get("epoch")):
            self.ignored += 1
            return
        if not self.seen.accept(data):
            if not self.seen.is_copy(data):
                self.ignored += 1  # older than one taken: late, or from a holder fenced since
            return
        self.records[topic] = data

    def route(self, m: Incoming, advisory_id: object, keep: bool = True) -> str:
        """What to do with a command: "answer" (this instance holds a valid lease for the
        advisory's shard now, :meth:`may_publish`, or no one has the advisory and this
        instance is the first live one), "keep" (it does not: kept, and applied if it takes
        the shard over; only with ``keep``), or "ignore". With ``keep``, every command
        naming an advisory is kept for ``COMMANDS_KEPT_S``, answered or not, whatever its
        shard. "First" is in name order among the instances holding a shard."""
        assert self.service is not None
        shard = self._shard_of_advisory(advisory_id)
        kept = False
        if keep and isinstance(advisory_id, str):
            now = self.service.clock.now()
            self.commands = [c for c in self.commands if now - c.at < COMMANDS_KEPT_S]
            if not any(c.message is m for c in self.commands):  # not one applied again
                self.commands.append(Buffered(m, now, advisory_id, shard))
            kept = True
        if shard is None:  # no one has it: one instance replies with the error
            r = self.round
            working = sorted(set(r.holders.values()) & r.live) or sorted(r.live) \
                if r is not None else []
            return "answer" if not working or working[0] == self.me else "ignore"
        if self.round is not None and self.may_publish(shard, self.publishing.get(shard)):
            return "answer"
        return "keep" if kept else "ignore"

    def fencing(self, advisory_id: object) -> dict[str, Any]:
        """The shard and epoch a reply about ``advisory_id`` is sent under (empty when no
        one has the advisory): a reply the client would send again after a reconnect is
        dropped, as records are, if the lease lapsed meanwhile (:meth:`allows_bytes`)."""
        shard = self._shard_of_advisory(advisory_id)
        if shard is None or shard not in self.publishing:
            return {}
        return {"shard": shard, "epoch": self.publishing[shard]}

    def _shard_of_advisory(self, advisory_id: object) -> str | None:
        assert self.service is not None
        engine = self.service.engine
        got = engine.advisories.by_id.get(advisory_id) if isinstance(advisory_id, str) \
            else None
        if got is not None:
            return engine.publication.shards[got[1]]
        for p in self.records.values():
            if p.get("id") == advisory_id:
                shard = p.get("shard")
                return shard if isinstance(shard, str) else None
        return None

    def _apply_kept(self, shard: str) -> None:
        """Kept commands for ``shard`` (:meth:`route`) whose effect the advisory taken over
        lacks are applied now: an acknowledgement unless the advisory is acknowledged
        already or was raised or escalated after it; a shelving or unshelving unless the
        retained advisory changed after it arrived (the old holder applied it, or something
        after it), nor a shelving when one given at or after it is in force."""
        service = self.service
        assert service is not None
        now = service.clock.now()
        self.commands = [c for c in self.commands if now - c.at < COMMANDS_KEPT_S]
        # they stay kept (with the time they arrived): the shard may change hands again
        kept = [c for c in self.commands
                if (c.shard or self._shard_of_advisory(c.advisory_id)) == shard]
        book = service.engine.advisories
        for c in kept:
            verb = self._verb(c)
            got = book.by_id.get(c.advisory_id)
            adv = got[0].advisories.get(got[1]) if got is not None else None
            if verb == "acknowledge":
                if adv is not None and (adv.acknowledged is not None or any(
                        h.get("event") in ("raised", "escalated")
                        and str(h.get("at", "")) > iso(c.at) for h in adv.history)):
                    continue  # acknowledged already, or a worse level since
            else:
                if verb == "shelve" and adv is not None and adv.shelved is not None \
                        and str(adv.shelved.get("at", "")) >= iso(c.at):
                    continue  # this shelving, or a later one, is in force
                record = next((p for p in self.records.values()
                               if p.get("id") == c.advisory_id), None)
                h = record.get("handover") if record is not None else None
                updated = h.get("updated_at") if isinstance(h, dict) else None
                if isinstance(updated, int | float) and updated >= c.at:
                    continue  # the old holder applied it (or something after it)
            log.info("applying a kept %s command for %s at the takeover", verb,
                     c.advisory_id)
            service.handle_command(c.message)

    def _verb(self, c: Buffered) -> str:
        """The verb of a kept command (``<prefix>/commands/<audience>/<verb>[/<user>]``)."""
        assert self.service is not None
        parts = c.message.topic[len(self.service.command_prefix):].split("/")
        return parts[1] if len(parts) in (2, 3) else parts[-1]

"""The spaces a group instance's engine evaluates: those of the shards it holds and stands
by for (:mod:`thermowarden.shell.group`), and the subscriptions that bring their sensors."""

from __future__ import annotations

import logging

import numpy as np

from thermowarden.config import SiteConfig
from thermowarden.core.shards import shard_of
from thermowarden.engine import Engine
from thermowarden.engine.reload import carry_over
from thermowarden.shell.group.state import GroupState
from thermowarden.site_model import build_site_model

log = logging.getLogger("thermowarden.group")


class ShardScope(GroupState):
    """The site, its shards, and the engine of the shards evaluated."""

    @property
    def shards(self) -> list[str]:
        """Every shard of the site (kept from :meth:`_site`: it is read at every turn of the
        engine loop, and listing it from the spaces cost each instance time in proportion
        to the whole site's size)."""
        return self._shards

    def _site(self, config: SiteConfig) -> None:
        """The whole site (at the start and after a reload): the engine evaluates only the
        spaces of the shards this instance holds or stands by for (:meth:`_rebuild`)."""
        self.full = config
        buckets = self.cfg.shard_buckets
        self.shard_by_space = {sp.id: shard_of(sp.id, sp.area, sp.building, buckets)
                               for sp in config.spaces}
        self._shards = sorted(set(self.shard_by_space.values()))

    def subscriptions(self) -> list[str]:
        """The sensor topics of the spaces evaluated (held and standby shards) and the
        site's, commands and the site's retained advisories."""
        assert self.service is not None
        service = self.service
        shards = service.engine.publication.shards
        spaces = [i for i, s in enumerate(shards) if s in self.evaluating]
        return service.engine.model.subscriptions(per_space=True, spaces=spaces) + [
            f"{service.command_prefix}#", f"{self.advisory_prefix}+/advisories/#"]

    def reapplied(self) -> None:
        """After a reload swapped in an engine of the whole (new) site: back to the spaces
        of the same shards, with their epochs and subscriptions."""
        assert self.service is not None
        self._site(self.service.engine.config)
        if self.keeper is not None:
            self.keeper.shards = self.shards
            self.keeper.warm_s = self._warm_s()
        self._rebuild(self.evaluating)
        self.service.engine.publication.epochs.update(self.publishing)
        self.holding = np.array([s in self.publishing
                                 for s in self.service.engine.publication.shards], dtype=bool)
        self.service.link.set_subscriptions(self.subscriptions())

    def _warm_s(self) -> float:
        """How long a standby must have stood by for a shard before it is handed the shard:
        ``standby_warm_s``, by default the site's WBGT window (its 60-minute WBGT is then
        whole) and one lease TTL (the rounds in which the standby learns of it and starts
        evaluating)."""
        if self.cfg.standby_warm_s is not None:
            return self.cfg.standby_warm_s
        return float(self.full.ingest.wbgt_window_s) + self.cfg.lease_ttl_s

    def _rebuild(self, shards: frozenset[str]) -> None:
        """Make the engine one of the spaces of ``shards`` only, carrying the state of the
        spaces it keeps (:func:`carry_over`, as a reload does): an instance keeps the state
        of the shards it holds or stands by for, not of the whole site. Spaces that leave
        are forgotten first (their advisories go on at their holders; nothing is
        withdrawn)."""
        service = self.service
        assert service is not None
        old = service.engine
        now = service.clock.now()
        keep = [sp for sp in self.full.spaces if self.shard_by_space[sp.id] in shards]
        kept = {sp.id for sp in keep}
        service.execute(old.set_owned([sid for sid in old.model.space_ids if sid in kept],
                                      now))
        templates = []
        for t in self.full.templates:
            if t.spaces:
                mine = [sid for sid in t.spaces if sid in kept]
                if not mine:
                    continue  # an empty list would mean every space
                t = t.model_copy(update={"spaces": mine})
            templates.append(t)
        config = self.full.model_copy(update={"spaces": keep, "templates": templates})
        engine = Engine(config, build_site_model(config), old.packs,
                        conditions_every_s=old.publication.conditions_every_s,
                        start=old.start, sample_every_s=old.sample_every_s,
                        advisory_refresh_s=old.advisories.refresh_s)
        effects, notes = carry_over(old, engine)
        for note in notes:
            log.debug("%s", note)
        engine.publication.epochs.update(old.publication.epochs)
        engine.ticks = old.ticks
        if old.ticks > 0:  # new here: its 60-minute WBGT window begins now
            for i, sid in enumerate(engine.model.space_ids):
                if sid not in old.model.space_index:
                    engine.publication.moved_at[i] = now
        service.engine = engine
        service.failures_seen = set()  # by space index, which changed
        service.execute(effects)

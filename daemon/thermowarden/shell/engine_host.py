"""What a group instance (:mod:`thermowarden.shell.group`) uses of the service that runs
its engine: the engine itself (replaced on a takeover), the MQTT link, the clock, the
metrics, and the service's way of executing effects and commands.

:class:`thermowarden.shell.service.Service` is the one implementation; the group depends
on this description instead, so the two modules do not import each other.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Protocol

if TYPE_CHECKING:
    from thermowarden.effects import Effect
    from thermowarden.engine import Engine
    from thermowarden.shell.clock import Clock
    from thermowarden.shell.inbox import Incoming
    from thermowarden.shell.metrics import Metrics
    from thermowarden.shell.mqtt_link import MqttLink


class EngineHost(Protocol):
    """The service as a group instance sees it (all on the engine thread)."""

    engine: Engine
    link: MqttLink
    clock: Clock
    metrics: Metrics
    command_prefix: str
    """Topic prefix of inbound commands (ends with ``/``)."""
    dirty: bool
    """Set when the spaces evaluated changed: the next turn evaluates them all."""
    failures_seen: set[tuple[int, str]]
    """Evaluation failures already logged, by space index and reason."""

    def execute(self, effects: list[Effect]) -> None:
        """Store, then publish, what the group's leases allow now."""
        ...

    def handle_command(self, m: Incoming) -> None:
        """Act on a command now (one kept while this instance was a standby)."""
        ...

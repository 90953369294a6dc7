"""What the service counts about its input, into the metrics and the log: messages received,
readings accepted and missed by quantity, rejected sensor messages (every one counted, one log
line per point and reason per interval), and the broker's own figures from ``$SYS``.

The network thread and the engine keep plain counters; the engine thread copies them into the
metrics once per turn (cheaper than a locked metric update per message).
"""

from __future__ import annotations

import logging
from collections import Counter
from typing import TYPE_CHECKING

from thermowarden.core.payloads import RECORD_ABSENT
from thermowarden.shell.logs import IntervalLog

if TYPE_CHECKING:
    from thermowarden.engine import Engine
    from thermowarden.engine.ingest import Rejection
    from thermowarden.shell.clock import Clock
    from thermowarden.shell.inbox import Inbox
    from thermowarden.shell.metrics import Metrics
    from thermowarden.shell.mqtt_link import MqttLink

log = logging.getLogger("thermowarden.service")

REJECTION_LOG_INTERVAL_S = 600.0
"""Sensor rejections are logged once per point and reason this often (all are counted)."""


class IntakeCounts:
    """See the module docstring."""

    def __init__(self, metrics: Metrics, link: MqttLink, inbox: Inbox, clock: Clock) -> None:
        self.metrics = metrics
        self.link = link
        self.inbox = inbox
        self.rejection_log = IntervalLog(REJECTION_LOG_INTERVAL_S, clock.monotonic)
        self.received_seen = 0
        self.counts_seen: dict[str, dict[str, int]] = {"accepted": {}, "missed": {}}

    def rejected(self, rejections: list[Rejection]) -> None:
        """Count every rejection (one metric update per reason, not per message: a flood
        of bad payloads does not take the metric's lock for each); log one line per point
        and reason per ``REJECTION_LOG_INTERVAL_S`` (the first at once, then how many more
        came: :meth:`_rejection_summaries`)."""
        for reason, count in Counter(r.reason for r in rejections).items():
            self.metrics.rejected.labels(reason=reason).inc(count)
        for r in rejections:
            if self.rejection_log.first(f"{r.reason}|{r.point}", f"on {r.topic}: {r.detail}"):
                log.log(_rejection_level(r.reason), "rejected %s on %s [%s]: %s (one line "
                        "per point and reason every %.0f s; all are counted)", r.reason,
                        r.topic, r.point, r.detail, self.rejection_log.interval_s)

    def _rejection_summaries(self) -> None:
        """One line per point and reason whose interval ended with rejections not logged."""
        for key, count, last in self.rejection_log.due():
            reason, point = key.split("|", 1)
            log.log(_rejection_level(reason), "rejected %s [%s]: %d more in the last %.0f s "
                    "(the last %s)", reason, point, count, self.rejection_log.interval_s, last)

    def broker_figure(self, topic: str, payload: bytes) -> None:
        """A ``$SYS`` figure of the broker: messages it dropped, messages it stores."""
        try:
            value = float(payload.decode().split()[0])
        except (ValueError, IndexError, UnicodeDecodeError):
            return
        if topic.endswith("/publish/messages/dropped"):
            self.metrics.broker_dropped.set(value)
        elif topic.endswith("/store/messages/count"):
            self.metrics.broker_stored.set(value)

    def sync(self, engine: Engine) -> None:
        """Copy the network thread's plain counter and the ingest counters into the
        metrics (cheaper than a locked metric update per message)."""
        self._rejection_summaries()
        received = self.link.received
        if received != self.received_seen:
            self.metrics.received.inc(received - self.received_seen)
            self.received_seen = received
        self.metrics.queue_depth.set(self.inbox.qsize())
        ingest = getattr(engine, "ingest", None)
        if ingest is None:
            return
        for name, counts, metric in (("accepted", ingest.accepted_by_quantity,
                                      self.metrics.readings),
                                     ("missed", ingest.missed_by_quantity,
                                      self.metrics.missed)):
            seen = self.counts_seen[name]
            for q, n in counts.items():
                if n != seen.get(q, 0):
                    metric.labels(quantity=q).inc(n - seen.get(q, 0))
                    seen[q] = n


def _rejection_level(reason: str) -> int:
    """A SenML pack without a point's record carries nothing for it: said, not warned."""
    return logging.INFO if reason == RECORD_ABSENT else logging.WARNING

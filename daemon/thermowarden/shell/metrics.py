"""Prometheus metrics of the service (prometheus-client), with no per-space labels."""

from __future__ import annotations

from prometheus_client import CollectorRegistry, Counter, Gauge, Histogram


class Metrics:
    """Every metric the service exposes on /metrics."""

    def __init__(self) -> None:
        r = self.registry = CollectorRegistry()
        self.received = Counter("thermowarden_messages_received", "Sensor messages received",
                                registry=r)
        self.rejected = Counter("thermowarden_messages_rejected",
                                "Sensor messages (or values) refused, by reason", ["reason"],
                                registry=r)
        self.queue_overflow = Counter("thermowarden_queue_overflow",
                                      "Messages dropped because the input queue was full",
                                      registry=r)
        self.queue_depth = Gauge("thermowarden_queue_depth", "Messages waiting for the engine",
                                 registry=r)
        self.evaluation_seconds = Histogram(
            "thermowarden_evaluation_seconds", "Time to evaluate every space once",
            buckets=(0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0), registry=r)
        self.last_evaluation = Gauge("thermowarden_last_evaluation_timestamp_seconds",
                                     "When the last evaluation finished (epoch s)", registry=r)
        self.active = Gauge("thermowarden_advisories_active", "Live advisories",
                            ["rule", "priority"], registry=r)
        self.reconnects = Counter("thermowarden_broker_reconnects",
                                  "Connections to the broker after the first", registry=r)
        self.connected = Gauge("thermowarden_broker_connected", "1 while connected",
                               registry=r)
        self.outbox_depth = Gauge("thermowarden_outbox_depth",
                                  "Events stored but not yet acknowledged by the broker",
                                  registry=r)
        self.publish_failures = Counter("thermowarden_publish_failures",
                                        "Publishes the broker refused (reason code)",
                                        ["reason"], registry=r)
        self.job_errors = Counter("thermowarden_scheduler_job_errors",
                                  "Scheduler jobs that failed or were missed", ["job", "kind"],
                                  registry=r)
        self.commands = Counter("thermowarden_commands", "Commands received", ["verb", "ok"],
                                registry=r)

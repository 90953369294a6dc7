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
        self.commands = Counter("thermowarden_commands",
                                "Commands received (verb is a known verb or 'unknown')",
                                ["verb", "ok"], registry=r)
        self.retained_commands = Counter(
            "thermowarden_commands_retained",
            "Retained command messages ignored (and cleared) rather than executed", registry=r)
        self.events_expired = Counter(
            "thermowarden_events_expired",
            "Events removed from the outbox undelivered (too old, or the outbox full)",
            registry=r)
        self.events_unconfirmed = Counter(
            "thermowarden_events_unconfirmed",
            "MQTT 3.1.1: events acknowledged by the broker but never seen back on the "
            "service's own subscription (an ACL that silently drops them)", registry=r)
        self.readings = Counter("thermowarden_readings_accepted",
                                "Readings accepted, per quantity (rate() gives the received "
                                "rate per point group)", ["quantity"], registry=r)
        self.missed = Counter("thermowarden_readings_missed",
                              "Readings missing between two accepted readings of a point "
                              "(gaps longer than its reporting interval), per quantity",
                              ["quantity"], registry=r)
        self.broker_dropped = Gauge(
            "thermowarden_broker_messages_dropped",
            "The broker's own count of messages it dropped ($SYS, where it publishes it)",
            registry=r)
        self.broker_stored = Gauge(
            "thermowarden_broker_messages_stored",
            "Messages the broker holds ($SYS, where it publishes it)", registry=r)
        self.computation_failures = Counter(
            "thermowarden_computation_failures",
            "Index computations that raised for one space (the others went on), per index",
            ["index"], registry=r)
        self.clock_steps = Counter("thermowarden_clock_steps",
                                   "Wall-clock steps seen (corrections of the system clock)",
                                   ["direction"], registry=r)
        # one instance of a group (``run --group``)
        self.group_owned = Gauge("thermowarden_group_owned_spaces",
                                 "Spaces of the shards this instance of a group holds and "
                                 "publishes for", registry=r)
        self.group_evaluated = Gauge("thermowarden_group_evaluated_spaces",
                                     "Spaces this instance of a group evaluates: those of the "
                                     "shards it holds and those it stands by for", registry=r)
        self.group_members = Gauge("thermowarden_group_members",
                                   "Live instances of the group (presence in the lease store)",
                                   registry=r)
        self.group_uncovered = Gauge(
            "thermowarden_group_uncovered_seconds",
            "Seconds since every shard of the site last had a holder (0 while all have one)",
            registry=r)
        self.group_moves = Counter("thermowarden_group_spaces_moved",
                                   "Spaces this instance took over or gave up", ["direction"],
                                   registry=r)
        self.group_fenced = Counter(
            "thermowarden_group_fenced",
            "Records and events not published because this instance's lease of their shard "
            "had lapsed, was lost or not yet confirmed (fencing)", registry=r)
        self.group_errors = Counter(
            "thermowarden_group_errors",
            "Group records or steps that failed (logged; the service carries on)",
            registry=r)

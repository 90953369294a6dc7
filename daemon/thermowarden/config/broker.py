"""The MQTT side of the service: the broker connection (TLS, credentials), the output topic
prefix, the outbox of events kept for the broker, and inbound commands."""

from __future__ import annotations

import re
from typing import Literal

from pydantic import Field, SecretStr, field_validator, model_validator

from thermowarden.config.base import Strict


class TlsConfig(Strict):
    ca_file: str | None = None
    cert_file: str | None = None
    key_file: str | None = None

    @model_validator(mode="after")
    def _pair(self) -> TlsConfig:
        if (self.cert_file is None) != (self.key_file is None):
            raise ValueError("cert_file and key_file go together")
        return self


class BrokerConfig(Strict):
    """The MQTT broker. The password comes from THERMOWARDEN_BROKER__PASSWORD or
    ``password_file``, never from the site file."""

    url: str = "mqtt://127.0.0.1:1883"
    fallback_urls: list[str] = Field(default_factory=list)
    """Further nodes of a clustered broker, tried in turn after ``url`` (and after one
    another) when a node cannot be reached or its connection is lost."""
    client_id: str | None = None
    protocol: Literal["5", "3.1.1"] = "5"
    subscribe_qos: Literal[0, 1] = 1
    """QoS of the service's subscriptions. 0 for nats-server: there a QoS 1 subscription is
    a JetStream consumer, whose creation holds up everything else the client sends for
    seconds while the cluster moves its streams after a node's end."""
    persistent_session: bool = False
    """MQTT 3.1.1: the broker keeps the session between the connections of one run (clean
    session off, the same client id) and commands are subscribed at QoS 1, so a command
    sent while the connection is down, or moving from a stopped node of a clustered broker
    to another, is delivered after the reconnection instead of lost. A run's first
    connection only ends the session an earlier run left (clean session on; a session
    begun clean is not kept past its connection) and disconnects. Sensor subscriptions stay
    at ``subscribe_qos`` (at 0 the broker keeps none of them). A command the broker
    delivers again (its DUP flag set) after this run handled the same topic and body is
    dropped. nats-server sends an unacknowledged message again after its MQTT
    ``ack_wait`` (30 s by default), not at the reconnection."""
    keepalive_s: int = Field(30, ge=5, le=3600)
    username: str | None = None
    password: SecretStr | None = None
    password_file: str | None = None
    tls: TlsConfig | None = None

    @field_validator("url")
    @classmethod
    def _url(cls, v: str) -> str:
        if not re.match(r"^(mqtt|mqtts)://[^/:\s]+(:\d{1,5})?/?$", v):
            raise ValueError(f"{v!r} is not mqtt://host[:port] or mqtts://host[:port]")
        return v

    @field_validator("fallback_urls")
    @classmethod
    def _urls(cls, v: list[str]) -> list[str]:
        for u in v:
            cls._url(u)
        return v

    @field_validator("protocol", mode="before")
    @classmethod
    def _proto(cls, v: object) -> object:
        return str(v) if isinstance(v, int | float) else v


class OutputConfig(Strict):
    prefix: str = "thermowarden"
    rule_topic_separator: Literal[".", "/", "_"] = "."
    """What stands for the dot of a rule id (``pack.rule``) in advisory topics. nats-server
    refuses ``.`` in MQTT topic names (it separates NATS subject tokens): use ``/``
    (``.../advisories/pack/rule``) or ``_`` there. Payloads keep the rule id as it is."""

    @field_validator("prefix")
    @classmethod
    def _prefix(cls, v: str) -> str:
        if not v or any(c in v for c in "+#\0") or v.startswith("/") or v.endswith("/"):
            raise ValueError("the prefix is a topic without wildcards or leading/trailing /")
        return v


class OutboxConfig(Strict):
    """Events kept for the broker until it acknowledges them: at most ``max_events``, none
    older than ``max_age_s``; what expires undelivered is counted and reported."""

    max_events: int = Field(10_000, ge=10, le=10_000_000)
    max_age_s: float = Field(86_400.0, ge=60, le=30 * 86_400)


class CommandsConfig(Strict):
    """Inbound commands: a body size limit, and the MQTT 5 user property that carries the
    sender's authenticated identity (set by a trusted gateway or broker plugin; a client
    cannot be trusted to set it itself)."""

    max_body_bytes: int = Field(2048, ge=256, le=65_536)
    identity_property: str | None = None

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
    client_id: str | None = None
    protocol: Literal["5", "3.1.1"] = "5"
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

    @field_validator("protocol", mode="before")
    @classmethod
    def _proto(cls, v: object) -> object:
        return str(v) if isinstance(v, int | float) else v


class OutputConfig(Strict):
    prefix: str = "thermowarden"

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

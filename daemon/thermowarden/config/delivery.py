"""Delivery of events to people besides MQTT: webhooks and e-mail per audience, quiet
hours, digests and retries."""

from __future__ import annotations

import re
from typing import Annotated, Literal

from pydantic import ConfigDict, Field, SecretStr, field_validator, model_validator

from thermowarden.config.base import Strict

DeliveredEvent = Literal["raised", "escalated", "deescalated", "renotified", "acknowledged",
                         "shelved", "unshelved", "cleared", "summary", "notice",
                         "unacknowledged", "report"]


class WebhookConfig(Strict):
    """POST each event as JSON to ``url``, signed with HMAC-SHA256 over ``<timestamp>.<body>``
    with a shared secret (from the environment, e.g.
    THERMOWARDEN_DELIVERY__AUDIENCES__SAFETY__WEBHOOK__SECRET, or ``secret_file``)."""

    url: str
    secret: SecretStr | None = None
    secret_file: str | None = None
    timeout_s: float = Field(10.0, gt=0, le=300)

    @field_validator("url")
    @classmethod
    def _url(cls, v: str) -> str:
        if not re.match(r"^https?://[^/\s]+(/\S*)?$", v):
            raise ValueError(f"{v!r} is not an http:// or https:// URL")
        return v

    @model_validator(mode="after")
    def _secret(self) -> WebhookConfig:
        if self.secret is None and self.secret_file is None:
            raise ValueError("a webhook needs a shared secret: secret_file, or the environment "
                             "variable ..._WEBHOOK__SECRET")
        return self


class SmtpConfig(Strict):
    """The SMTP relay. ``tls``: ``starttls`` (default), ``ssl`` (implicit TLS) or ``none``
    (a relay on the same host only). The password comes from the environment or
    ``password_file``, never from the site file."""

    host: str
    port: int = Field(587, ge=1, le=65535)
    tls: Literal["starttls", "ssl", "none"] = "starttls"
    username: str | None = None
    password: SecretStr | None = None
    password_file: str | None = None
    timeout_s: float = Field(30.0, gt=0, le=300)


class EmailConfig(Strict):
    """Send each event (or digest) as a plain-text e-mail through an SMTP relay."""

    smtp: SmtpConfig
    sender: str = Field(alias="from", pattern=r"^[^@\s]+@[^@\s]+$")
    to: list[Annotated[str, Field(pattern=r"^[^@\s]+@[^@\s]+$")]] = Field(min_length=1)
    subject_prefix: str = "[thermowarden]"

    model_config = ConfigDict(extra="forbid", frozen=True, populate_by_name=True)


class Recipients(Strict):
    """Further recipients: a webhook, an e-mail list, or both."""

    webhook: WebhookConfig | None = None
    email: EmailConfig | None = None

    @model_validator(mode="after")
    def _some(self) -> Recipients:
        if self.webhook is None and self.email is None:
            raise ValueError("give a webhook, an email, or both")
        return self


class EscalationConfig(Recipients):
    """Where an urgent alert goes when nobody acknowledges (or shelves) it: ``after_s``
    seconds after it was raised or became urgent, unless it was acknowledged, shelved or
    cleared by then, it is sent to these recipients as an ``unacknowledged`` event."""

    after_s: float = Field(600.0, ge=10.0, le=86_400.0)


class BuildingRecipients(Recipients):
    """The recipients of one building's (or area's) events, and optionally where its
    unacknowledged urgent alerts go (instead of the audience's ``escalation``)."""

    escalation: EscalationConfig | None = None


def _default_events() -> list[DeliveredEvent]:
    return ["raised", "escalated", "renotified", "cleared", "summary", "notice"]


_QUIET = re.compile(r"^([01]\d|2[0-3]):([0-5]\d)-([01]\d|2[0-3]):([0-5]\d)$")


class AudienceDelivery(Strict):
    """How one audience is reached besides MQTT. ``quiet_hours`` (site time zone,
    ``HH:MM-HH:MM``, may span midnight): events other than urgent ones wait and go out as one
    digest when the quiet hours end; urgent ones always go out at once. Low-priority events
    are collected into one digest every ``low_priority_digest_s`` (0: sent one by one)."""

    webhook: WebhookConfig | None = None
    email: EmailConfig | None = None
    events: list[DeliveredEvent] = Field(default_factory=_default_events)
    quiet_hours: str | None = None
    low_priority_digest_s: float = Field(3600.0, ge=0, le=7 * 86_400)
    buildings: dict[Annotated[str, Field(pattern=r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")],
                    BuildingRecipients] = Field(default_factory=dict)
    """Building (or area) id -> its own recipients: they receive the events of the spaces
    there (with the same ``events``, quiet hours and digest), besides the audience's
    recipients above."""
    escalation: EscalationConfig | None = None

    @field_validator("quiet_hours")
    @classmethod
    def _quiet(cls, v: str | None) -> str | None:
        if v is not None:
            m = _QUIET.match(v)
            if not m:
                raise ValueError(f"{v!r} is not HH:MM-HH:MM (site time zone)")
            if (m.group(1), m.group(2)) == (m.group(3), m.group(4)):
                raise ValueError(f"{v!r} starts and ends at the same time")
        return v

    @model_validator(mode="after")
    def _some_channel(self) -> AudienceDelivery:
        if self.webhook is None and self.email is None and not self.buildings:
            raise ValueError("give a webhook, an email, or both (or recipients per building)")
        return self


class RetryConfig(Strict):
    """Retries of a failed delivery: exponential backoff from ``first_s`` doubling up to
    ``max_s`` (with ±20 % jitter), at most ``max_attempts`` attempts in all."""

    first_s: float = Field(5.0, ge=0.01, le=3600)
    max_s: float = Field(900.0, ge=0.01, le=86_400)
    max_attempts: int = Field(12, ge=1, le=1000)


class DeliveryConfig(Strict):
    """Delivery of events to people by webhook and e-mail, per audience (optional).
    ``queue_size``: the most deliveries waiting in the store (held or pending); beyond it an
    event is not stored for delivery (counted and logged; it is still published)."""

    audiences: dict[Literal["facilities", "safety", "integrator"], AudienceDelivery] = Field(
        default_factory=dict)
    retry: RetryConfig = Field(default_factory=RetryConfig)
    queue_size: int = Field(10_000, ge=10, le=1_000_000)

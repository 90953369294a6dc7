"""How the service treats what comes in and what it keeps: limits on every message,
evaluation cadence and the notification-flood guard, retention of the store, the web page."""

from __future__ import annotations

from pydantic import Field, model_validator

from thermowarden.config.base import Strict


class IngestConfig(Strict):
    """Limits applied to every message."""

    max_payload_bytes: int = Field(4096, ge=16, le=1_048_576)
    max_age_s: float = Field(900.0, gt=0)
    future_skew_s: float = Field(30.0, ge=0)
    stale_after_intervals: float = Field(3.0, ge=1.0)
    air_speed_window_s: float = Field(180.0, gt=0)
    wbgt_window_s: float = Field(3600.0, ge=600, le=3600)
    disagreement_k: float = Field(2.0, gt=0)
    silence_limit_s: float | None = Field(600.0, gt=0)
    """/readyz answers 503 when no sensor message arrived for this long (null: never)."""


class EvaluationConfig(Strict):
    """How often spaces are evaluated, and the notification-flood guard (ISA-18.2 practice:
    about 10 notifications in 10 minutes per audience; urgent ones always go out)."""

    tick_s: float = Field(10.0, ge=0.5, le=3600)
    flood_limit: int = Field(10, ge=1, le=100_000)
    flood_window_s: float = Field(600.0, ge=10, le=86_400)
    trend_window_s: float = Field(1200.0, ge=300, le=3600)
    """Window of the spot WBGT's trend fit for the ahead-of-time heat-stress advice
    (engine/foresight.py)."""
    flood_summary_interval_s: float = Field(600.0, ge=10, le=86_400)
    """One summary per audience and flood, updated at most this often."""


class RetentionConfig(Strict):
    """How long the store keeps the event history and the report samples (the 5-minute
    conditions behind reports and ``thermowarden export``), in days."""

    events_days: float = Field(90.0, ge=1, le=3660)
    samples_days: float = Field(90.0, ge=1, le=3660)


class WebConfig(Strict):
    """The web page and HTTP API (off unless enabled; loopback unless told otherwise).
    ``users_file`` (relative to the site file) lists who may sign in and act."""

    enabled: bool = False
    host: str = "127.0.0.1"
    port: int = Field(9480, ge=1, le=65535)
    users_file: str | None = None
    session_lifetime_s: float = Field(8 * 3600.0, ge=60, le=30 * 86_400)
    sign_in_to_read: bool = False
    """Every page and API call needs a signed-in user (otherwise only acting does)."""
    public_url: str | None = Field(None, pattern=r"^https?://[^/\s]+(/\S*)?$")
    """The page's address as people reach it (behind a proxy: https://comfort.example.org);
    messages by webhook and e-mail link to each advisory's page under it (default: this
    host and port, when the page is enabled)."""

    @model_validator(mode="after")
    def _readers(self) -> WebConfig:
        if self.sign_in_to_read and self.users_file is None:
            raise ValueError("sign_in_to_read needs a users_file (nobody could sign in)")
        return self

"""Delivery of events to people by webhook and e-mail, per audience, beside MQTT.

Every delivery is a row of the store's ``deliveries`` table before anything else happens:
the engine thread writes it (:meth:`Delivery.stage`) in the same transaction as the event's
outbox row, so a crash at any moment loses none and a restart sends what was waiting. One
worker thread per receiver (audience and channel: a webhook, an e-mail relay) with its own
SQLite connection sends that receiver's rows in order, so a slow or failing receiver
delays only itself; it removes a row once the receiver took it (at least once: a crash
between the two sends it again under the same delivery id). Retries use exponential
backoff and jitter; events other than urgent ones wait during the audience's quiet hours
and go out as one digest when they end; low-priority events are collected into a digest
every ``low_priority_digest_s``. The waiting count (``thermowarden_delivery_pending``) is
read from the table when asked.

Webhook: ``POST`` of the event JSON signed by the open Standard Webhooks specification
(standardwebhooks.com; its reference library signs): the headers ``webhook-id`` (the delivery
id, the same on every retry, so a receiver can drop repeats), ``webhook-timestamp`` (epoch
seconds) and ``webhook-signature`` (``v1,`` + base64 HMAC-SHA256 of ``<id>.<timestamp>.<body>``
with the shared secret: a ``whsec_`` secret is base64 as the specification has it, any other
secret is its UTF-8 bytes). 2xx is delivered; 408, 425, 429 and 5xx and network
errors are retried; any other status (redirects included) is a permanent failure. E-mail: a
plain-text message through the SMTP relay (smtplib); 4xx replies and network errors are
retried, 5xx are not.
"""

from __future__ import annotations

import base64
import datetime as dt
import email.utils
import json
import logging
import pathlib
import random
import smtplib
import sqlite3
import ssl
import threading
import time
import urllib.error
import urllib.request
import uuid
from collections.abc import Callable
from dataclasses import dataclass
from email.message import EmailMessage
from typing import Any

from prometheus_client import CollectorRegistry, Counter, Gauge

from thermowarden.config.delivery import (
    AudienceDelivery,
    DeliveryConfig,
    EmailConfig,
    WebhookConfig,
)
from thermowarden.core.quiet_hours import QuietHours
from thermowarden.shell.store import DELIVERIES_SCHEMA, count_rows

log = logging.getLogger("thermowarden.delivery")

SCHEMA = DELIVERIES_SCHEMA
EVENT_SCHEMA = "thermowarden.event/1"
SIGNATURE_HEADER = "webhook-signature"
TIMESTAMP_HEADER = "webhook-timestamp"
DELIVERY_HEADER = "webhook-id"
RETRY_STATUS = frozenset({408, 425, 429})
IDLE_WAIT_S = 1.0
FAILED_KEPT_S = 30 * 86_400.0
"""Deliveries that failed for good stay in the store this long, for inspection."""
PRUNE_EVERY_S = 3600.0
CHANNELS = ("webhook", "email")
PENDING_COUNT = "SELECT COUNT(*) FROM deliveries WHERE state IN ('held', 'pending')"


class DeliveryFailed(Exception):
    """One attempt failed; ``permanent`` failures are not retried."""

    def __init__(self, message: str, permanent: bool = False) -> None:
        super().__init__(message)
        self.permanent = permanent


def signing_key(secret: str) -> bytes:
    """The HMAC key of a shared secret: a ``whsec_<base64>`` secret (the Standard Webhooks
    form) decoded, any other its UTF-8 bytes."""
    if secret.startswith("whsec_"):
        return base64.b64decode(secret.removeprefix("whsec_") + "==")
    return secret.encode("utf-8")


def sign(secret: str, delivery_id: str, timestamp: int, body: bytes) -> str:
    """The ``webhook-signature`` header of a delivery (Standard Webhooks, version v1)."""
    from standardwebhooks.webhooks import Webhook

    when = dt.datetime.fromtimestamp(timestamp, dt.UTC)
    return Webhook(signing_key(secret)).sign(delivery_id, when, body)


def _secret(value: Any, file: str | None) -> str | None:
    if value is not None:
        return str(value.get_secret_value())
    if file:
        return pathlib.Path(file).read_text(encoding="utf-8").strip()
    return None


class _NoRedirect(urllib.request.HTTPRedirectHandler):
    """A redirect is answered as an error: urllib would repeat a POST as a GET without its
    body (and without a signature worth the name)."""

    def redirect_request(self, req: urllib.request.Request, fp: Any, code: int, msg: str,
                         headers: Any, newurl: str) -> None:
        return None


_OPENER = urllib.request.build_opener(_NoRedirect)


def post_webhook(cfg: WebhookConfig, payload: dict[str, Any], delivery_id: str,
                 now: float) -> None:
    """One webhook attempt; raises :class:`DeliveryFailed`."""
    secret = _secret(cfg.secret, cfg.secret_file)
    assert secret is not None  # the configuration requires one
    body = json.dumps(payload, ensure_ascii=False, separators=(",", ":")).encode("utf-8")
    stamp = int(now)
    request = urllib.request.Request(cfg.url, data=body, method="POST", headers={
        "Content-Type": "application/json", "User-Agent": "thermowarden",
        TIMESTAMP_HEADER: str(stamp),
        SIGNATURE_HEADER: sign(secret, delivery_id, stamp, body),
        DELIVERY_HEADER: delivery_id})
    try:
        with _OPENER.open(request, timeout=cfg.timeout_s) as response:
            response.read(1024)
    except urllib.error.HTTPError as exc:
        retry = exc.code in RETRY_STATUS or exc.code >= 500
        raise DeliveryFailed(f"HTTP {exc.code}", permanent=not retry) from None
    except (urllib.error.URLError, OSError) as exc:
        reason = getattr(exc, "reason", exc)
        raise DeliveryFailed(f"{type(exc).__name__}: {reason}") from None


def _quantity_text(value: Any, unit: Any) -> str:
    """A number with its unit for a person: "not known" for a missing value, no unit for
    a dimensionless one (unit "1", as PMV's)."""
    if value is None:
        return "not known"
    unit = "" if unit in (None, "", "1") else f" {unit}"
    return f"{value}{unit}"


def render_text(payload: dict[str, Any]) -> tuple[str, str]:
    """(subject, body) of an event or digest for a person."""
    if payload.get("event") == "notice":
        # an integrator notice about the service itself (no advisory)
        kind = str(payload.get("kind", "")).replace("_", " ")
        lines = [str(payload.get("text", "")), "", f"Notice: {kind}",
                 f"At: {payload.get('at', '')}"]
        for key in ("protocol", "topic", "reason", "count"):
            if payload.get(key) is not None:
                lines.append(f"{key.capitalize()}: {payload[key]}")
        lines += ["", "thermowarden is advisory only."]
        return f"thermowarden notice: {kind}", "\n".join(lines)
    if payload.get("event") == "summary":
        items = payload.get("items", [])
        subject = f"{payload.get('count', len(items))} notification(s) for " \
                  f"{payload.get('audience', '')}"
        lines = [payload.get("note", ""), ""]
        for it in items:
            lines.append(f"- {it.get('at', '')} {it.get('priority', '')} {it.get('event', '')}: "
                         f"{it.get('title', '')} ({it.get('space', '')}, "
                         f"{it.get('advisory_id', '')})")
        lines += ["", "thermowarden is advisory only."]
        return subject, "\n".join(lines)
    adv = payload.get("advisory", {})
    space = adv.get("space", {})
    subject = f"{adv.get('priority', '')} {payload.get('event', '')}: {adv.get('title', '')}"
    event = payload.get("event", "")
    lines = [f"{adv.get('title', '')}", "",
             f"Space: {space.get('name', space.get('id', ''))} ({space.get('id', '')})",
             f"Event: {event} at {payload.get('at', '')}",
             f"Priority: {adv.get('priority', '')}", ""]
    numbers = adv.get("numbers") or {}
    shown_at = adv.get("numbers_at")
    if event == "cleared":
        # the texts are what the advisory said while its condition held; the clearing
        # itself is told by the values it cleared at
        history = adv.get("history") or []
        values = (history[-1].get("values") or {}) if history else {}
        lines += ["The condition no longer holds: this advisory has cleared."]
        if values:
            lines += ["", "Values at clearing:"]
            for name, value in values.items():
                unit = numbers.get(name, {}).get("unit", "") \
                    if isinstance(numbers.get(name), dict) else ""
                lines.append(f"  {name}: {_quantity_text(value, unit)}")
        if shown_at is not None and shown_at == payload.get("at"):
            # a rule with easing texts says that it cleared, with the numbers of clearing
            lines += ["", f"Now: {adv.get('advice', '')}", "",
                      f"Why: {adv.get('rationale', '')}"]
        else:
            lines += ["", f"It advised: {adv.get('advice', '')}", "",
                      f"Why it was raised: {adv.get('rationale', '')}"]
    else:
        lines += [f"What to do: {adv.get('advice', '')}", "",
                  f"Why: {adv.get('rationale', '')}"]
    if numbers:
        when = f" (as of {shown_at})" if shown_at and shown_at != payload.get("at") else ""
        lines += ["", f"Numbers{when}:"]
        for name, n in numbers.items():
            if isinstance(n, dict):
                unit = n.get("unit", "")
                extra = f" (threshold {_quantity_text(n['threshold'], unit)})" \
                    if n.get("threshold") is not None else ""
                reason = f" ({n['reason']})" if n.get("value") is None and n.get("reason") \
                    else ""
                lines.append(f"  {name}: {_quantity_text(n.get('value'), unit)}{reason}{extra}")
            else:
                lines.append(f"  {name}: {n}")
    cautions = adv.get("cautions") or []
    if cautions:
        lines += ["", "Cautions:"] + [f"  - {c}" for c in cautions]
    lines += ["", f"Advisory {adv.get('id', '')}. thermowarden is advisory only: it never "
                  "switches equipment. Follow local regulations."]
    return subject, "\n".join(lines)


def send_email(cfg: EmailConfig, payload: dict[str, Any], delivery_id: str,
               now: float) -> None:
    """One e-mail attempt through the relay; raises :class:`DeliveryFailed`."""
    subject, text = render_text(payload)
    msg = EmailMessage()
    msg["Subject"] = f"{cfg.subject_prefix} {subject}".strip()
    msg["From"] = cfg.sender
    msg["To"] = ", ".join(cfg.to)
    msg["Date"] = email.utils.formatdate(now, usegmt=True)
    msg["Message-ID"] = f"<{delivery_id}@thermowarden>"
    msg.set_content(text)
    smtp = cfg.smtp
    password = _secret(smtp.password, smtp.password_file)
    try:
        client: smtplib.SMTP
        if smtp.tls == "ssl":
            client = smtplib.SMTP_SSL(smtp.host, smtp.port, timeout=smtp.timeout_s,
                                      context=ssl.create_default_context())
        else:
            client = smtplib.SMTP(smtp.host, smtp.port, timeout=smtp.timeout_s)
        with client:
            if smtp.tls == "starttls":
                client.starttls(context=ssl.create_default_context())
            if smtp.username:
                client.login(smtp.username, password or "")
            client.send_message(msg)
    except smtplib.SMTPResponseException as exc:
        raise DeliveryFailed(f"SMTP {exc.smtp_code}", permanent=exc.smtp_code >= 500) from None
    except smtplib.SMTPRecipientsRefused as exc:
        codes = [c for c, _ in exc.recipients.values()]
        raise DeliveryFailed(f"recipients refused {codes}",
                             permanent=all(c >= 500 for c in codes)) from None
    except (smtplib.SMTPException, OSError) as exc:
        raise DeliveryFailed(f"{type(exc).__name__}: {exc}") from None


Sender = Callable[[Any, dict[str, Any], str, float], None]


@dataclass(frozen=True)
class _Row:
    seq: int
    id: str
    audience: str
    channel: str
    priority: str
    attempts: int
    payload: dict[str, Any]


def _priority(payload: dict[str, Any]) -> str:
    adv = payload.get("advisory")
    if isinstance(adv, dict) and isinstance(adv.get("priority"), str):
        return str(adv["priority"])
    return "medium"


def _iso(t: float) -> str:
    return dt.datetime.fromtimestamp(t, dt.UTC).isoformat(timespec="seconds").replace(
        "+00:00", "Z")


class Delivery:
    """See the module docstring. ``db_path`` is the service's SQLite file; ``now`` the
    service clock (epoch s)."""

    def __init__(self, config: DeliveryConfig, timezone: str, db_path: str | pathlib.Path,
                 registry: CollectorRegistry | None = None,
                 now: Callable[[], float] = time.time,
                 senders: dict[str, Sender] | None = None) -> None:
        self.db_path = str(db_path)
        self.now = now
        self.senders: dict[str, Sender] = senders or {"webhook": post_webhook,
                                                      "email": send_email}
        self.stopping = threading.Event()
        self.started = False
        self.lock = threading.Lock()
        self.workers: dict[tuple[str, str], _Worker] = {}
        self._configure(config, timezone)
        r = registry or CollectorRegistry()
        self.m_sent = Counter("thermowarden_deliveries", "Deliveries to people by channel and "
                              "outcome (sent, retried, failed, held)", ["channel", "outcome"],
                              registry=r)
        self.m_overflow = Counter("thermowarden_delivery_queue_overflow",
                                  "Events not stored for delivery because delivery.queue_size "
                                  "deliveries were already waiting", registry=r)
        self.m_pending = Gauge("thermowarden_delivery_pending",
                               "Deliveries stored and not yet sent (held or pending), "
                               "counted in the store", registry=r)
        self.m_pending.set_function(lambda: count_rows(self.db_path, PENDING_COUNT))

    def _configure(self, config: DeliveryConfig, timezone: str) -> None:
        with self.lock:
            self.config = config
            self.quiet: dict[str, QuietHours] = {
                a: QuietHours.parse(d.quiet_hours, timezone)
                for a, d in config.audiences.items() if d.quiet_hours}

    def _audience(self, name: str) -> AudienceDelivery | None:
        for key, aud in self.config.audiences.items():
            if key == name:
                return aud
        return None

    def reconfigure(self, config: DeliveryConfig, timezone: str) -> None:
        """Take a reloaded configuration; stored deliveries stay and follow the new one."""
        self._configure(config, timezone)
        if self.started:
            self._ensure_workers()
        self.wake()

    # ------------------------------------------------------------------ engine thread
    def wanted(self, audience: str, payload: dict[str, Any]) -> bool:
        aud = self._audience(audience)
        return aud is not None and payload.get("event") in aud.events

    def stage(self, db: sqlite3.Connection, audience: str, payload: dict[str, Any],
              now: float) -> bool:
        """Store the deliveries of one event (a row per configured channel, held or
        pending) through ``db``, inside the caller's transaction (the engine thread's,
        which also holds the event's outbox row). Returns True when rows were written:
        call :meth:`wake` once the transaction is committed. An event not wanted by the
        audience is skipped; beyond ``delivery.queue_size`` waiting deliveries it is not
        stored (counted and logged; it was still published over MQTT)."""
        aud = self._audience(audience)
        if aud is None or payload.get("event") not in aud.events:
            return False
        waiting = int(db.execute(PENDING_COUNT).fetchone()[0])
        if waiting >= self.config.queue_size:
            self.m_overflow.inc()
            log.error("%d deliveries already wait: an event for %s was not stored for "
                      "delivery (it was published over MQTT); delivery.queue_size is %d",
                      waiting, audience, self.config.queue_size)
            return False
        prio = _priority(payload)
        state, due = self._placement(audience, aud, prio, now)
        text = json.dumps(payload)
        stored = False
        for channel in CHANNELS:
            if getattr(aud, channel) is None:
                continue
            db.execute("INSERT INTO deliveries(id, audience, channel, state, priority, due, "
                       "created, payload) VALUES(?, ?, ?, ?, ?, ?, ?, ?)",
                       (uuid.uuid4().hex, audience, channel, state, prio, due, now, text))
            if state == "held":
                self.m_sent.labels(channel=channel, outcome="held").inc()
            stored = True
        return stored

    def offer(self, audience: str, payload: dict[str, Any]) -> bool:
        """Store an event's deliveries in a transaction of their own (a caller without the
        store's connection) and wake the workers. False when not wanted or not stored."""
        db = self._connect()
        try:
            db.execute("BEGIN IMMEDIATE")
            try:
                stored = self.stage(db, audience, payload, self.now())
            except BaseException:
                db.execute("ROLLBACK")
                raise
            db.execute("COMMIT")
        finally:
            db.close()
        if stored:
            self.wake()
        return stored

    def wake(self) -> None:
        """Tell every worker to look at the table now (after rows were committed)."""
        with self.lock:
            workers = list(self.workers.values())
        for w in workers:
            w.wake.set()

    # ------------------------------------------------------------------ workers
    def start(self) -> None:
        """Start a worker for every configured receiver and every receiver that still
        has rows waiting in the store (removed from the configuration: they are marked
        failed)."""
        self.started = True
        self._ensure_workers()

    def _ensure_workers(self) -> None:
        targets: set[tuple[str, str]] = {
            (str(a), c) for a, aud in self.config.audiences.items() for c in CHANNELS
            if getattr(aud, c) is not None}
        db = self._connect()
        try:
            targets |= {(str(a), str(c)) for a, c in db.execute(
                "SELECT DISTINCT audience, channel FROM deliveries WHERE state IN "
                "('held', 'pending')")}
        finally:
            db.close()
        with self.lock:
            for target in sorted(targets - set(self.workers)):
                worker = _Worker(self, *target)
                self.workers[target] = worker
                worker.thread.start()

    def stop(self, timeout: float = 10.0) -> None:
        """Stop the workers (an attempt under way is waited for up to ``timeout`` s in
        all); what is not sent stays stored for the next start."""
        self.stopping.set()
        self.wake()
        deadline = time.monotonic() + timeout
        with self.lock:
            workers = list(self.workers.values())
        for w in workers:
            w.thread.join(max(0.0, deadline - time.monotonic()))

    @property
    def thread(self) -> threading.Thread | None:
        """The first worker's thread (for tests that check the workers ended)."""
        with self.lock:
            return next((w.thread for w in self.workers.values()), None)

    def alive(self) -> bool:
        with self.lock:
            return any(w.thread.is_alive() for w in self.workers.values())

    def _connect(self) -> sqlite3.Connection:
        db = sqlite3.connect(self.db_path, isolation_level=None, timeout=30.0)
        db.execute("PRAGMA journal_mode=WAL")
        db.execute("PRAGMA synchronous=NORMAL")
        db.executescript(SCHEMA)
        return db

    def _placement(self, audience: str, aud: AudienceDelivery, priority: str,
                   now: float) -> tuple[str, float]:
        if priority == "urgent":
            return "pending", now
        quiet = self.quiet.get(audience)
        quiet_end = quiet.until(now) if quiet is not None else None
        digest = priority == "low" and aud.low_priority_digest_s > 0
        if quiet_end is None and not digest:
            return "pending", now
        due = now + aud.low_priority_digest_s if digest else now
        if quiet_end is not None:
            due = max(due, quiet_end)
        return "held", due

    # ------------------------------------------------------------------ queries
    def pending_count(self, db: sqlite3.Connection | None = None) -> int:
        own = db is None
        conn = db or self._connect()
        try:
            return int(conn.execute(PENDING_COUNT).fetchone()[0])
        finally:
            if own:
                conn.close()


class _Worker:
    """The deliveries of one receiver (an audience's webhook or its e-mail), in order, on a
    thread and SQLite connection of its own."""

    def __init__(self, owner: Delivery, audience: str, channel: str) -> None:
        self.owner = owner
        self.audience = audience
        self.channel = channel
        self.wake = threading.Event()
        self.blocked_until = 0.0
        self.thread = threading.Thread(target=self._run, daemon=True,
                                       name=f"thermowarden-delivery-{audience}-{channel}")

    def _run(self) -> None:
        owner = self.owner
        db = owner._connect()
        last_prune = -PRUNE_EVERY_S
        try:
            while not owner.stopping.is_set():
                self.wake.clear()
                if time.monotonic() - last_prune >= PRUNE_EVERY_S:
                    last_prune = time.monotonic()
                    db.execute("DELETE FROM deliveries WHERE state = 'failed' AND audience = ? "
                               "AND channel = ? AND created < ?",
                               (self.audience, self.channel, owner.now() - FAILED_KEPT_S))
                wait = self._work(db)
                self.wake.wait(wait)
        except Exception:  # noqa: BLE001 - a delivery bug must not take the service down
            log.exception("delivery worker for %s by %s failed; its stored deliveries wait "
                          "for the next start", self.audience, self.channel)
        finally:
            db.close()

    def _work(self, db: sqlite3.Connection) -> float:
        """Release a digest that is due and attempt this receiver's due deliveries in order;
        returns how long to sleep before the next thing is due."""
        owner = self.owner
        now = owner.now()
        self._release(db, now)
        rows = db.execute("SELECT seq, id, priority, attempts, payload, due FROM deliveries "
                          "WHERE state = 'pending' AND audience = ? AND channel = ? "
                          "ORDER BY seq", (self.audience, self.channel)).fetchall()
        next_due = now + IDLE_WAIT_S
        for seq, did, prio, attempts, text, due in rows:
            if owner.stopping.is_set():
                break
            now = owner.now()
            if due > now or self.blocked_until > now:
                # keep the order: nothing later goes before this one
                next_due = min(next_due, max(due, self.blocked_until))
                break
            try:
                payload = json.loads(text)
                if not isinstance(payload, dict):
                    raise ValueError("not a JSON object")
            except (ValueError, RecursionError) as exc:
                self._fail(db, seq, did, f"damaged record: {exc}")
                continue
            row = _Row(seq, did, self.audience, self.channel, prio, attempts, payload)
            if not self._attempt(db, row, now):
                next_due = min(next_due, self.blocked_until)
                break
        held = db.execute("SELECT MIN(due) FROM deliveries WHERE state = 'held' AND "
                          "audience = ? AND channel = ?",
                          (self.audience, self.channel)).fetchone()[0]
        if held is not None:
            next_due = min(next_due, held)
        return max(0.0, min(IDLE_WAIT_S, next_due - owner.now()))

    def _fail(self, db: sqlite3.Connection, seq: int, did: str, error: str,
              attempts: int | None = None) -> None:
        if attempts is None:
            db.execute("UPDATE deliveries SET state = 'failed', error = ? WHERE seq = ?",
                       (error, seq))
        else:
            db.execute("UPDATE deliveries SET state = 'failed', attempts = ?, error = ? "
                       "WHERE seq = ?", (attempts, error, seq))
        self.owner.m_sent.labels(channel=self.channel, outcome="failed").inc()

    def _attempt(self, db: sqlite3.Connection, row: _Row, now: float) -> bool:
        owner = self.owner
        aud = owner._audience(row.audience)
        cfg = getattr(aud, row.channel) if aud is not None else None
        if cfg is None:
            self._fail(db, row.seq, row.id, "channel no longer configured")
            log.error("delivery %s to %s by %s dropped: that channel is no longer configured",
                      row.id, row.audience, row.channel)
            return True
        try:
            owner.senders[row.channel](cfg, row.payload, row.id, now)
        except DeliveryFailed as exc:
            attempts = row.attempts + 1
            retry = owner.config.retry
            if exc.permanent or attempts >= retry.max_attempts:
                self._fail(db, row.seq, row.id, str(exc), attempts)
                log.error("delivery %s to %s by %s failed for good after %d attempt(s): %s",
                          row.id, row.audience, row.channel, attempts, exc)
                return True
            delay = min(retry.max_s, retry.first_s * 2 ** (attempts - 1))
            delay *= random.uniform(0.8, 1.2)
            db.execute("UPDATE deliveries SET attempts = ?, due = ?, error = ? WHERE seq = ?",
                       (attempts, now + delay, str(exc), row.seq))
            self.blocked_until = now + delay
            owner.m_sent.labels(channel=row.channel, outcome="retried").inc()
            log.warning("delivery %s to %s by %s failed (%s); attempt %d of %d in %.1f s",
                        row.id, row.audience, row.channel, exc, attempts + 1,
                        retry.max_attempts, delay)
            return False
        except Exception as exc:  # noqa: BLE001 - a sender bug is a failed attempt, not a crash
            self._fail(db, row.seq, row.id, f"{type(exc).__name__}: {exc}")
            log.exception("delivery %s to %s by %s failed", row.id, row.audience, row.channel)
            return True
        db.execute("DELETE FROM deliveries WHERE seq = ?", (row.seq,))
        self.blocked_until = 0.0
        owner.m_sent.labels(channel=row.channel, outcome="sent").inc()
        return True

    def _release(self, db: sqlite3.Connection, now: float) -> None:
        """This receiver's held rows go out as one digest once one of them is due and the
        audience's quiet hours are over."""
        due = db.execute("SELECT MIN(due) FROM deliveries WHERE state = 'held' AND "
                         "audience = ? AND channel = ?",
                         (self.audience, self.channel)).fetchone()[0]
        quiet = self.owner.quiet.get(self.audience)
        if due is None or due > now or (quiet is not None and quiet.until(now) is not None):
            return
        db.execute("BEGIN IMMEDIATE")
        try:
            rows = db.execute("SELECT seq, payload FROM deliveries WHERE state = 'held' AND "
                              "audience = ? AND channel = ? ORDER BY seq",
                              (self.audience, self.channel)).fetchall()
            payloads: list[dict[str, Any]] = []
            for _, text in rows:
                try:
                    p = json.loads(text)
                except (ValueError, RecursionError):
                    continue
                if isinstance(p, dict):
                    payloads.append(p)
            db.executemany("DELETE FROM deliveries WHERE seq = ?", [(s,) for s, _ in rows])
            if payloads:
                digest = payloads[0] if len(payloads) == 1 else \
                    _digest(self.audience, payloads, now)
                db.execute("INSERT INTO deliveries(id, audience, channel, state, priority, "
                           "due, created, payload) VALUES(?, ?, ?, 'pending', ?, ?, ?, ?)",
                           (uuid.uuid4().hex, self.audience, self.channel, "low", now, now,
                            json.dumps(digest)))
        except BaseException:
            db.execute("ROLLBACK")
            raise
        db.execute("COMMIT")


def _digest(audience: str, payloads: list[dict[str, Any]], now: float) -> dict[str, Any]:
    """Several held events as one summary event (schema ``thermowarden.event/1``)."""
    items: list[dict[str, Any]] = []
    for p in payloads:
        if p.get("event") == "summary":
            items.extend(p.get("items", []))
            continue
        adv = p.get("advisory", {})
        items.append({"event": p.get("event"), "advisory_id": adv.get("id"),
                      "space": adv.get("space", {}).get("id"), "rule": adv.get("rule"),
                      "priority": adv.get("priority"), "title": adv.get("title"),
                      "at": p.get("at")})
    return {"schema": EVENT_SCHEMA, "event": "summary", "at": _iso(now), "audience": audience,
            "count": len(items), "items": items,
            "note": f"{len(items)} notification(s) held for quiet hours or the low-priority "
                    "digest, sent together"}

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

Around the workers: an audience may have recipients per building (or area), which receive
the events of the spaces there besides the audience's own (a flood summary is split by
building for them); each set of recipients is a route (:func:`delivery_routes`) and its
rows carry the route as their audience, so each has its own workers. Every message links
to the advisory's page when the site has one (``page`` in the webhook JSON, a line in the
e-mail). An urgent alert that nobody acknowledges, shelves or clears within
``escalation.after_s`` goes to the escalation recipients as an ``unacknowledged`` event
(:class:`Escalations`): its timer is a row of the store's ``escalations`` table written in
the same transaction as the event's deliveries, so a restart keeps it, and a step of the
wall clock moves it by the step, so it still waits ``after_s`` of elapsed time.

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
import urllib.parse
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
    EscalationConfig,
    WebhookConfig,
)
from thermowarden.core.quiet_hours import QuietHours
from thermowarden.shell.store import DELIVERIES_SCHEMA, count_rows

log = logging.getLogger("thermowarden.delivery")

SCHEMA = DELIVERIES_SCHEMA
ESCALATE_ON = frozenset({"raised", "escalated", "renotified"})
"""Events of an urgent advisory that start its escalation timer (once)."""
RESOLVED_BY = frozenset({"acknowledged", "shelved", "cleared", "deescalated"})
"""Events that stop it: somebody took it on, or it is no longer urgent."""
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


GROUP_SHOWN = 5
"""Spaces named per group of a summary e-mail (the rest are counted)."""


def _summary_lines(items: list[dict[str, Any]]) -> list[str]:
    """A summary's items grouped by rule and building: one block per group, most urgent
    first, with its spaces and the links to their pages (the first few)."""
    order = {"urgent": 0, "high": 1, "medium": 2, "low": 3}
    groups: dict[tuple[str, str], list[dict[str, Any]]] = {}
    for it in items:
        groups.setdefault((str(it.get("rule", "")), str(it.get("place") or "")), []).append(it)
    lines = []
    for (rule, place), members in sorted(
            groups.items(), key=lambda kv: (min(order.get(str(i.get("priority")), 4)
                                                for i in kv[1]), kv[0])):
        top = min(members, key=lambda i: order.get(str(i.get("priority")), 4))
        spaces = sorted({str(i.get("space", "")) for i in members})
        where = f" in {place}" if place else ""
        lines.append(f"{top.get('priority', '')} {rule}{where}: {len(members)} "
                     f"notification(s), {len(spaces)} space(s)")
        lines.append(f"  {top.get('title', '')}")
        for it in members[:GROUP_SHOWN]:
            link = f" {it['page']}" if it.get("page") else ""
            lines.append(f"  - {it.get('at', '')} {it.get('event', '')} {it.get('space', '')}"
                         f"{link}")
        if len(members) > GROUP_SHOWN:
            more = sorted({str(i.get("space", "")) for i in members[GROUP_SHOWN:]})
            shown = ", ".join(more[:20]) + (" ..." if len(more) > 20 else "")
            lines.append(f"  - and {len(members) - GROUP_SHOWN} more: {shown}")
        lines.append("")
    return lines


def render_text(payload: dict[str, Any]) -> tuple[str, str]:
    """(subject, body) of an event or digest for a person."""
    if payload.get("event") == "report":
        scope = f" for {payload['place']}" if payload.get("place") else ""
        return (f"daily report {payload.get('day', '')}{scope}",
                f"The thermal comfort and heat-stress report of {payload.get('day', '')}"
                f"{scope} is attached ({payload.get('file', '')}).\n\nHeat-stress figures are "
                "screening values; thermowarden is advisory only: follow local regulations "
                "and consult a qualified occupational hygienist.")
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
        scope = f" in {payload['place']}" if payload.get("place") else ""
        subject = f"{payload.get('count', len(items))} notification(s) for " \
                  f"{payload.get('audience', '')}{scope}"
        lines = [payload.get("note", ""), ""] + _summary_lines(items)
        if payload.get("page"):
            lines.append(f"Live advisories: {payload['page']}")
        lines += ["", "thermowarden is advisory only."]
        return subject, "\n".join(lines)
    adv = payload.get("advisory", {})
    space = adv.get("space", {})
    subject = f"{adv.get('priority', '')} {payload.get('event', '')}: {adv.get('title', '')}"
    event = payload.get("event", "")
    place = f", {payload['place']}" if payload.get("place") else ""
    lines = [f"{adv.get('title', '')}", "",
             f"Space: {space.get('name', space.get('id', ''))} ({space.get('id', '')}{place})",
             f"Event: {event} at {payload.get('at', '')}",
             f"Priority: {adv.get('priority', '')}", ""]
    if payload.get("page"):
        lines[1:1] = [f"Page: {payload['page']}", ""]
    if event == "unacknowledged":
        lines += [f"Nobody has acknowledged this urgent alert since {adv.get('raised_at', '')}"
                  f" ({payload.get('waited_s', 0) / 60:.0f} minutes). You receive it as the "
                  "next person to act on it.", ""]
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
    if payload.get("event") == "report" and payload.get("path"):
        try:
            html_text = pathlib.Path(str(payload["path"])).read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError) as exc:
            raise DeliveryFailed(f"the report file cannot be read: {exc}",
                                 permanent=True) from None
        msg.add_attachment(html_text, subtype="html", charset="utf-8",
                           filename=str(payload.get("file", "report.html")))
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
    if payload.get("event") == "report":
        return "urgent"  # sent when written: never held for quiet hours or a digest
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
        self.places: dict[str, tuple[str | None, str]] = {}
        self.page_url: str | None = None
        self.escalations = Escalations(self)

    def _configure(self, config: DeliveryConfig, timezone: str) -> None:
        routes = delivery_routes(config)
        with self.lock:
            self.config = config
            self.routes = routes
            self.quiet: dict[str, QuietHours] = {
                a: QuietHours.parse(d.quiet_hours, timezone)
                for a, d in routes.items() if d.quiet_hours}

    def _audience(self, name: str) -> AudienceDelivery | None:
        """The recipients of a route: an audience, ``audience@building``, or an escalation
        (``audience!escalation``, ``audience@building!escalation``)."""
        return self.routes.get(name)

    def set_site(self, places: dict[str, tuple[str | None, str]],
                 page_url: str | None) -> None:
        """Space id -> (building or area id, "North Building · First floor"), and the web
        page's address for links (None: no links). Called at start and after a reload."""
        self.places = places
        self.page_url = page_url.rstrip("/") if page_url else None

    def reconfigure(self, config: DeliveryConfig, timezone: str) -> None:
        """Take a reloaded configuration; stored deliveries stay and follow the new one."""
        self._configure(config, timezone)
        if self.started:
            self._ensure_workers()
        self.wake()

    # ------------------------------------------------------------------ engine thread
    def wanted(self, audience: str, payload: dict[str, Any]) -> bool:
        """Some recipients (the audience's or its building's) want this event."""
        return bool(self.routed(audience, payload))

    def stage(self, db: sqlite3.Connection, audience: str, payload: dict[str, Any],
              now: float) -> bool:
        """Store the deliveries of one event through ``db``, inside the caller's
        transaction (the engine thread's, which also holds the event's outbox row): a row
        per channel of every route that wants it (:meth:`routed`: the audience's
        recipients and those of the space's building), held or pending; an urgent alert
        also starts (and a later event of it stops) its escalation timer in the same
        transaction. Returns True when delivery rows were written: call :meth:`wake` once
        the transaction is committed. Beyond ``delivery.queue_size`` waiting deliveries an
        event is not stored (counted and logged; it was still published over MQTT)."""
        if audience not in self.config.audiences and audience not in self.routes:
            return False
        self.escalations.observe(db, audience, payload, now)
        stored = False
        for route, part in self.routed(audience, payload):
            stored = self._stage_route(db, route, part, now) or stored
        return stored

    def routed(self, audience: str, payload: dict[str, Any]
               ) -> list[tuple[str, dict[str, Any]]]:
        """(route, payload as sent) for every set of recipients that wants this event of
        ``audience``: the audience's own and its space's building's (a summary split by
        building), each payload with its page link and place. Pure: :meth:`stage` stores
        the result."""
        payload = self._enrich(payload)
        out = []
        for route, part in self._split(audience, payload):
            aud = self._audience(route)
            if aud is not None and part.get("event") in aud.events:
                out.append((route, part))
        return out

    def offer_report(self, day: str, site_file: pathlib.Path,
                     building_files: dict[str, pathlib.Path]) -> int:
        """The daily reports, to every audience (and building) whose ``events`` list
        ``report``: the site's to the audience's recipients, each building's to its own
        (any thread; one transaction of its own). Returns how many routes got one."""
        parts: list[tuple[str, dict[str, Any]]] = []
        for route, aud in list(self.routes.items()):
            if "report" not in aud.events or "!" in route:
                continue
            audience, _, building = route.partition("@")
            file = building_files.get(building) if building else site_file
            if file is None:
                continue
            payload = {"schema": EVENT_SCHEMA, "event": "report", "at": _iso(self.now()),
                       "audience": audience, "day": day, "file": file.name,
                       "path": str(file)}
            if building:
                payload["place"] = self.places_label(building)
            parts.append((route, payload))
        if not parts:
            return 0
        now = self.now()
        return int(self._store_apart(lambda db: sum(
            self._stage_route(db, route, payload, now) for route, payload in parts)))

    def _stage_route(self, db: sqlite3.Connection, route: str, payload: dict[str, Any],
                     now: float) -> bool:
        """The rows of one route (``audience=route``), inside the caller's transaction."""
        aud = self._audience(route)
        if aud is None or payload.get("event") not in aud.events:
            return False
        waiting = int(db.execute(PENDING_COUNT).fetchone()[0])
        if waiting >= self.config.queue_size:
            self.m_overflow.inc()
            log.error("%d deliveries already wait: an event for %s was not stored for "
                      "delivery (it was published over MQTT); delivery.queue_size is %d",
                      waiting, route, self.config.queue_size)
            return False
        prio = _priority(payload)
        state, due = self._placement(route, aud, prio, now)
        text = json.dumps(payload)
        stored = False
        for channel in CHANNELS:
            if getattr(aud, channel) is None:
                continue
            db.execute("INSERT INTO deliveries(id, audience, channel, state, priority, due, "
                       "created, payload) VALUES(?, ?, ?, ?, ?, ?, ?, ?)",
                       (uuid.uuid4().hex, route, channel, state, prio, due, now, text))
            if state == "held":
                self.m_sent.labels(channel=channel, outcome="held").inc()
            stored = True
        return stored

    def offer(self, audience: str, payload: dict[str, Any]) -> bool:
        """Store an event's deliveries in a transaction of their own (a caller without the
        store's connection) and wake the workers. False when not wanted or not stored."""
        return bool(self._store_apart(
            lambda db: self.stage(db, audience, payload, self.now())))

    def _store_apart(self, store: Callable[[sqlite3.Connection], int | bool]) -> int | bool:
        """Run ``store`` in a transaction of its own on a connection of its own (rolled back
        if it fails), then wake the workers if it stored anything; returns what it did."""
        db = self._connect()
        try:
            db.execute("BEGIN IMMEDIATE")
            try:
                stored = store(db)
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
        """Tell every worker (and the escalation timers) to look at the tables now (after
        rows were committed)."""
        with self.lock:
            workers = list(self.workers.values())
        for w in workers:
            w.wake.set()
        self.escalations.wake.set()

    def clock_stepped(self, step_s: float) -> None:
        """The wall clock was stepped by ``step_s`` (the shell measured it against the
        monotonic clock): the escalation timers move by it, so each still waits its
        ``after_s`` of elapsed time."""
        db = self._connect()
        try:
            db.execute("UPDATE escalations SET since = since + ?, due = due + ? "
                       "WHERE state = 'waiting'", (step_s, step_s))
        finally:
            db.close()
        self.escalations.wake.set()

    def _page(self, advisory_id: str | None) -> str | None:
        if not self.page_url or not advisory_id:
            return None
        return f"{self.page_url}/advisories/{urllib.parse.quote(advisory_id, safe='')}"

    def _enrich(self, payload: dict[str, Any]) -> dict[str, Any]:
        """A copy with the link to the advisory's page (and its place, for people); the
        MQTT event is left as it is."""
        if not self.page_url and not self.places:
            return payload
        out = dict(payload)
        if payload.get("event") == "summary":
            items = []
            for it in payload.get("items", []):
                it = dict(it)
                place = self.places.get(str(it.get("space")))
                if place is not None:
                    it["place"] = place[1]
                page = self._page(it.get("advisory_id"))
                if page:
                    it["page"] = page
                items.append(it)
            out["items"] = items
            if self.page_url:
                out["page"] = self.page_url + "/"
            return out
        adv = payload.get("advisory")
        if isinstance(adv, dict):
            page = self._page(adv.get("id"))
            if page:
                out["page"] = page
            place = self.places.get(str((adv.get("space") or {}).get("id")))
            if place is not None and place[1]:
                out["place"] = place[1]
        return out

    def _split(self, audience: str, payload: dict[str, Any]
               ) -> list[tuple[str, dict[str, Any]]]:
        """(route, payload) for the audience and the buildings concerned; a summary goes
        whole to the audience and by building to each building's recipients."""
        out: list[tuple[str, dict[str, Any]]] = [(audience, payload)]
        if payload.get("event") == "summary":
            parts: dict[str, list[dict[str, Any]]] = {}
            for it in payload.get("items", []):
                b = self.places.get(str(it.get("space")), (None, ""))[0]
                if b is not None and f"{audience}@{b}" in self.routes:
                    parts.setdefault(b, []).append(it)
            for b, items in parts.items():
                out.append((f"{audience}@{b}", {
                    **payload, "items": items, "count": len(items),
                    "place": self.places_label(b)}))
            return out
        adv = payload.get("advisory")
        if isinstance(adv, dict):
            b = self.places.get(str((adv.get("space") or {}).get("id")), (None, ""))[0]
            if b is not None and f"{audience}@{b}" in self.routes:
                out.append((f"{audience}@{b}", payload))
        return out

    def places_label(self, building: str) -> str:
        label = next((p[1] for p in self.places.values() if p[0] == building), building)
        return label.split(" · ")[0]

    # ------------------------------------------------------------------ workers
    def start(self) -> None:
        """Start a worker for every configured receiver (each route's webhook and e-mail)
        and every receiver that still has rows waiting in the store (removed from the
        configuration: they are marked failed), and the escalation timers' thread."""
        self.started = True
        self._ensure_workers()
        self.escalations.start()

    def _ensure_workers(self) -> None:
        targets: set[tuple[str, str]] = {
            (route, c) for route, aud in self.routes.items() for c in CHANNELS
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
        """Stop the escalation timers and the workers (an attempt under way is waited for
        up to ``timeout`` s in all); what is not sent stays stored for the next start."""
        self.escalations.stop(timeout)
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


def delivery_routes(config: DeliveryConfig) -> dict[str, AudienceDelivery]:
    """Every set of recipients by route name: ``safety`` (the audience's own, when it has
    any), ``safety@north`` (a building's: the audience's events, quiet hours and digest),
    ``safety!escalation`` and ``safety@north!escalation`` (unacknowledged urgent alerts:
    sent at once)."""
    routes: dict[str, AudienceDelivery] = {}

    def escalation(esc: EscalationConfig) -> AudienceDelivery:
        return AudienceDelivery(webhook=esc.webhook, email=esc.email,
                                events=["unacknowledged"], low_priority_digest_s=0)

    for name, aud in config.audiences.items():
        if aud.webhook is not None or aud.email is not None:
            routes[name] = aud
        if aud.escalation is not None:
            routes[f"{name}!escalation"] = escalation(aud.escalation)
        for b, rec in aud.buildings.items():
            routes[f"{name}@{b}"] = AudienceDelivery(
                webhook=rec.webhook, email=rec.email, events=aud.events,
                quiet_hours=aud.quiet_hours, low_priority_digest_s=aud.low_priority_digest_s)
            if rec.escalation is not None:
                routes[f"{name}@{b}!escalation"] = escalation(rec.escalation)
    return routes


class Escalations:
    """Timers of urgent alerts nobody has acknowledged yet, kept in the store's table
    ``escalations``. :meth:`observe` writes and removes them in the transaction that stores
    the event's deliveries (the engine thread's); a thread of their own fires the due ones:
    in one transaction it stores the ``unacknowledged`` event's deliveries for the
    escalation recipients (of the space's building, else of the audience) and marks the
    timer sent. Times are on the service clock (epoch s); :meth:`Delivery.clock_stepped`
    moves waiting timers by a step of the wall clock."""

    def __init__(self, delivery: Delivery) -> None:
        self.delivery = delivery
        self.wake = threading.Event()
        self.stopping = threading.Event()
        self.thread: threading.Thread | None = None

    def observe(self, db: sqlite3.Connection, audience: str, payload: dict[str, Any],
                now: float) -> None:
        """An event of ``audience`` being stored (inside the caller's transaction): an
        urgent alert starts its timer (once), acknowledging, shelving, clearing or
        de-escalating it removes the timer."""
        event = payload.get("event")
        adv = payload.get("advisory")
        if event not in ESCALATE_ON | RESOLVED_BY or not isinstance(adv, dict) \
                or not adv.get("id"):
            return
        if event in RESOLVED_BY:
            db.execute("DELETE FROM escalations WHERE advisory_id = ?", (str(adv["id"]),))
            return
        if adv.get("priority") != "urgent":
            return
        building = self.delivery.places.get(str((adv.get("space") or {}).get("id")),
                                            (None, ""))[0]
        route = self._route(audience, building)
        if route is None:
            return
        db.execute("INSERT OR IGNORE INTO escalations(advisory_id, route, since, due, "
                   "state, payload) VALUES(?, ?, ?, ?, 'waiting', ?)",
                   (str(adv["id"]), route[0], now, now + route[1], json.dumps(payload)))

    def start(self) -> None:
        if self.thread is not None:
            return
        self.thread = threading.Thread(target=self._run, name="thermowarden-escalation",
                                       daemon=True)
        self.thread.start()

    def stop(self, timeout: float = 10.0) -> None:
        self.stopping.set()
        self.wake.set()
        if self.thread is not None:
            self.thread.join(timeout)

    def _route(self, audience: str, building: str | None) -> tuple[str, float] | None:
        """The escalation route of an alert and its delay, or None when there is none."""
        aud = self.delivery.config.audiences.get(audience)  # type: ignore[call-overload]
        if aud is None:
            return None
        rec = aud.buildings.get(building) if building is not None else None
        if rec is not None and rec.escalation is not None:
            return f"{audience}@{building}!escalation", rec.escalation.after_s
        if aud.escalation is not None:
            return f"{audience}!escalation", aud.escalation.after_s
        return None

    def _run(self) -> None:
        db = self.delivery._connect()
        try:
            while not self.stopping.is_set():
                self.wake.clear()
                wait = self._fire(db)
                self.wake.wait(wait)
        except Exception:  # noqa: BLE001 - must not take the service down
            log.exception("escalation timers failed; they wait in the store for the next "
                          "start")
        finally:
            db.close()

    def _fire(self, db: sqlite3.Connection) -> float:
        """Store the due ones' deliveries; how long to wait for the next."""
        delivery = self.delivery
        now = delivery.now()
        rows = db.execute("SELECT advisory_id, route, since, payload FROM escalations WHERE "
                          "state = 'waiting' AND due <= ? ORDER BY due", (now,)).fetchall()
        fired = False
        for advisory_id, route, since, text in rows:
            if self.stopping.is_set():
                break
            db.execute("BEGIN IMMEDIATE")
            try:
                try:
                    first = json.loads(text)
                    if not isinstance(first, dict):
                        raise ValueError("not a JSON object")
                except (ValueError, RecursionError) as exc:
                    log.error("escalation of advisory %s dropped: damaged record (%s)",
                              advisory_id, exc)
                    db.execute("DELETE FROM escalations WHERE advisory_id = ?",
                               (advisory_id,))
                    db.execute("COMMIT")
                    continue
                waited = now - since
                payload = delivery._enrich({**first, "event": "unacknowledged",
                                            "at": _iso(now), "waited_s": round(waited)})
                if delivery._audience(route) is None:
                    db.execute("DELETE FROM escalations WHERE advisory_id = ?",
                               (advisory_id,))
                    log.error("escalation of urgent advisory %s dropped: its recipients "
                              "(%s) are no longer configured", advisory_id, route)
                elif delivery._stage_route(db, route, payload, now):
                    db.execute("UPDATE escalations SET state = 'sent' WHERE advisory_id = ?",
                               (advisory_id,))
                    fired = True
                    log.warning("urgent advisory %s not acknowledged after %.0f s: sent to %s",
                                advisory_id, waited, route)
            except BaseException:
                db.execute("ROLLBACK")
                raise
            db.execute("COMMIT")
        if fired:
            delivery.wake()
        nxt = db.execute("SELECT MIN(due) FROM escalations WHERE state = 'waiting'"
                         ).fetchone()[0]
        if nxt is None:
            return IDLE_WAIT_S
        return max(0.0, min(IDLE_WAIT_S, float(nxt) - delivery.now()))

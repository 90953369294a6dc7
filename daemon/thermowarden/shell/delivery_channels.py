"""How a delivery reaches one receiver: a webhook or an e-mail through an SMTP relay. One
attempt each; :class:`DeliveryFailed` says whether it may be tried again
(:mod:`thermowarden.shell.delivery_workers` retries).

Webhook: ``POST`` of the event JSON signed by the open Standard Webhooks specification
(standardwebhooks.com; its reference library signs): the headers ``webhook-id`` (the delivery
id, the same on every retry, so a receiver can drop repeats), ``webhook-timestamp`` (epoch
seconds) and ``webhook-signature`` (``v1,`` + base64 HMAC-SHA256 of ``<id>.<timestamp>.<body>``
with the shared secret: a ``whsec_`` secret is base64 as the specification has it, any other
secret is its UTF-8 bytes). 2xx is delivered; 408, 425, 429 and 5xx and network
errors are retried; any other status (redirects included) is a permanent failure. E-mail: a
plain-text message (:func:`render_text`) through the SMTP relay (smtplib), with the daily
report attached as HTML; 4xx replies and network errors are retried, 5xx are not.
"""

from __future__ import annotations

import base64
import datetime as dt
import email.utils
import json
import pathlib
import smtplib
import ssl
import urllib.error
import urllib.request
from collections.abc import Callable
from email.message import EmailMessage
from typing import Any

from thermowarden.config.delivery import EmailConfig, WebhookConfig

SIGNATURE_HEADER = "webhook-signature"
TIMESTAMP_HEADER = "webhook-timestamp"
DELIVERY_HEADER = "webhook-id"
RETRY_STATUS = frozenset({408, 425, 429})


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

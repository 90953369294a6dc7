"""The web app's page of one advisory: what it says and why (its numbers against their
thresholds), its history, whether the advice was acted on and what it did, and the
commands (acknowledge, shelve, unshelve) for a signed-in user."""

from __future__ import annotations

import datetime as dt
from typing import Any
from urllib.parse import quote

from thermowarden.core.labels import event_words, readable, value_label, value_unit
from thermowarden.shell.web.fragments import badge, fmt_value, h, local, shown_state, state_badge
from thermowarden.shell.web.layout import page
from thermowarden.shell.web.live import SiteDirectory
from thermowarden.shell.web.users import Session


def advisory_page(directory: SiteDirectory, a: dict[str, Any], live: bool,
                  session: Session | None, tz: dt.tzinfo, max_shelve_s: float | None) -> str:
    space = a["space"]
    parts = [f'<h2>{h(a["title"])}</h2><p>{badge(a["priority"])} '
             f'{state_badge(shown_state(a))} '
             f'<span class="badge plain">{h(a["audience"])}</span> '
             f'<a href="/spaces/{quote(space["id"], safe="")}">{h(space["name"])}</a></p>',
             f'<p class="note">raised {local(a["raised_at"], tz, "%d %b %H:%M")} · updated '
             f'{local(a["updated_at"], tz, "%H:%M")}'
             + (f' · cleared {local(a["cleared_at"], tz, "%H:%M")}' if a.get("cleared_at")
                else "") + (" · chattering (held active)" if a.get("chattering") else "")
             + "</p>",
             f'<h2>{"What it advised" if a.get("cleared_at") else "What to do"}</h2>'
             f'<p class="advice">{h(a["advice"])}</p>',
             f'<p class="note">{h(a["rationale"])}</p>']
    if a.get("numbers"):
        # the numbers are those of the texts (numbers_at); a clearing adds its own values
        history = a.get("history") or []
        cleared = (history[-1].get("values") if a.get("cleared_at") and history
                   and history[-1].get("event") == "cleared" else None)
        shown = (f'At {local(a["numbers_at"], tz, "%d %b %H:%M")}' if a.get("numbers_at")
                 else "Said")
        rows = "".join(
            f'<tr><td data-label="Value">{h(value_label(k))}</td>'
            f'<td class="num" data-label="{h(shown)}">{fmt_value(with_unit(k, v))}</td>'
            + (f'<td class="num" data-label="At clearing">'
               f'{fmt_value(_at_clearing(with_unit(k, v), cleared.get(k)))}</td>'
               if cleared is not None else "")
            + f'<td class="num" data-label="Threshold">{_threshold(with_unit(k, v))}</td>'
            f'<td class="note method" data-label="Method">'
            f'{h(readable(v.get("method", "")))}</td></tr>'
            for k, v in a["numbers"].items())
        parts.append('<h2>The numbers</h2><div class="scroll"><table class="fit stack">'
                     f'<thead><tr><th>Value</th><th>{h(shown)}</th>'
                     + ("<th>At clearing</th>" if cleared is not None else "")
                     + '<th>Threshold</th><th>Method</th></tr></thead><tbody>'
                     + rows + "</tbody></table></div>")
    if a.get("benefit"):
        parts.append('<h2>Expected benefit</h2><dl class="kv">' + "".join(
            f'<dt>{h(value_label(k))}</dt><dd>{fmt_value(with_unit(k, v))}</dd>'
            for k, v in a["benefit"].items())
            + "</dl>")
    # where it stands, in the order it happened: acknowledged by a person, then what the
    # sensors show of the advice carried out
    parts.append("<h2>Where it stands</h2>")
    if a.get("acknowledged"):
        ack = a["acknowledged"]
        parts.append(f'<p>Acknowledged by <strong>{h(ack.get("by"))}</strong> at '
                     f'{local(ack.get("at"), tz)}'
                     + (f': {h(ack["note"])}' if ack.get("note") else "") + "</p>")
    parts.append(_effect(a, directory.follows(a.get("rule", "")), tz))
    if a.get("shelved"):
        sh = a["shelved"]
        parts.append(f'<p>Shelved by <strong>{h(sh.get("by"))}</strong> until '
                     f'{local(sh.get("until"), tz)}: {h(sh.get("reason", ""))}</p>')
    if a.get("cautions"):
        parts.append('<h2>Cautions</h2><ul class="cautions">'
                     + "".join(f"<li>{h(c)}</li>" for c in a["cautions"]) + "</ul>")
    if live:
        info = directory.space(a["space"]["id"])
        place = (info.building or info.area) if info is not None else None
        parts.append(_actions(a, session, max_shelve_s, place))
    hist = "".join(
        f'<tr><td>{local(e.get("at"), tz, "%d %b %H:%M")}</td>'
        f'<td>{h(event_words(str(e.get("event", ""))))}</td>'
        f'<td>{h(e.get("by", ""))}</td><td>'
        f'{h(e.get("note") or e.get("reason") or "")}</td></tr>'
        for e in reversed(a.get("history", [])))
    parts.append('<h2>History</h2><div class="scroll"><table><thead><tr><th>When</th>'
                 '<th>Event</th><th>By</th><th>Note</th></tr></thead><tbody>' + hist
                 + "</tbody></table></div>")
    return page(a["title"], "".join(parts), directory, session,
                here=f"/advisories/{quote(a['id'], safe='')}")


def with_unit(name: str, item: dict[str, Any]) -> dict[str, Any]:
    """``item`` with the unit a person reads for value ``name`` where it gives none."""
    if item.get("unit"):
        return item
    return {**item, "unit": value_unit(name)}


def _at_clearing(said: dict[str, Any], value: Any) -> dict[str, Any]:
    """A number's value at the clearing, in the unit of the advisory's number."""
    return {"value": value, "unit": said.get("unit", ""), "reason": "not known at clearing"}


def _effect(a: dict[str, Any], followed: bool, tz: dt.tzinfo) -> str:
    """Whether the advice was acted on and what it did (effectiveness). ``followed``: the
    rule says how the sensors show its advice carried out (``acted_on``); for one that
    does not, the page claims nothing about it."""
    acted = a.get("acted_on")
    if not acted:
        if a.get("cleared_at"):
            return '<p class="muted">The condition cleared.</p>'
        if not followed:
            return ('<p class="muted">The sensors here cannot show whether this advice was '
                    "carried out; it stays live until the condition clears.</p>")
        return ('<p class="muted">The sensors do not show the advice carried out yet; it '
                "stays live until the condition clears.</p>")
    after = acted.get("cleared_after")
    mins = acted.get("cleared_after_min")
    text = f'Acted on at {local(acted.get("at"), tz)}'
    if acted.get("minutes_after_raised") is not None:
        text += f' ({acted["minutes_after_raised"]:.0f} min after it was raised)'
    if after:
        text += "; the condition cleared afterwards" + (
            f" ({mins:.0f} min later)" if isinstance(mins, int | float) else "") + "."
    elif after is False:
        text += "; the condition did not clear afterwards."
    else:
        text += "; waiting for its effect."
    helped = acted.get("helped")
    if helped is not None:
        text += " It helped within the expected time." if helped else \
            " It did not help within the expected time."
    out = f"<p>{h(text)}</p>"
    effect = acted.get("effect")
    if effect:
        unit = effect.get("unit") or value_unit(str(effect.get("quantity", "")))
        label = value_label(str(effect.get("quantity", "")))
        # a value without a unit (PMV) is named in each row: "PMV when acted on"
        name = "" if unit not in ("", "1") else label.split(",")[0].split(" (")[0] + " "
        rows = [(f"{name}when acted on", effect.get("value_then")),
                (f"{name}predicted", effect.get("predicted"))]
        rows += [(f'{name}{c["after_min"]:g} min later', c.get("value"))
                 for c in effect.get("checks", [])]
        out += (f'<div class="scroll"><table><thead><tr>'
                f'<th>{h(label)}'
                '</th><th>Value</th></tr></thead><tbody>'
                + "".join(f'<tr><td>{h(label)}</td><td class="num">'
                          f'{fmt_value({"value": v, "unit": unit})}</td></tr>'
                          for label, v in rows) + "</tbody></table></div>")
    return out


def _threshold(v: dict[str, Any]) -> str:
    if v.get("threshold") is None:
        return "–"
    return fmt_value({"value": v["threshold"], "unit": v.get("unit", "")})


def _actions(a: dict[str, Any], session: Session | None, max_shelve_s: float | None,
             place: str | None = None) -> str:
    if session is None:
        return ('<h2>Act on it</h2><p><a href="/login?next=/advisories/'
                f'{quote(a["id"], safe="")}">Sign in</a> to acknowledge or shelve.</p>')
    if a["audience"] not in session.user.audiences:
        return (f'<h2>Act on it</h2><p class="muted">Only people of the {h(a["audience"])} '
                "audience may acknowledge or shelve this advisory.</p>")
    if not session.user.may_act(a["audience"], place):
        return ('<h2>Act on it</h2><p class="muted">Only people of the '
                f'{h(a["audience"])} audience for {h(place or "this space")} may acknowledge '
                "or shelve this advisory.</p>")
    base = f'/advisories/{quote(a["id"], safe="")}'
    csrf = f'<input type="hidden" name="csrf" value="{h(session.csrf)}">'
    out = ["<h2>Act on it</h2>"]
    state = a["state"]
    if state == "active":
        out.append(f'<form class="act" method="post" action="{base}/acknowledge">{csrf}'
                   '<label>Note (optional) <input type="text" name="note" maxlength="1000">'
                   '</label><button type="submit" id="acknowledge">Acknowledge</button>'
                   "</form>")
    if state in ("active", "acknowledged"):
        limit = int(max_shelve_s or 3600)
        options = [m for m in (5, 15, 30, 60, 120, 240, 480, 1440) if m * 60 <= limit] or [
            max(1, limit // 60)]
        opts = "".join(f'<option value="{m * 60}">{m} min</option>' for m in options)
        out.append(f'<form class="act" method="post" action="{base}/shelve">{csrf}'
                   '<label>Reason <input type="text" name="reason" required maxlength="1000">'
                   f'</label><label>For <select name="duration_s">{opts}</select></label>'
                   f'<p class="note">This rule may be shelved for at most {limit // 60} min.'
                   '</p><button type="submit" id="shelve">Shelve</button></form>')
    if state == "shelved":
        out.append(f'<form class="act" method="post" action="{base}/unshelve">{csrf}'
                   '<label>Note (optional) <input type="text" name="note" maxlength="1000">'
                   '</label><button type="submit" id="unshelve">Unshelve</button></form>')
    return "".join(out)

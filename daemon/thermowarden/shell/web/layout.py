"""The frame of every page of the web app: its one stylesheet, the security headers sent
with every response, the header with who is signed in, messages for them, and the caution
at the foot. Plain server-rendered HTML: no scripts and no style attributes; the
Content-Security-Policy (:data:`SECURITY_HEADERS`) allows the one stylesheet by its hash."""

from __future__ import annotations

import base64
import hashlib
from urllib.parse import quote

from thermowarden.shell.web.fragments import h
from thermowarden.shell.web.live import SiteDirectory
from thermowarden.shell.web.users import Session

REFRESH_S = 30
CSS = """
:root{--fg:#1d2327;--muted:#5d6870;--bg:#f6f7f8;--card:#fff;--line:#d5dade;
--low:#4f6d7a;--medium:#9a6b00;--high:#b3471d;--urgent:#a1002a;--ok:#2f7d32}
*{box-sizing:border-box}
body{margin:0;font:16px/1.45 system-ui,-apple-system,"Segoe UI",Roboto,sans-serif;
color:var(--fg);background:var(--bg)}
header{background:#233440;color:#fff;padding:.6rem 1rem;display:flex;flex-wrap:wrap;
gap:.4rem 1rem;align-items:baseline;justify-content:space-between}
header a{color:#fff}
header h1{font-size:1.15rem;margin:0}
main{max-width:70rem;margin:0 auto;padding:.8rem}
h2{font-size:1.1rem;margin:1.2rem 0 .5rem}
a{color:#1f5f8b}
.note{font-size:.85rem;color:var(--muted)}
.muted{color:var(--muted)}
.cards{display:grid;grid-template-columns:repeat(auto-fill,minmax(min(16rem,100%),1fr));
gap:.7rem}
.card{background:var(--card);border:1px solid var(--line);border-radius:.5rem;padding:.7rem}
.card h3{margin:0 0 .3rem;font-size:1rem}
.kv{display:grid;grid-template-columns:auto auto;gap:.1rem .8rem;margin:0}
.kv dt{color:var(--muted)}
.kv dd{margin:0;text-align:right;font-variant-numeric:tabular-nums;overflow-wrap:anywhere}
.badge{display:inline-block;border-radius:.3rem;padding:0 .4rem;font-size:.8rem;
color:#fff;background:var(--low);vertical-align:middle}
.badge.medium{background:var(--medium)}.badge.high{background:var(--high)}
.badge.urgent{background:var(--urgent)}.badge.state{background:#56606a}
.badge.plain{background:#e4e8eb;color:var(--fg)}
ul.adv{list-style:none;margin:0;padding:0}
ul.adv li{background:var(--card);border:1px solid var(--line);border-left:.35rem solid
var(--low);border-radius:.4rem;padding:.5rem .7rem;margin:0 0 .5rem}
ul.adv li.medium{border-left-color:var(--medium)}ul.adv li.high{border-left-color:var(--high)}
ul.adv li.urgent{border-left-color:var(--urgent)}
table{border-collapse:collapse;width:100%;background:var(--card)}
th,td{border-bottom:1px solid var(--line);padding:.3rem .4rem;text-align:left;
vertical-align:top}
td.num{text-align:right;font-variant-numeric:tabular-nums}
.scroll{overflow-x:auto}
.stale{color:var(--high);font-weight:600}.fresh{color:var(--ok)}
.charts{display:grid;grid-template-columns:repeat(auto-fill,minmax(min(26rem,100%),1fr));
gap:.7rem}
figure.chart{margin:0;background:var(--card);border:1px solid var(--line);
border-radius:.5rem;padding:.5rem}
figcaption{font-weight:600;margin-bottom:.2rem}
svg.plot{width:100%;height:auto;display:block}
svg.plot text{font-size:11px;fill:#4a545c}
svg.plot .grid{stroke:#e3e7ea;stroke-width:1}
svg.plot .frame{fill:none;stroke:#b7c0c6}
.legend{font-size:.8rem;color:var(--muted);display:flex;flex-wrap:wrap;gap:.2rem .8rem}
.key svg{margin-right:.25rem;vertical-align:middle}
form.act{background:var(--card);border:1px solid var(--line);border-radius:.5rem;
padding:.7rem;margin:0 0 .7rem}
form.act label{display:block;margin:.3rem 0}
input,select,textarea,button{font:inherit;max-width:100%}
input[type=text],input[type=password],textarea{width:100%;padding:.35rem}
button{padding:.4rem .9rem;border-radius:.35rem;border:1px solid #1f5f8b;
background:#1f5f8b;color:#fff;cursor:pointer}
.flash{background:#e8f2e8;border:1px solid #9cc59e;padding:.5rem .7rem;border-radius:.4rem}
.flash.error{background:#fbeaea;border-color:#d79a9a}
.cautions li{margin:.2rem 0}
form.inline{display:inline}
button.small{padding:.1rem .5rem}
form.search{display:flex;flex-wrap:wrap;gap:.4rem .6rem;align-items:flex-end;
background:var(--card);border:1px solid var(--line);border-radius:.5rem;padding:.6rem}
form.search .field{display:flex;flex-direction:column;font-size:.85rem;color:var(--muted)}
form.search .grow{flex:1 1 12rem}
form.search input[type=search]{width:100%;padding:.35rem}
table.rollup tr.top td{font-weight:600}
table.rollup tr.sub td:first-child{padding-left:1.2rem}
nav.pager{display:flex;flex-wrap:wrap;gap:.3rem .6rem;margin:.8rem 0}
nav.pager .here{font-weight:700}
@media (max-width:40rem){
table.fit thead{display:none}
table.fit tr{display:block;border-bottom:1px solid var(--line);padding:.2rem 0}
table.fit td{display:flex;justify-content:space-between;gap:.6rem;border:0;
padding:.1rem .4rem;text-align:right}
table.fit td::before{content:attr(data-label);color:var(--muted);text-align:left}
table.fit tr.sub td:first-child{padding-left:.4rem}
table.fit td.method{flex-direction:column;gap:0;text-align:left}
table.stack tr{display:flex;flex-wrap:wrap;align-items:baseline;column-gap:.6rem}
table.stack td:first-child{flex:1 1 10rem;text-align:left;font-weight:600}
table.stack td:first-child::before,table.stack td.bare::before,
table.stack td.method::before{content:none}
table.stack td.method{flex:1 1 100%;font-size:.8rem}
}
"""

SECURITY_HEADERS: dict[str, str] = {
    # no scripts, no plug-ins, no frames; only the page's own stylesheet (by its hash),
    # forms back to this site, and no framing by other sites (clickjacking); the page
    # keeps working with all of it
    "Content-Security-Policy": (
        "default-src 'none'; style-src 'sha256-"
        + base64.b64encode(hashlib.sha256(CSS.encode("utf-8")).digest()).decode("ascii")
        + "'; img-src 'self' data:; form-action 'self'; frame-ancestors 'none'; "
        "base-uri 'none'"),
    "X-Frame-Options": "DENY",
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "same-origin",
}
"""Sent with every response of the web page and API (W3C CSP Level 3, including
``frame-ancestors``; ``X-Frame-Options`` for browsers without it)."""

CAUTION = ("Advisory only: thermowarden never switches or moves anything. Heat-stress figures "
           "are screening values; follow local regulations and a qualified occupational "
           "hygienist.")


def page(title: str, body: str, directory: SiteDirectory, session: Session | None,
         refresh: bool = False, here: str = "/") -> str:
    return page_html(title, body, directory, session, refresh, here)


def page_html(title: str, body: str, directory: SiteDirectory, session: Session | None,
              refresh: bool = False, here: str = "/") -> str:
    who = (f'{h(session.user.name)} <form method="post" action="/logout" class="inline">'
           f'<input type="hidden" name="csrf" value="{h(session.csrf)}">'
           '<button type="submit" class="small">Sign out</button></form>'
           if session else f'<a href="/login?next={quote(here, safe="")}">Sign in</a>')
    flash = ""
    if session and session.flash:
        msgs, session.flash[:] = list(session.flash), []
        flash = "".join(
            f'<p class="flash{" error" if m.startswith("!") else ""}" role="status">'
            f'{h(m.lstrip("!"))}</p>' for m in msgs)
    meta = f'<meta http-equiv="refresh" content="{REFRESH_S}">' if refresh else ""
    return (f'<!doctype html><html lang="en"><head><meta charset="utf-8">'
            f'<meta name="viewport" content="width=device-width, initial-scale=1">{meta}'
            f'<title>{h(title)} · thermowarden</title><style>{CSS}</style></head><body>'
            f'<header><h1><a href="/">{h(directory.site_name)}</a></h1>'
            f'<span class="who">{who}</span></header><main>{flash}{body}'
            f'<p class="note">{h(CAUTION)}</p></main></body></html>')

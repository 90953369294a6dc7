"""The web app's sign-in page (read-only when no users are configured)."""

from __future__ import annotations

from thermowarden.shell.web.fragments import h
from thermowarden.shell.web.layout import page
from thermowarden.shell.web.live import SiteDirectory


def login_page(directory: SiteDirectory, next_url: str, error: str | None,
               enabled: bool) -> str:
    if not enabled:
        body = ('<h2>Sign in</h2><p class="muted">No users are configured for this service '
                "(web.users_file): the page is read-only.</p>")
    else:
        err = f'<p class="flash error">{h(error)}</p>' if error else ""
        body = (f'<h2>Sign in</h2>{err}<form class="act" method="post" action="/login">'
                f'<input type="hidden" name="next" value="{h(next_url)}">'
                '<label>Name <input type="text" name="name" autocomplete="username" required>'
                '</label><label>Password <input type="password" name="password" '
                'autocomplete="current-password" required></label>'
                '<button type="submit" id="sign-in">Sign in</button></form>')
    return page("Sign in", body, directory, None)

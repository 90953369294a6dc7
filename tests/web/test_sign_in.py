"""Sign-in: optional for reading (``web.sign_in_to_read``) and required for acting; roles
per audience and building from the users file; sessions kept in the store survive a
restart of the web server (a new process reads the same SQLite file)."""

from __future__ import annotations

import json
import urllib.error
import urllib.parse
import urllib.request
from collections.abc import Iterator

import pytest

from tests.web.test_overview_scale import PACK, free_port, site_text
from thermowarden.config import ConfigError, load_site
from thermowarden.engine import Engine
from thermowarden.rules import load_rule_packs
from thermowarden.shell.inbox import Inbox
from thermowarden.shell.web import build_web
from thermowarden.shell.web.users import Sessions, hash_password, load_users
from thermowarden.site_model import build_site_model

PASSWORDS = {"north-lead": "north-pass-1", "reader": "reader-pass-2", "all-safety": "s-pass-3"}


class NoRedirect(urllib.request.HTTPRedirectHandler):
    def redirect_request(self, *args, **kwargs):  # noqa: ANN002, ANN003
        return None


OPENER = urllib.request.build_opener(NoRedirect)


def call(base: str, path: str, method: str = "GET", body: object = None,
         headers: dict[str, str] | None = None, form: dict[str, str] | None = None
         ) -> tuple[int, dict[str, str], str]:
    data = None
    hdrs = dict(headers or {})
    if body is not None:
        data = json.dumps(body).encode()
        hdrs["content-type"] = "application/json"
    if form is not None:
        data = urllib.parse.urlencode(form).encode()
        hdrs["content-type"] = "application/x-www-form-urlencoded"
    req = urllib.request.Request(base + path, data=data, method=method, headers=hdrs)
    try:
        with OPENER.open(req, timeout=20) as r:
            return r.status, dict(r.headers.items()), r.read().decode()
    except urllib.error.HTTPError as exc:
        with exc:
            return exc.code, dict(exc.headers.items()), exc.read().decode()


def users_file(path) -> None:
    lines = ["users:"]
    for name, audiences, buildings in (("north-lead", "[safety]", "[b1]"),
                                       ("reader", "[]", None),
                                       ("all-safety", "[safety, facilities]", None)):
        lines += [f"  - name: {name}", f"    audiences: {audiences}"]
        if buildings:
            lines.append(f"    buildings: {buildings}")
        lines.append(f'    password_hash: "{hash_password(PASSWORDS[name], iterations=1000)}"')
    path.write_text("\n".join(lines) + "\n")


class Site:
    def __init__(self, tmp) -> None:
        self.tmp = tmp
        (tmp / "packs").mkdir(exist_ok=True)
        (tmp / "packs" / "warm.yaml").write_text(PACK)
        users_file(tmp / "users.yaml")
        self.port = free_port()
        site = tmp / "site.yaml"
        site.write_text(site_text(self.port).replace(
            "web: {enabled: true,", "web: {enabled: true, users_file: users.yaml, "
            "sign_in_to_read: true,"))
        self.site = site
        self.config = load_site(site, {})
        self.packs = load_rule_packs(["warm"], self.config.rule_dirs, base=site)
        engine = Engine(self.config, build_site_model(self.config), self.packs)
        now = 1_780_000_000.0
        engine.messages([(f"big/{s.building}/{s.floor}/{s.topic_word}/ta",
                          b"31" if k % 23 == 0 else b"22", now, False)
                         for k, s in enumerate(self.config.spaces)])
        self.effects = engine.tick(now + 1)
        self.now = now + 1
        self.server = None

    def start(self):
        self.port = free_port()
        config = self.config.model_copy(update={"web": self.config.web.model_copy(
            update={"port": self.port})})
        view, server, _ = build_web(config, self.site, self.packs, Inbox(16),
                                    self.tmp / "store.sqlite3", lambda: self.now)
        view.observe(self.effects)
        self.view = view
        self.server = server.start()
        self.base = f"http://127.0.0.1:{self.port}"
        return self

    def stop(self) -> None:
        if self.server is not None:
            self.server.stop()
            self.server = None

    def token(self, name: str) -> str:
        status, _, text = call(self.base, "/api/session", "POST",
                               {"name": name, "password": PASSWORDS[name]})
        assert status == 201, text
        return str(json.loads(text)["token"])


@pytest.fixture
def site(tmp_path) -> Iterator[Site]:
    s = Site(tmp_path).start()
    try:
        yield s
    finally:
        s.stop()


def test_reading_needs_a_sign_in_when_the_site_says_so(site):
    status, headers, _ = call(site.base, "/?where=b1")
    assert status == 303 and headers["location"] == "/login?next=%2F%3Fwhere%3Db1"
    for path in ("/spaces/b1-100", "/advisories/x"):
        assert call(site.base, path)[0] == 303
    for path in ("/api/spaces", "/api/advisories", "/api/events",
                 "/api/spaces/b1-100/conditions"):
        status, headers, _ = call(site.base, path)
        assert status == 401 and headers["www-authenticate"] == "Bearer", path
    assert call(site.base, "/login")[0] == 200
    assert call(site.base, "/api/openapi.json")[0] == 200
    # a reader without audiences signs in and reads, by token and by cookie
    token = site.token("reader")
    status, _, text = call(site.base, "/api/spaces", headers={"Authorization":
                                                              f"Bearer {token}"})
    assert status == 200 and len(json.loads(text)["spaces"]) == 600
    status, headers, _ = call(site.base, "/login", "POST", form={
        "name": "reader", "password": PASSWORDS["reader"], "next": "/?where=b2"})
    assert status == 303 and headers["location"] == "/?where=b2"
    cookie = headers["set-cookie"].split(";")[0]
    status, _, html = call(site.base, "/?where=b2", headers={"Cookie": cookie})
    assert status == 200 and 'data-space="b2-100"' in html
    # wrong password: no session, still no reading
    status, _, _ = call(site.base, "/api/session", "POST",
                        {"name": "reader", "password": "wrong"})
    assert status == 401


def test_roles_per_audience_and_building(site):
    live = site.view.live()
    safety = [a for a in live if a["audience"] == "safety"]
    in_b1 = next(a for a in safety if a["space"]["id"].startswith("b1-"))
    in_b2 = next(a for a in safety if a["space"]["id"].startswith("b2-"))
    facilities_b1 = next(a for a in live if a["audience"] == "facilities"
                         and a["space"]["id"].startswith("b1-"))

    def ack(name: str, advisory: dict) -> tuple[int, str]:
        status, _, text = call(site.base, f"/api/advisories/{advisory['id']}/acknowledge",
                               "POST", {"note": "seen"},
                               {"Authorization": f"Bearer {site.token(name)}"})
        return status, text

    status, text = ack("north-lead", in_b2)
    assert status == 403 and "may not act on advisories of b2" in text
    status, text = ack("north-lead", facilities_b1)
    assert status == 403 and "for facilities" in text
    status, text = ack("reader", in_b1)
    assert status == 403
    # allowed: the command goes on to the engine (none runs here, so it is not taken in
    # time: 503 after the bridge's wait, not 403)
    status, text = ack("north-lead", in_b1)
    assert status == 503 and "did not take the command" in text
    # the advisory page says who may act
    _, headers, _ = call(site.base, "/login", "POST", form={
        "name": "north-lead", "password": PASSWORDS["north-lead"], "next": "/"})
    cookie = headers["set-cookie"].split(";")[0]
    _, _, page = call(site.base, f"/advisories/{in_b2['id']}", headers={"Cookie": cookie})
    assert "for b2 may acknowledge" in page and 'id="acknowledge"' not in page
    _, _, page = call(site.base, f"/advisories/{in_b1['id']}", headers={"Cookie": cookie})
    assert 'id="acknowledge"' in page


def test_sessions_survive_a_restart(site):
    token = site.token("all-safety")
    auth = {"Authorization": f"Bearer {token}"}
    assert call(site.base, "/api/spaces", headers=auth)[0] == 200
    status, headers, _ = call(site.base, "/login", "POST", form={
        "name": "reader", "password": PASSWORDS["reader"], "next": "/"})
    cookie = headers["set-cookie"].split(";")[0]
    site.stop()
    site.start()  # a new server, new Sessions, the same store
    assert call(site.base, "/api/spaces", headers=auth)[0] == 200
    assert call(site.base, "/", headers={"Cookie": cookie})[0] == 200
    # signing out ends it for good, also for the next start
    assert call(site.base, "/api/session", "DELETE", headers=auth)[0] == 204
    site.stop()
    site.start()
    assert call(site.base, "/api/spaces", headers=auth)[0] == 401
    assert call(site.base, "/", headers={"Cookie": cookie})[0] == 200
    # the store keeps a hash of the token, never the token
    store = (site.tmp / "store.sqlite3").read_bytes()
    assert token.encode() not in store


def test_kept_sessions_expire_and_follow_the_users_file(tmp_path):
    users_file(tmp_path / "users.yaml")
    users = load_users(tmp_path / "users.yaml")
    store = tmp_path / "store.sqlite3"
    a = Sessions(users, 60.0, store=store)
    s = a.sign_in("north-lead", PASSWORDS["north-lead"])
    assert s is not None
    b = Sessions(users, 60.0, store=store)
    again = b.get(s.token)
    assert again is not None and again.user.buildings == frozenset({"b1"})
    assert again.csrf == s.csrf
    # a user removed from the users file: the kept session is gone
    c = Sessions({k: v for k, v in users.items() if k != "north-lead"}, 60.0, store=store)
    assert c.get(s.token) is None
    s2 = a.sign_in("reader", PASSWORDS["reader"])
    assert s2 is not None
    d = Sessions(users, 60.0, store=store)
    d.now = lambda: s2.expires + 1  # type: ignore[method-assign]
    assert d.get(s2.token) is None


def test_sign_in_to_read_needs_users_and_known_buildings(tmp_path):
    s = Site(tmp_path)
    text = s.site.read_text()
    s.site.write_text(text.replace("users_file: users.yaml, ", ""))
    with pytest.raises(ConfigError) as exc:
        load_site(s.site, {})
    assert "sign_in_to_read needs a users_file" in str(exc.value.issues[0])
    s.site.write_text(text)
    (tmp_path / "users.yaml").write_text((tmp_path / "users.yaml").read_text().replace(
        "buildings: [b1]", "buildings: [b9]"))
    with pytest.raises(ConfigError) as exc:
        s.start()
    assert "names building 'b9', which the site does not have" in str(exc.value.issues[0])

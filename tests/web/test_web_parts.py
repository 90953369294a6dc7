"""The web side's parts without a broker: password hashes, the users file, sessions, the
live view fed with effects, the charts and the time parameters."""

from __future__ import annotations

import base64
import datetime as dt
import json
import logging
import pathlib

import pytest

from thermowarden.config import ConfigError
from thermowarden.effects import Persist, Publish
from thermowarden.shell.web.live import LiveView
from thermowarden.shell.web.plots import Band, Chart, Line, render
from thermowarden.shell.web.requests import BadRequest, parse_time
from thermowarden.shell.web.users import (
    FAILURES_ALLOWED,
    Sessions,
    check_hash,
    hash_password,
    load_users,
    verify_password,
)

REPO = pathlib.Path(__file__).resolve().parents[2]


def test_pbkdf2_sha256_matches_the_published_vector():
    # RFC 7914 section 11, PBKDF2-HMAC-SHA256 test vector (P "Password", S "NaCl",
    # c 80000, first 32 of the 64 bytes) [memory; the RFC lists the 64 bytes]
    expected = bytes.fromhex("4ddcd8f60b98be21830cee5ef22701f9641a4418d04c0414aeff08876b34ab56")
    encoded = hash_password("Password", iterations=80_000, salt=b"NaCl")
    digest = encoded.split("$")[3]
    assert base64.b64decode(digest + "=" * (-len(digest) % 4)) == expected


def test_hashes_verify_and_refuse():
    h = hash_password("correct horse", iterations=2000)
    assert verify_password("correct horse", h)
    assert not verify_password("correct horse ", h)
    assert h != hash_password("correct horse", iterations=2000)  # a new salt each time
    for bad in ("plain", "md5$1$a$b", "pbkdf2_sha256$10$c2FsdHNhbHQ$" + "A" * 43,
                "pbkdf2_sha256$x$c2FsdHNhbHQ$abc"):
        with pytest.raises(ValueError):
            check_hash(bad)


def test_sample_users_file_loads():
    users = load_users(REPO / "deploy" / "web" / "users.example.yaml")
    assert users and all(u.audiences for u in users.values())


def test_bad_users_file_names_file_and_line(tmp_path):
    p = tmp_path / "users.yaml"
    p.write_text("users:\n  - name: ana\n    audiences: [safety, cooks]\n"
                 f"    password_hash: \"{hash_password('x', 2000)}\"\n")
    with pytest.raises(ConfigError) as err:
        load_users(p)
    text = str(err.value)
    assert "users.yaml:3" in text and "audiences" in text
    p.write_text("users:\n  - name: ana\n    audiences: [safety]\n    password_hash: secret\n")
    with pytest.raises(ConfigError) as err:
        load_users(p)
    assert "users.yaml:4" in str(err.value) and "pbkdf2_sha256" in str(err.value)


def _sessions(tmp_path, lifetime: float = 100.0) -> tuple[Sessions, list[float]]:
    p = tmp_path / "users.yaml"
    p.write_text("users:\n  - name: ana\n    audiences: [safety]\n"
                 f"    password_hash: \"{hash_password('pw', 2000)}\"\n")
    s = Sessions(load_users(p), lifetime)
    clock = [1000.0]
    s.now = lambda: clock[0]
    return s, clock


def test_sessions_expire(tmp_path):
    s, clock = _sessions(tmp_path, lifetime=100.0)
    session = s.sign_in("ana", "pw")
    assert session is not None and session.user.audiences == frozenset({"safety"})
    clock[0] += 99.0
    assert s.get(session.token) is session
    clock[0] += 1.0
    assert s.get(session.token) is None
    assert s.get(None) is None and s.get("") is None


def test_repeated_failures_lock_the_name_for_a_while(tmp_path):
    s, clock = _sessions(tmp_path)
    for _ in range(FAILURES_ALLOWED):
        assert s.sign_in("ana", "wrong") is None
    assert s.sign_in("ana", "pw") is None  # locked, even with the right password
    clock[0] += 301.0
    assert s.sign_in("ana", "pw") is not None


def test_failed_sign_ins_and_the_lock_are_logged(tmp_path, caplog):
    caplog.set_level(logging.INFO, logger="thermowarden.web")
    s, clock = _sessions(tmp_path)
    assert s.sign_in("nobody", "guess-1", "192.0.2.7") is None
    for _ in range(FAILURES_ALLOWED):
        assert s.sign_in("ana", "guess-2", "192.0.2.8") is None
    for _ in range(3):
        assert s.sign_in("ana", "pw", "192.0.2.9") is None  # locked
    clock[0] += 301.0
    assert s.sign_in("ana", "pw", "192.0.2.8") is not None
    lines = [r.getMessage() for r in caplog.records]
    levels = {r.getMessage(): r.levelname for r in caplog.records}
    assert lines[0].startswith("web sign-in as 'nobody' from 192.0.2.7 failed: unknown name")
    failed = [x for x in lines if x.startswith("web sign-in as 'ana' from 192.0.2.8 failed: "
                                                "wrong password")]
    assert len(failed) == FAILURES_ALLOWED
    locked = [x for x in lines if "locked for up to 300 s after 5 failures" in x]
    assert len(locked) == 1
    refused = [x for x in lines if "from 192.0.2.9 refused: locked" in x]
    assert len(refused) == 1  # the first attempt while locked; the others are counted
    assert lines[-1] == ("web sign-in as 'ana' from 192.0.2.8; 3 attempt(s) were refused "
                         "while it was locked")
    assert levels[lines[-1]] == "INFO" and all(levels[x] == "WARNING" for x in failed + locked)
    assert not any("guess" in x for x in lines)  # never a password


def test_live_view_keeps_copies_of_what_was_published():
    view = LiveView("p")
    history = [{"at": "2026-07-14T10:00:00Z", "event": "raised"}]
    adv = {"id": "a.r.1", "space": {"id": "a"}, "audience": "safety", "priority": "high",
           "raised_at": "2026-07-14T10:00:00Z", "history": history}
    cond = {"space": {"id": "a"}, "at": "2026-07-14T10:00:00Z"}
    view.observe([Publish("p/spaces/a/conditions", cond, retain=True),
                  Publish("p/spaces/a/advisories/r", adv, retain=True),
                  Persist("event", "a.r.1", {"x": 1})])
    assert view.conditions_of("a") is cond
    history.append({"at": "later", "event": "renotified"})  # the engine goes on
    assert len(view.advisory("a.r.1")["history"]) == 1
    newer = {**adv, "id": "a.r.2", "priority": "low", "raised_at": "2026-07-14T11:00:00Z"}
    other = {**adv, "id": "b.q.1", "space": {"id": "b"}, "priority": "urgent"}
    view.observe([Publish("p/spaces/a/advisories/r", newer, retain=True),
                  Publish("p/spaces/b/advisories/q", other, retain=True)])
    assert view.advisory("a.r.1") is None  # replaced on its topic
    assert [a["id"] for a in view.live()] == ["b.q.1", "a.r.2"]  # most urgent first
    assert [a["id"] for a in view.live("a")] == ["a.r.2"]
    view.observe([Publish("p/spaces/a/advisories/r", None, retain=True)])
    assert view.live("a") == []


def test_chart_draws_lines_with_gaps_and_escapes_labels():
    t0 = 1_784_000_000.0
    times = [t0 + 300 * k for k in range(10)]
    values = [20.0, 21.0, None, 22.0, 23.0, 24.0, 25.0, None, None, 26.0]
    svg = render(Chart("<T>", "°C", times, lines=[Line("a&b", values, "#000")],
                       bands=[Band("band", [19.0] * 10, [25.0] * 10, "#0f0")]),
                 t0, t0 + 3000, dt.UTC)
    assert svg.count("<polyline") == 2 and svg.count("<circle") == 1  # three runs
    assert "&lt;T&gt;" in svg and "a&amp;b" in svg and "<T>" not in svg
    assert "<polygon" in svg
    empty = render(Chart("none", "", [], lines=[Line("x", [], "#000")]), t0, t0 + 1, dt.UTC)
    assert "No stored values" in empty


def test_time_parameters():
    assert parse_time("2026-07-14T12:00:00Z", "t") == 1784030400.0
    assert parse_time("2026-07-14t13:00:00+01:00", "t") == 1784030400.0
    assert parse_time("2026-12-31T23:59:60Z", "t") == dt.datetime(
        2026, 12, 31, 23, 59, 59, tzinfo=dt.UTC).timestamp()
    for bad in ("2026-07-14T12:00:00", "yesterday", ""):
        with pytest.raises(BadRequest):
            parse_time(bad, "t")


def test_openapi_document_ships_and_covers_the_api():
    from thermowarden.shell.web.routes.api import openapi_document

    doc = openapi_document()
    assert doc["openapi"].startswith("3.")
    assert {"/api/spaces", "/api/spaces/{space_id}/conditions",
            "/api/spaces/{space_id}/history", "/api/advisories", "/api/events",
            "/api/session"} <= set(doc["paths"])
    for verb in ("acknowledge", "shelve", "unshelve"):
        op = doc["paths"][f"/api/advisories/{{advisory_id}}/{verb}"]["post"]
        assert op["security"] == [{"session": []}] and "401" in op["responses"]
    json.dumps(doc)


def _web_user(*args: str, password: str = "a long password"):
    import subprocess
    import sys

    return subprocess.run([sys.executable, "-m", "thermowarden.cli", "web-user", *args],
                          input=password + "\n", capture_output=True, text=True, timeout=60)


def test_web_user_command_prints_a_whole_loadable_file(tmp_path):
    r = _web_user("dee", "--audience", "safety", "--audience", "integrator")
    assert r.returncode == 0, r.stderr
    p = tmp_path / "users.yaml"
    p.write_text(r.stdout)
    entry = load_users(p)["dee"]
    assert entry.audiences == ["integrator", "safety"]
    assert verify_password("a long password", entry.password_hash)
    assert check_hash(entry.password_hash)[0] == 600_000


def test_web_user_command_writes_adds_and_replaces_in_a_users_file(tmp_path):
    import stat

    p = tmp_path / "users.yaml"
    assert _web_user("dee", "--audience", "safety", "--file", str(p)).returncode == 0
    assert stat.S_IMODE(p.stat().st_mode) == 0o600
    r = _web_user("ana", "--audience", "facilities", "--file", str(p))
    assert r.returncode == 0 and "added ana" in r.stdout
    r = _web_user("dee", "--audience", "integrator", "--file", str(p),
                  password="another long one")
    assert r.returncode == 0 and "replaced dee" in r.stdout
    users = load_users(p)
    assert sorted(users) == ["ana", "dee"] and users["dee"].audiences == ["integrator"]
    assert verify_password("another long one", users["dee"].password_hash)
    # a file that is not a users file is left alone
    p.write_text("- name: x\n")
    r = _web_user("eve", "--audience", "safety", "--file", str(p))
    assert r.returncode == 78 and "not changed" in r.stderr
    assert p.read_text() == "- name: x\n"


def test_check_reads_the_users_file_as_run_does(tmp_path):
    from thermowarden.site_check import check_site

    site = tmp_path / "site.yaml"
    site.write_text((REPO / "deploy" / "example-site.yaml").read_text()
                    + "\nweb: {enabled: true, port: 1, users_file: users.yaml}\n")
    report = check_site(str(site))
    assert not report.ok and "does not exist" in str(report.issues[0])
    # entries without the users: key (what a bare entry pasted into a file gives)
    (tmp_path / "users.yaml").write_text("  - name: ana\n    audiences: [safety]\n"
                                         "    password_hash: x\n")
    assert not check_site(str(site)).ok
    assert _web_user("ana", "--audience", "safety", "--file",
                     str(tmp_path / "users.yaml")).returncode == 78
    (tmp_path / "users.yaml").unlink()
    assert _web_user("ana", "--audience", "safety", "--file",
                     str(tmp_path / "users.yaml")).returncode == 0
    assert check_site(str(site)).ok


@pytest.mark.broker
def test_run_starts_with_a_users_file_made_by_web_user(tmp_path, web_broker_port):
    import urllib.error
    import urllib.request
    import uuid

    from tests.shell.conftest import (
        ServiceProcess,
        clear_retained,
        free_port,
        wait_for,
        write_site,
    )

    port = free_port()
    prefix = f"tw{uuid.uuid4().hex[:6]}"
    site = write_site(tmp_path, prefix, web_broker_port, ["r1"],
                      extra=f"web: {{enabled: true, port: {port}, users_file: users.yaml}}\n")
    assert _web_user("ana", "--audience", "safety", "--file",
                     str(tmp_path / "users.yaml")).returncode == 0
    service = ServiceProcess(site, tmp_path / "state").start()

    def sign_in() -> dict | None:
        req = urllib.request.Request(
            f"http://127.0.0.1:{port}/api/session", method="POST",
            data=json.dumps({"name": "ana", "password": "a long password"}).encode(),
            headers={"Content-Type": "application/json"})
        try:
            with urllib.request.urlopen(req, timeout=10) as r:
                return json.load(r)
        except urllib.error.HTTPError as exc:
            exc.close()
            return None
        except OSError:
            return None

    try:
        got: list[dict] = []
        wait_for(lambda: bool(got.append(sign_in() or {}) or got[-1]), 60,
                 "the page to sign ana in")
        assert got[-1]["name"] == "ana" and got[-1]["audiences"] == ["safety"]
    finally:
        service.stop()
        clear_retained(web_broker_port, prefix)


def test_web_section_is_checked_with_its_position(tmp_path):
    from thermowarden.config import load_site

    site = tmp_path / "site.yaml"
    site.write_text("site: {id: s, timezone: UTC}\nweb:\n  enabled: true\n  port: 0\n"
                    "  sessions: 5\n")
    with pytest.raises(ConfigError) as err:
        load_site(site, {})
    text = str(err.value)
    assert "site.yaml:4" in text and "web.port" in text
    assert "site.yaml:5" in text and "sessions" in text
    site.write_text("site: {id: s, timezone: UTC}\n")
    cfg = load_site(site, {"THERMOWARDEN_WEB__ENABLED": "true"})
    assert cfg.web.enabled and cfg.web.host == "127.0.0.1" and not load_site(site, {}).web.enabled


def test_run_refuses_a_bad_users_file_with_its_line(tmp_path):
    import subprocess
    import sys

    site = tmp_path / "site.yaml"
    site.write_text((REPO / "deploy" / "example-site.yaml").read_text()
                    + "\nweb: {enabled: true, port: 1, users_file: users.yaml}\n")
    (tmp_path / "users.yaml").write_text("users:\n  - name: ana\n    audiences: [safety]\n"
                                         "    pasword_hash: x\n")
    r = subprocess.run([sys.executable, "-m", "thermowarden.cli", "run", "--config", str(site),
                        "--state-dir", str(tmp_path / "state")],
                       capture_output=True, text=True, timeout=120)
    assert r.returncode == 78  # EX_CONFIG: the unit's RestartPreventExitStatus
    assert "users.yaml:4" in r.stderr and "pasword_hash" in r.stderr
    assert "nothing was started" in r.stderr


@pytest.mark.parametrize("users", [
    # entries without the users: key
    "  - name: ana\n    audiences: [safety]\n    password_hash: x\n",
    # a misspelt field
    "users:\n  - name: ana\n    audiences: [safety]\n    pasword_hash: x\n",
    # a building the site does not have (the example site has none)
    "web-user:north",
    # the same person twice
    "web-user:twice",
])
def test_check_refuses_every_users_file_run_refuses(tmp_path, users):
    """``check`` and ``run`` read the users file through the same function: whatever makes
    ``run`` stop with 78 makes ``check`` fail, naming the same problem."""
    import subprocess
    import sys

    from thermowarden.site_check import check_site

    site = tmp_path / "site.yaml"
    site.write_text((REPO / "deploy" / "example-site.yaml").read_text()
                    + "\nweb: {enabled: true, port: 1, users_file: users.yaml}\n")
    path = tmp_path / "users.yaml"
    if users == "web-user:north":
        assert _web_user("ana", "--audience", "safety", "--building", "north",
                         "--file", str(path)).returncode == 0
    elif users == "web-user:twice":
        assert _web_user("ana", "--audience", "safety", "--file", str(path)).returncode == 0
        text = path.read_text()
        path.write_text(text + text.split("users:\n", 1)[1])
    else:
        path.write_text(users)
    report = check_site(str(site))
    assert not report.ok
    r = subprocess.run([sys.executable, "-m", "thermowarden.cli", "run", "--config", str(site),
                        "--state-dir", str(tmp_path / "state")],
                       capture_output=True, text=True, timeout=120)
    assert r.returncode == 78, r.stderr[-2000:]
    for issue in report.issues:
        said = str(issue).split(": ", 1)[-1]
        assert said[:40] in r.stderr, (said, r.stderr[-2000:])

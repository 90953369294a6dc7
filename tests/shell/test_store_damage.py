"""A damaged or read-only store at start: every record the service reads at start is
checked, a damaged one is named (file, table, row) and ``run`` exits 78 (EX_CONFIG: the
systemd unit does not restart it) saying what to do; ``--move-damaged-store`` keeps the
damaged store aside and starts empty; a read-only file is refused at start, not at the
first write."""

from __future__ import annotations

import json
import os
import shutil
import sqlite3
import subprocess
import sys
import uuid

import pytest

from tests.shell.conftest import (
    SLOW,
    Collector,
    ServiceProcess,
    clear_retained,
    wait_for,
    write_site,
)
from thermowarden.shell.delivery import SCHEMA as DELIVERY_SCHEMA
from thermowarden.shell.store import Store, StoreError

EX_CONFIG = 78


def run_once(site, state, *args: str) -> subprocess.CompletedProcess[str]:
    cmd = [sys.executable, "-m", "thermowarden.cli", "run", "--config", str(site),
           "--state-dir", str(state), *args]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=SLOW * 2)


def refusal(res: subprocess.CompletedProcess[str]) -> str:
    """The one line ``run`` prints when it refuses the store."""
    assert res.returncode == EX_CONFIG, res.stderr[-2000:]
    assert "Traceback" not in res.stderr
    lines = [x for x in res.stderr.splitlines() if x.startswith("thermowarden run:")]
    assert len(lines) == 1, res.stderr[-2000:]
    return lines[0]


@pytest.fixture
def live_store(tmp_path, system_broker_port):
    """A store left by a real run: one live advisory (room-a is hot), its events sent."""
    port = system_broker_port
    prefix = f"twdamage-{uuid.uuid4().hex[:6]}"
    site = write_site(tmp_path, prefix, port, ["room-a"])
    state = tmp_path / "state"
    svc = ServiceProcess(site, state).start()
    sensor = Collector(port, [f"{prefix}/spaces/+/advisories/#"])
    try:
        sensor.publish(f"{prefix}-in/room-a/ta", "31.5")
        wait_for(lambda: sensor.json_on(f"{prefix}/spaces/room-a/advisories/"), SLOW,
                 "the advisory")
    finally:
        assert svc.stop() == 0
        sensor.close()
    (db,) = state.glob("*.sqlite3")
    with sqlite3.connect(db) as conn:
        keys = [r[0] for r in conn.execute("SELECT key FROM advisories")]
    assert keys == ["room-a/fast.hot"]
    yield site, state, db
    clear_retained(port, prefix)


@pytest.mark.broker
def test_non_json_record_refused_with_78_then_moved_aside(live_store, system_broker_port):
    site, state, db = live_store
    with sqlite3.connect(db) as conn:
        conn.execute("UPDATE advisories SET record = '{space: room-a' WHERE key = ?",
                     ("room-a/fast.hot",))
    line = refusal(run_once(site, state))
    assert str(db) in line and "table advisories" in line and "room-a/fast.hot" in line
    assert "not JSON" in line and "--move-damaged-store" in line
    # moved aside (kept, with the damaged record), the service starts with an empty store
    before = site.read_text()
    svc = ServiceProcess(site, state, "--move-damaged-store").start()
    try:
        aside = [f for f in state.glob("*.sqlite3.damaged-*")
                 if not f.name.endswith(("-wal", "-shm"))]
        assert len(aside) == 1
        with sqlite3.connect(aside[0]) as conn:
            assert conn.execute("SELECT record FROM advisories").fetchone()[0] == \
                "{space: room-a"
        with sqlite3.connect(db) as conn:
            assert conn.execute("SELECT COUNT(*) FROM advisories").fetchone()[0] == 0
    finally:
        assert svc.stop() == 0
    log = svc.logtext()
    assert "moved aside to " + str(aside[0]) in log and "starting with an empty store" in log
    assert site.read_text() == before
    # the next start takes the new store as it is
    svc = ServiceProcess(site, state).start()
    assert svc.stop() == 0


@pytest.mark.broker
def test_record_of_the_wrong_shape_refused(live_store):
    site, state, db = live_store
    with sqlite3.connect(db) as conn:
        (text,) = conn.execute("SELECT record FROM advisories").fetchone()
        record = json.loads(text)
        del record["payload"]["priority"]
        conn.execute("UPDATE advisories SET record = ?", (json.dumps(record),))
    line = refusal(run_once(site, state))
    assert str(db) in line and "table advisories" in line and "room-a/fast.hot" in line
    assert "priority" in line and "--move-damaged-store" in line


def test_every_table_read_at_start_is_checked(tmp_path):
    """Outbox, key-value rows, daily means and stored deliveries: each damaged row is named
    with its table and row."""
    path = tmp_path / "s.sqlite3"
    Store(path).close()
    cases = [
        ("INSERT INTO outbox(topic, payload, created) VALUES('p/events/x', 'nope', 0)",
         "table outbox, row 1: the record is not JSON"),
        ("INSERT INTO outbox(topic, payload, created) VALUES('p/events/x', '[1]', 0)",
         "table outbox, row 1: the record is not a JSON object"),
        ("INSERT INTO kv(key, value) VALUES('daily_means', '{\"a\": 1}')",
         "table kv, row 'daily_means': expected a list of numbers"),
        ("INSERT INTO kv(key, value) VALUES('daily_means', '[20.5, true]')",
         "table kv, row 'daily_means': expected a list of numbers"),
        ("INSERT INTO kv(key, value) VALUES('other', 'not json')",
         "table kv, row 'other': the record is not JSON"),
        ("INSERT INTO advisories(key, record) VALUES('a/b', '{\"space\": \"a\"}')",
         "table advisories, row 'a/b': the record lacks its space, rule or payload"),
        ("INSERT INTO deliveries(id, audience, channel, state, priority, due, created, payload)"
         " VALUES('d1', 'safety', 'pigeon', 'pending', 'high', 0, 0, '{}')",
         "table deliveries, row 1: unknown channel 'pigeon'"),
        ("INSERT INTO deliveries(id, audience, channel, state, priority, due, created, payload)"
         " VALUES('d1', 'safety', 'email', 'pending', 'high', 'soon', 0, '{}')",
         "table deliveries, row 1: due, created or attempts is not a number"),
        ("INSERT INTO deliveries(id, audience, channel, state, priority, due, created, payload)"
         " VALUES('d1', 'safety', 'email', 'pending', 'high', 0, 0, '{\"event\": ')",
         "table deliveries, row 1: the record is not JSON"),
    ]
    for sql, expected in cases:
        case = tmp_path / f"case-{uuid.uuid4().hex[:6]}.sqlite3"
        shutil.copy(path, case)
        with sqlite3.connect(case) as conn:
            conn.executescript(DELIVERY_SCHEMA)
            conn.execute(sql)
        store = Store(case)
        try:
            with pytest.raises(StoreError) as err:
                store.check_records()
        finally:
            store.close()
        text = str(err.value)
        assert text.startswith(f"store {case}: ") and expected in text, (sql, text)
        assert "--move-damaged-store" in text and "\n" not in text and err.value.damaged
    # an undamaged store passes, with rows in every table
    store = Store(path)
    store.outbox_add("p/events/x", {"event": "raised"}, 1.0)
    store.put("daily_means", [21.5, 20.0])
    store.check_records()
    assert store.daily_means() == [21.5, 20.0]
    store.close()


def make_read_only(path) -> None:
    """Read-only for this process: the mode for a normal user; for root (who ignores the
    mode) the immutable flag (chattr +i, ext2/3/4 and others)."""
    if os.geteuid() != 0:
        path.chmod(0o400)
        return
    chattr = shutil.which("chattr")
    if chattr is None:
        pytest.skip("root ignores file modes and `chattr` (Debian package e2fsprogs) is "
                    "missing")
    res = subprocess.run([chattr, "+i", str(path)], capture_output=True, text=True)
    if res.returncode != 0:
        pytest.skip(f"this file system has no immutable flag: {res.stderr.strip()}")


def undo_read_only(path) -> None:
    if os.geteuid() == 0:
        subprocess.run(["chattr", "-i", str(path)], check=False)
    path.chmod(0o600)


@pytest.mark.broker
def test_read_only_store_refused_at_start(tmp_path, system_broker_port):
    prefix = f"twro-{uuid.uuid4().hex[:6]}"
    site = write_site(tmp_path, prefix, system_broker_port, ["room-a"])
    state = tmp_path / "state"
    state.mkdir(mode=0o700)
    db = state / f"{_site_id(site)}.sqlite3"
    Store(db).close()
    for side in state.glob("*.sqlite3-*"):
        side.unlink()
    make_read_only(db)
    try:
        with pytest.raises(StoreError) as err:
            Store(db)
        assert not err.value.damaged
        for args in ((), ("--move-damaged-store",)):  # read-only is not damaged: kept
            line = refusal(run_once(site, state, *args))
            assert str(db) in line and "read-only" in line and "write access" in line
            assert not list(state.glob("*.damaged-*"))
    finally:
        undo_read_only(db)


def _site_id(site) -> str:
    import yaml

    return str(yaml.safe_load(site.read_text())["site"]["id"])

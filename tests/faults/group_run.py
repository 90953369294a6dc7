"""One fault run: a three-node nats-server cluster, a group of instances on a site of hot-work
spaces, heat-stress alerts raised and escalating, commands sent during the fault, and the
invariant checks at the end.

The group's lease store is chosen by ``store``: ``"nats"`` (a JetStream key-value bucket
on the same cluster) or ``"postgres"`` (127.0.0.1:5432, database ``test``), written into the
site file's ``group`` section; ``None`` runs the group as main's code before leases did
(``--group`` only), to see the checks catch its failures.
"""

from __future__ import annotations

import json
import os
import pathlib
import time
import uuid
from collections.abc import Callable
from typing import Any

import pytest

from tests.faults.harness import (
    ABOVE_ACTION,
    ABOVE_LIMIT,
    COOL,
    HEAT_RULE,
    Command,
    Feeder,
    Forwarder,
    Instance,
    Netns,
    Scenario,
    Timing,
    Watcher,
    space_ids,
    wait_until,
    write_site,
)
from tests.faults.invariants import Report, check_all
from tests.shell.conftest import SLOW, wait_for
from tests.shell.nats_cluster import NatsCluster, nats_program

PG_DSN = os.environ.get("THERMOWARDEN_TEST_PG", "host=127.0.0.1 port=5432 dbname=test "
                        "user=postgres connect_timeout=3")


def pg_available() -> str | None:
    """None when PostgreSQL answers at PG_DSN, else the reason."""
    try:
        import psycopg
    except ImportError:
        return "psycopg is not installed"
    try:
        with psycopg.connect(PG_DSN, autocommit=True) as c:
            c.execute("select 1")
    except Exception as exc:  # noqa: BLE001 - any failure is the reason to skip
        return f"PostgreSQL at {PG_DSN!r} does not answer: {exc}"
    return None


def group_yaml(store: str | None, timing: Timing, nats_urls: list[str], bucket: str,
               pg_dsn: str, group: str) -> str:
    """The site file's ``group`` section for the lease store (none for main's code)."""
    if store is None:
        return ""
    if store == "nats":
        servers = ", ".join(f'"{u}"' for u in nats_urls)
        backend = (f"  store: {{kind: nats, servers: [{servers}], bucket: {bucket}, "
                   f"stream_replicas: 3}}\n")
    else:
        backend = (f"  store: {{kind: postgres, dsn: \"{pg_dsn}\", table_schema: {bucket}}}"
                   "\n")
    return (f"group:\n  name: {group}\n" + backend +
            f"  lease_ttl_s: {timing.lease_ttl_s:g}\n  replicas: 1\n"
            f"  rebalance_after_s: {timing.rebalance_after_s:g}\n")


class FaultRun:
    """Sets up and tears down one run; the test drives the fault in between."""

    def __init__(self, tmp: pathlib.Path, *, store: str | None, n_spaces: int = 30,
                 timing: Timing | None = None, instances: tuple[str, ...] = ("a", "b", "c"),
                 netns_for: str | None = None, clock_step_for: str | None = None) -> None:
        self.tmp = tmp
        self.store = store
        self.timing = timing or Timing()
        self.names = instances
        self.netns_for = netns_for
        self.clock_step_for = clock_step_for
        self.group = "g"
        self.prefix = f"twf-{uuid.uuid4().hex[:8]}"
        self.spaces = space_ids(n_spaces)
        self.values: dict[str, dict[str, float]] = {s: dict(COOL) for s in self.spaces}
        self.closers: list[Callable[[], None]] = []
        self.instances: dict[str, Instance] = {}
        self.ns: Netns | None = None
        self.forwarders: dict[int, Forwarder] = {}
        self.wall_offset_file = tmp / "wall-offset"
        self.scenario = Scenario(self.prefix, self.spaces, self.timing)
        self._store_reader: Any = None
        self.bucket = f"tw{uuid.uuid4().hex[:8]}"

    # ---------------------------------------------------------------- setting up
    def start(self, first: tuple[str, ...] | None = None) -> FaultRun:
        program = nats_program()
        if program is None:
            pytest.skip("needs the `nats-server` program (Debian package `nats-server`)")
        if self.store == "postgres" and (why := pg_available()):
            pytest.skip(why)
        if self.netns_for is not None:
            try:
                self.ns = Netns.create()
            except PermissionError as exc:
                pytest.skip(f"network namespaces are not permitted here: {exc}")
            self.closers.append(self.ns.delete)
        self.cluster = NatsCluster(self.tmp / "nats", program).start()
        self.closers.append(self.cluster.stop)
        self.watcher = Watcher("127.0.0.1", self.cluster.nodes[0].mqtt, [f"{self.prefix}/#"])
        self.closers.append(self.watcher.close)
        nats_urls = [f"nats://127.0.0.1:{n.client}" for n in self.cluster.nodes]
        self.site = write_site(self.tmp, self.prefix, self.cluster.nodes[0].url, self.spaces,
                               self.timing, group_yaml(self.store, self.timing, nats_urls,
                                                       self.bucket, PG_DSN, self.group))
        if self.clock_step_for is not None:
            self.wall_offset_file.write_text("0\n")
        self.feeder = Feeder("127.0.0.1", self.cluster.nodes[0].mqtt, self.prefix, self.values)
        self.closers.append(self.feeder.stop)
        for name in first or self.names:
            self.add_instance(name)
        self.wait_ready(list(first or self.names))
        self.wait_evaluated(time.monotonic())
        return self

    def _broker_urls(self, k: int, host: str) -> str:
        order = self.cluster.nodes[k:] + self.cluster.nodes[:k]
        return ",".join(f"mqtt://{host}:{self._port(n.mqtt, host)}" for n in order)

    def _port(self, port: int, host: str) -> int:
        if host == "127.0.0.1":
            return port
        if port not in self.forwarders:
            self.forwarders[port] = Forwarder(host, port)
            self.closers.append(self.forwarders[port].close)
        return self.forwarders[port].port

    def add_instance(self, name: str) -> Instance:
        k = self.names.index(name) % len(self.cluster.nodes)
        netns = self.ns.name if (self.ns is not None and name == self.netns_for) else None
        host = self.ns.outer_ip if netns else "127.0.0.1"
        site = self.site
        if netns:  # the namespaced instance reaches the cluster (and PostgreSQL) by forwarders
            site = self._namespaced_site(host)
        inst = Instance(name, site, self.tmp / name, self._broker_urls(k, host), self.group,
                        netns=netns, http_host=self.ns.inner_ip if netns else "127.0.0.1",
                        wall_offset_file=self.wall_offset_file if name == self.clock_step_for
                        else None)
        inst.start()
        self.instances[name] = inst
        self.closers.append(inst.stop)
        return inst

    def _namespaced_site(self, host: str) -> pathlib.Path:
        text = self.site.read_text()
        for n in self.cluster.nodes:
            text = text.replace(f"127.0.0.1:{n.client}", f"{host}:{self._port(n.client, host)}")
            text = text.replace(f"127.0.0.1:{n.mqtt}", f"{host}:{self._port(n.mqtt, host)}")
        if self.store == "postgres":
            text = text.replace("host=127.0.0.1 port=5432",
                                f"host={host} port={self._port(5432, host)}")
        p = self.tmp / "site-netns.yaml"
        p.write_text(text)
        return p

    def wait_ready(self, names: list[str]) -> None:
        for n in names:
            wait_for(self.instances[n].ready, 5 * SLOW, f"instance {n} to be ready "
                     f"(log {self.instances[n].log})")

    def conditions_since(self, t0: float) -> set[str]:
        base = f"{self.prefix}/spaces/"
        return {m.topic[len(base):].split("/")[0] for m in self.watcher.snapshot()
                if m.t >= t0 and m.topic.startswith(base) and m.topic.endswith("/conditions")
                and m.payload}

    def conditions_count_since(self, t0: float) -> dict[str, int]:
        """Space -> how many conditions records the watcher received after ``t0``."""
        base = f"{self.prefix}/spaces/"
        counts: dict[str, int] = {}
        for m in self.watcher.snapshot():
            if m.t >= t0 and m.topic.startswith(base) and m.topic.endswith("/conditions") \
                    and m.payload:
                space = m.topic[len(base):].split("/")[0]
                counts[space] = counts.get(space, 0) + 1
        return counts

    def wait_evaluated(self, t0: float) -> None:
        """Every space has a conditions record received after ``t0``."""
        wait_for(lambda: self.conditions_since(t0) >= set(self.spaces), 3 * SLOW,
                 "every space to be evaluated")

    # ---------------------------------------------------------------- who holds what
    def latest_conditions(self) -> dict[str, dict[str, Any]]:
        out: dict[str, dict[str, Any]] = {}
        base = f"{self.prefix}/spaces/"
        for m in self.watcher.snapshot():
            if m.topic.startswith(base) and m.topic.endswith("/conditions"):
                d = m.json()
                if d is not None:
                    out[m.topic[len(base):].split("/")[0]] = d
        return out

    def _reader(self) -> Any:
        if self._store_reader is None:
            if self.store == "nats":
                from thermowarden.shell.leases.nats_kv import NatsLeaseStore
                r: Any = NatsLeaseStore([f"nats://127.0.0.1:{n.client}"
                                         for n in self.cluster.nodes], self.bucket,
                                        self.timing.lease_ttl_s, stream_replicas=3,
                                        timeout_s=5.0)
            else:
                from thermowarden.shell.leases.postgres import PostgresLeaseStore
                r = PostgresLeaseStore(PG_DSN, self.group, self.timing.lease_ttl_s,
                                       schema=self.bucket, timeout_s=5.0)
            r.open()
            self.closers.append(r.close)
            self._store_reader = r
        return self._store_reader

    def holders(self) -> dict[str, str]:
        """Space -> the instance that holds it: from the lease store (the shard each space
        is in from its conditions records), or on main's code from the owners records."""
        if self.store is None:
            base = f"{self.prefix}/group/{self.group}/owners/"
            owners: dict[str, str] = {}
            latest: dict[str, list[str]] = {}
            for m in self.watcher.snapshot():
                if m.topic.startswith(base):
                    d = m.json()
                    latest[m.topic[len(base):]] = list(d.get("spaces", [])) if d else []
            for name, spaces in latest.items():
                for s in spaces:
                    owners[s] = name
            return owners
        shard_of = {s: str(d["shard"]) for s, d in self.latest_conditions().items()
                    if "shard" in d}
        try:
            leases = self._reader().read(set(shard_of.values()))
        except Exception:  # noqa: BLE001 - the store may be unreachable during a fault
            return {}
        return {s: leases[sh].holder for s, sh in shard_of.items() if sh in leases}

    def spaces_of(self, name: str) -> list[str]:
        return sorted(s for s, h in self.holders().items() if h == name)

    def wait_holding(self, name: str, at_least: int, timeout: float = 3 * SLOW) -> list[str]:
        """The spaces ``name`` holds once it holds ``at_least``, spread over its shards
        (one of each shard in turn), so the hot spaces cover as many shards as they can."""
        wait_for(lambda: len(self.spaces_of(name)) >= at_least, timeout,
                 f"instance {name} to hold {at_least} space(s)")
        held = self.spaces_of(name)
        shard = {s: str(d.get("shard")) for s, d in self.latest_conditions().items()}
        rank: dict[str, int] = {}
        order = []
        for s in held:
            k = rank[shard.get(s, "")] = rank.get(shard.get(s, ""), -1) + 1
            order.append((k, s))
        return [s for _, s in sorted(order)]

    # ---------------------------------------------------------------- the heat
    def heat_events(self, space: str | None = None) -> list[dict[str, Any]]:
        out = []
        for m in self.watcher.snapshot():
            if m.topic.startswith(f"{self.prefix}/events/"):
                d = m.json()
                if d and isinstance(d.get("advisory"), dict) and \
                        d["advisory"]["rule"] == HEAT_RULE and \
                        (space is None or d["advisory"]["space"]["id"] == space):
                    out.append(d)
        return out

    def heat_record(self, space: str) -> dict[str, Any] | None:
        topic = f"{self.prefix}/spaces/{space}/advisories/{HEAT_RULE.replace('.', '/')}"
        last: dict[str, Any] | None = None
        for m in self.watcher.snapshot():
            if m.topic == topic:
                last = m.json()
        return last

    def raise_heat(self, spaces: list[str]) -> dict[str, str]:
        """Above the action value in ``spaces``; waits for each alert; space -> its id."""
        for s in spaces:
            self.values[s] = dict(ABOVE_ACTION)
        ids: dict[str, str] = {}

        def raised() -> bool:
            for s in spaces:
                e = next((e for e in self.heat_events(s) if e["event"] == "raised"), None)
                if e is not None:
                    ids[s] = e["advisory"]["id"]
            return len(ids) == len(spaces)
        wait_for(raised, 3 * SLOW, f"heat-stress alerts in {spaces}")
        return ids

    def escalate(self, spaces: list[str]) -> None:
        for s in spaces:
            self.values[s] = dict(ABOVE_LIMIT)

    def first_urgent(self, space: str) -> float | None:
        """When the watcher first received the space's retained alert saying urgent."""
        topic = f"{self.prefix}/spaces/{space}/advisories/{HEAT_RULE.replace('.', '/')}"
        for m in self.watcher.snapshot():
            if m.topic == topic and (m.json() or {}).get("priority") == "urgent":
                return m.t
        return None

    def wait_urgent(self, spaces: list[str], timeout: float = 3 * SLOW) -> None:
        wait_for(lambda: all((self.heat_record(s) or {}).get("priority") == "urgent"
                             for s in spaces), timeout, f"urgent alerts in {spaces}")

    def warm_window(self, spaces: list[str]) -> None:
        """Wait until the time-weighted WBGT of ``spaces`` is present (80 % of the window
        covered): a takeover must keep it."""
        def present() -> bool:
            latest = self.latest_conditions()
            return all(((latest.get(s) or {}).get("indices") or {}).get(
                "wbgt_time_weighted", {}).get("value") is not None for s in spaces)
        wait_for(present, self.timing.wbgt_window_s + 3 * SLOW,
                 "the time-weighted WBGT to cover the window")

    def command(self, verb: str, advisory_id: str, during_fault: bool) -> Command:
        by = f"fault-{verb[:3]}-{uuid.uuid4().hex[:6]}"
        rid = uuid.uuid4().hex[:12]
        body: dict[str, Any] = {"advisory_id": advisory_id, "by": by, "request_id": rid,
                                "reply_to": "faults"}
        if verb == "shelve":
            body.update(reason="fault test", duration_s=600)
        c = Command(verb, advisory_id, by, rid, time.monotonic(), during_fault)
        self.watcher.publish(f"{self.prefix}/commands/safety/{verb}", json.dumps(body))
        self.scenario.commands.append(c)
        return c

    def wait_commands_answered(self) -> None:
        def answered() -> bool:
            got = {json.loads(m.payload).get("request_id") for m in self.watcher.snapshot()
                   if m.topic.startswith(f"{self.prefix}/replies") and m.payload}
            return all(c.request_id in got for c in self.scenario.commands)
        wait_until(answered, 2 * SLOW)

    # ---------------------------------------------------------------- the end
    def settle_and_check(self, t_from: float) -> Report:
        """After the fault: every space evaluated again, every command answered, the
        watcher caught up; then the invariants over everything it received."""
        t_end = time.monotonic()
        if wait_until(lambda: self.conditions_since(t_end) >= set(self.spaces),
                      3 * SLOW) is None:  # the "evaluated" check says which and how long
            self.scenario.notes.append(
                f"not evaluated again {3 * SLOW:g} s after the fault: "
                f"{sorted(set(self.spaces) - self.conditions_since(t_end))}")
        self.wait_commands_answered()
        # two more rounds of conditions for every space after the first one since the
        # fault's end, so a late gap shows (a space that gets none is left to the
        # "evaluated" check, which says how long it waited)
        wait_until(lambda: min(self.conditions_count_since(t_end).get(s, 0)
                               for s in self.spaces) >= 3, 3 * SLOW)
        self.watcher.sync(f"{self.prefix}/_sync")
        sc = self.scenario
        sc.observe_from = t_from
        sc.observe_to = time.monotonic()
        messages = self.watcher.snapshot()
        with open(self.tmp / "watcher.jsonl", "w") as fh:  # for a post-mortem
            for m in messages:
                fh.write(json.dumps({"t": round(m.t - sc.fault_started, 3), "topic": m.topic,
                                     "retained": m.retained,
                                     "payload": m.payload.decode(errors="replace")}) + "\n")
        rep = check_all(messages, sc)
        rep.figures["notes"] = sc.notes
        return rep

    def close(self) -> None:
        errors: list[BaseException] = []
        for inst in self.instances.values():  # a stopped process must be woken to end
            if inst.paused and inst.alive():
                inst.resume()
        for n in self.cluster.nodes if hasattr(self, "cluster") else []:
            if n.proc is not None and n.proc.poll() is None:
                os.kill(n.proc.pid, 18)  # SIGCONT, in case the test left it stopped
        for c in reversed(self.closers):
            try:
                c()
            except BaseException as exc:  # noqa: BLE001 - every closer runs
                errors.append(exc)
        if errors:
            raise errors[0]

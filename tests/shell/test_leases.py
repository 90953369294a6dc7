"""The lease stores against the real servers: a JetStream key-value bucket on nats-server
(127.0.0.1:4222, and a three-node cluster with a node killed) and a PostgreSQL table
(127.0.0.1:5432). The same contract for both: one holder per shard at a time, an epoch that
only grows, expiry, release, presence, and an error (never a hang) when the store is gone."""

from __future__ import annotations

import threading
import time
from collections.abc import Iterator

import pytest

from tests.shell.conftest import free_port, wait_for
from tests.shell.lease_parts import StoreFactory, need_nats, need_postgres
from tests.shell.nats_cluster import NatsCluster, nats_program
from thermowarden.shell.leases import Lease, LeaseStoreError
from thermowarden.shell.leases.nats_kv import NatsLeaseStore
from thermowarden.shell.leases.postgres import PostgresLeaseStore


@pytest.fixture(params=["nats", "postgres"])
def stores(request: pytest.FixtureRequest) -> Iterator[StoreFactory]:
    (need_nats if request.param == "nats" else need_postgres)()
    factory = StoreFactory(request.param)
    yield factory
    factory.cleanup()


def test_one_holder_and_renewal(stores: StoreFactory) -> None:
    a, b = stores(), stores()
    before = time.monotonic()
    lease = a.take("north", "a")
    assert lease is not None and lease.holder == "a" and lease.epoch >= 1
    # the deadline is on the caller's clock, from before the request: never later than TTL
    assert before + a.ttl_s <= lease.expires_mono <= time.monotonic() + a.ttl_s
    assert b.take("north", "b") is None
    assert a.take("north", "a") is None  # a live lease is renewed, not taken again
    seen = b.read(["north", "south"])
    assert set(seen) == {"north"}
    assert (seen["north"].holder, seen["north"].epoch) == ("a", lease.epoch)
    renewed = a.renew(lease)
    assert renewed is not None and renewed.epoch == lease.epoch
    assert renewed.expires_mono >= lease.expires_mono
    assert b.read(["north"])["north"].epoch == lease.epoch  # renewing keeps the epoch
    other = b.take("south", "b")
    assert other is not None and other.holder == "b"
    # b cannot renew a's lease by naming it
    assert b.renew(Lease("north", "b", lease.epoch, 0.0)) is None


def test_expiry_hands_the_shard_on_with_a_higher_epoch(stores: StoreFactory) -> None:
    a, b = stores(ttl_s=1.0), stores(ttl_s=1.0)
    first = a.take("s1", "a")
    assert first is not None
    wait_for(lambda: "s1" not in b.read(["s1"]), what="the lease to expire")
    second = b.take("s1", "b")
    assert second is not None and second.epoch > first.epoch
    assert a.renew(first) is None  # too late: it is b's now
    assert b.read(["s1"])["s1"].holder == "b"
    # and a taking it back after b's expires: higher again
    wait_for(lambda: "s1" not in a.read(["s1"]), what="b's lease to expire")
    third = a.take("s1", "a")
    assert third is not None and third.epoch > second.epoch


def test_release_frees_at_once(stores: StoreFactory) -> None:
    a, b = stores(ttl_s=30.0), stores(ttl_s=30.0)
    lease = a.take("s", "a")
    assert lease is not None
    a.release(lease)
    assert "s" not in b.read(["s"])
    taken = b.take("s", "b")
    assert taken is not None and taken.epoch > lease.epoch
    assert a.renew(lease) is None
    a.release(lease)  # releasing a lease one no longer holds changes nothing
    assert b.read(["s"])["s"].holder == "b"


def test_racing_takes_have_one_winner(stores: StoreFactory) -> None:
    racers = [stores(ttl_s=30.0) for _ in range(4)]
    for round_ in range(3):
        shard = f"race{round_}"
        got: list[Lease | None] = [None] * len(racers)
        gate = threading.Barrier(len(racers))

        def run(k: int, shard: str = shard, got: list[Lease | None] = got,
                gate: threading.Barrier = gate) -> None:
            gate.wait()
            got[k] = racers[k].take(shard, f"i{k}")

        threads = [threading.Thread(target=run, args=(k,)) for k in range(len(racers))]
        for t in threads:
            t.start()
        for t in threads:
            t.join(30)
        winners = [g for g in got if g is not None]
        assert len(winners) == 1, got
        assert racers[0].read([shard])[shard].holder == winners[0].holder


def test_presence(stores: StoreFactory) -> None:
    a, b = stores(ttl_s=1.0), stores(ttl_s=1.0)
    assert a.present() == set()
    a.announce("a")
    b.announce("b")
    assert a.present() == {"a", "b"} == b.present()
    b.withdraw("b")
    assert a.present() == {"a"}
    # a stops announcing: gone after the TTL
    wait_for(lambda: b.present() == set(), what="a's presence to expire")


def test_unreachable_store_is_an_error_not_a_hang() -> None:
    port = free_port()  # nobody listens there
    t0 = time.monotonic()
    nats_store = NatsLeaseStore([f"nats://127.0.0.1:{port}"], "b", 3.0, timeout_s=0.5)
    with pytest.raises(LeaseStoreError):
        nats_store.open()
    nats_store.close()
    pg = PostgresLeaseStore(f"host=127.0.0.1 port={port} dbname=test user=postgres", "g", 3.0,
                            timeout_s=0.5)
    with pytest.raises(LeaseStoreError):
        pg.open()
    with pytest.raises(LeaseStoreError):
        pg.take("s", "a")
    pg.close()
    assert time.monotonic() - t0 < 30


def test_nats_bucket_with_another_ttl_is_refused() -> None:
    need_nats()
    factory = StoreFactory("nats")
    try:
        factory(ttl_s=5.0)
        with pytest.raises(LeaseStoreError, match="TTL of 5"):
            factory(ttl_s=2.0)
    finally:
        factory.cleanup()


def test_nats_cluster_lease_survives_a_node(tmp_path) -> None:  # type: ignore[no-untyped-def]
    """Three replicas of the bucket: a lease taken through node 1 is seen, refused and
    renewable through the others after node 1 is killed; its epoch stays."""
    program = nats_program()
    if program is None:
        pytest.skip("nats-server is not installed (Debian package nats-server)")
    cluster = NatsCluster(tmp_path / "nats", program).start()
    urls = [f"nats://127.0.0.1:{n.client}" for n in cluster.nodes]
    factory = StoreFactory("nats", servers=urls, stream_replicas=3)
    try:
        a = factory(ttl_s=10.0, servers=urls)
        b = factory(ttl_s=10.0, servers=urls[1:] + urls[:1])
        lease = a.take("hall", "a")
        assert lease is not None
        assert b.take("hall", "b") is None
        cluster.nodes[0].kill()

        def renewed() -> bool:
            try:
                return a.renew(lease) is not None
            except LeaseStoreError:
                return False  # the client moves to another node; the stream elects a leader

        wait_for(renewed, what="a renewal through a surviving node")
        assert b.take("hall", "b") is None
        assert b.read(["hall"])["hall"].epoch == lease.epoch
    finally:
        factory.cleanup()
        cluster.stop()

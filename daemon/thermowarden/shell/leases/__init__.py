"""Shard leases for a group of instances: the interface (:mod:`.base`) and its stores."""

from thermowarden.shell.leases.base import Lease, LeaseStore, LeaseStoreError

__all__ = ["Lease", "LeaseStore", "LeaseStoreError"]

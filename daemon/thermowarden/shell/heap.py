"""The garbage collector and the long-lived heap."""

from __future__ import annotations

import gc


def freeze_heap() -> None:
    """Move every object alive now (configuration, engine, libraries: built at start and
    kept for the life of the process) out of the garbage collector's reach, so that its
    collections, which a flood of messages triggers often, walk only what came after.
    Called after start and after a reload (the previous engine's objects are released to
    the collector first)."""
    gc.unfreeze()
    gc.collect()
    gc.freeze()

"""thermowarden: thermal-comfort and heat-stress advisories for buildings and hot workplaces.

The service reads sensors over MQTT, computes published indices per space and publishes
advice. It is advisory only: it never actuates equipment.
"""

from __future__ import annotations

import os as _os
import pathlib as _pathlib

__version__ = "0.1.0"

# numba's fallbacks after ours (its default list, so an unusual install still caches)
_LOCATORS = ("thermowarden.numba_cache.ContentKeyedCacheLocator,UserProvidedCacheLocator,"
             "InTreeCacheLocator,UserWideCacheLocator,IPythonCacheLocator,ZipCacheLocator")


def _default_numba_cache() -> None:
    """Point numba's compile cache at a writable directory before pythermalcomfort loads.

    Without a cache the compiled comfort models cost several seconds at every start.
    An explicit ``NUMBA_CACHE_DIR`` (the systemd unit sets one) always wins. Entries are
    keyed by the content of the compiled sources (:mod:`thermowarden.numba_cache`), so
    every checkout and virtual environment of the same versions shares them.
    """
    if "NUMBA_CACHE_DIR" not in _os.environ:
        base = _os.environ.get("XDG_CACHE_HOME") or str(_pathlib.Path.home() / ".cache")
        _os.environ["NUMBA_CACHE_DIR"] = str(_pathlib.Path(base) / "thermowarden" / "numba")
    _os.environ.setdefault("NUMBA_CACHE_LOCATOR_CLASSES", _LOCATORS)
    # numba's OpenMP threading layer (GNU libgomp, read when numba first starts its
    # threads): idle worker threads block instead of spinning after each multi-core
    # kernel, so they take no CPU from the engine or from other processes between batches
    # (the engine's batches are milliseconds apart, far longer than a thread's wake-up).
    # An explicit OMP_WAIT_POLICY wins.
    _os.environ.setdefault("OMP_WAIT_POLICY", "PASSIVE")


_default_numba_cache()

"""thermowarden: thermal-comfort and heat-stress advisories for buildings and hot workplaces.

The service reads sensors over MQTT, computes published indices per space and publishes
advice. It is advisory only: it never actuates equipment.
"""

from __future__ import annotations

import os as _os
import pathlib as _pathlib

__version__ = "0.1.0"


def _default_numba_cache() -> None:
    """Point numba's compile cache at a writable directory before pythermalcomfort loads.

    Without a cache the compiled comfort models cost several seconds at every start.
    An explicit ``NUMBA_CACHE_DIR`` (the systemd unit sets one) always wins.
    """
    if "NUMBA_CACHE_DIR" in _os.environ:
        return
    base = _os.environ.get("XDG_CACHE_HOME") or str(_pathlib.Path.home() / ".cache")
    _os.environ["NUMBA_CACHE_DIR"] = str(_pathlib.Path(base) / "thermowarden" / "numba")


_default_numba_cache()

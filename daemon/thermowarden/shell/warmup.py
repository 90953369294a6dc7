"""Load, or compile once, the comfort models (numba kernels) and say so while it happens.

pythermalcomfort and our SET kernels are compiled by numba the first time a version runs
on a machine (tens of seconds on a small machine), then loaded from ``NUMBA_CACHE_DIR`` in
about a second. A marker file in that directory, named by the versions involved, tells a
first run from a later one, so the first run can say what it is doing instead of staying
silent.
"""

from __future__ import annotations

import hashlib
import os
import pathlib
import sys
import time
from collections.abc import Callable
from importlib import metadata

import numpy as np

from thermowarden import __version__


def cache_dir() -> pathlib.Path | None:
    value = os.environ.get("NUMBA_CACHE_DIR")
    return pathlib.Path(value) if value else None


def _marker() -> pathlib.Path | None:
    base = cache_dir()
    if base is None:
        return None
    core = pathlib.Path(__file__).resolve().parents[1] / "core"
    try:
        digest = hashlib.sha1()
        for kernels in ("set_kernels.py", "comfort_kernels.py"):
            digest.update((core / kernels).read_bytes())
        source = digest.hexdigest()[:12]
        versions = "-".join(metadata.version(p) for p in ("pythermalcomfort", "numba"))
    except (OSError, metadata.PackageNotFoundError):
        return None
    py = f"py{sys.version_info[0]}{sys.version_info[1]}"
    return base / f".compiled-{__version__}-{versions}-{py}-{source}"


def is_compiled() -> bool:
    """True when this version's comfort models are in the cache (a warm start)."""
    marker = _marker()
    return marker is not None and marker.exists()


def warm_up(say: Callable[[str], None] | None = None) -> float:
    """Load (or compile, once) the numba models; returns the seconds it took.

    ``say`` receives one line before a first-time compilation and one after it; nothing
    is said on a warm start.
    """
    from thermowarden.core.indices import SpaceInputs, compute_indices

    marker = _marker()
    cold = marker is None or not marker.exists()
    if cold and say is not None:
        where = cache_dir()
        say("preparing the comfort models: numba compiles them once per version "
            f"(about half a minute on a small machine){f', cached in {where}' if where else ''}")
    t0 = time.monotonic()
    s = SpaceInputs.create(
        2, air_temperature=np.array([24.0, 33.0]), relative_humidity=np.array([50.0, 40.0]),
        mean_radiant_temperature=np.array([25.0, 40.0]), air_speed=np.array([0.3, 0.6]),
        globe_temperature=np.array([25.0, 40.0]), natural_wet_bulb=np.array([18.0, 25.0]),
        clo=np.array([0.6, 0.6]), met=np.array([1.2, 2.5]), hot_work=np.array([False, True]),
        indoor=np.array([True, False]))
    compute_indices(s, with_phs=True)
    if cold:  # the multi-core kernels too (built lazily, for batches of 512 or more), and
        # the air-speed solver (the sample has no space warm enough to need it)
        from thermowarden.core import comfort_kernels, set_kernels

        for name in ("set_compiled", "set_for_ce_compiled"):
            set_kernels.kernel(name)
        one = np.array([30.0])
        for parallel in (False, True):
            comfort_kernels.cooling_effect_rows(one, one, one / 60, one + 20, one / 25,
                                                one / 50, parallel)
            comfort_kernels.air_speed_rows(one, one, one + 20, one / 25, one / 50, one / 60,
                                           np.log([0.1, 2.0]), parallel)
    took = time.monotonic() - t0
    if marker is not None and cold:
        try:
            marker.parent.mkdir(parents=True, exist_ok=True)
            marker.write_text(f"compiled in {took:.1f} s\n")
        except OSError:
            pass
        if say is not None:
            say(f"comfort models ready in {took:.0f} s; later starts load them from the cache")
    return took


def say_on_stderr(line: str) -> None:
    print(f"thermowarden: {line}", file=sys.stderr, flush=True)

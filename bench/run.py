"""Performance harness. Prints figures; the last line is one JSON object.

    python bench/run.py [--quick]

Figures are measured in this run against a baseline measured in the same run (this
machine is shared and noisy): report ratios, not absolute times, when comparing runs.

- indices_10k_ms: all indices except ISO 7933 PHS for 10,000 invented spaces, one call
  (median of repeats).
- indices_vs_loop_ratio: the same functions called one space at a time (timed on a sample
  of spaces and scaled to 10,000) divided by the vectorised time.
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import time

import numpy as np

sys.path.insert(0, str(__import__("pathlib").Path(__file__).resolve().parent.parent / "daemon"))

from thermowarden.core.indices import SpaceInputs, compute_indices  # noqa: E402


def invented_spaces(n: int, seed: int = 7) -> SpaceInputs:
    """Invented, plausible spaces: offices, some warm, some hot work, some outdoor."""
    rng = np.random.default_rng(seed)
    ta = rng.uniform(19.0, 31.0, n)
    hot = rng.random(n) < 0.1
    outdoor = rng.random(n) < 0.05
    tg = ta + rng.uniform(-0.5, 4.0, n) + np.where(hot, rng.uniform(2, 15, n), 0.0)
    rh = rng.uniform(25.0, 75.0, n)
    v = rng.uniform(0.05, 0.6, n)
    tnw = np.where(rng.random(n) < 0.5, ta - rng.uniform(3, 9, n), np.nan)
    planes = {"front": ta + rng.uniform(0, 12, n), "back": ta + rng.uniform(-1, 1, n)}
    return SpaceInputs.create(
        n, air_temperature=ta, relative_humidity=rh, globe_temperature=tg, air_speed=v,
        natural_wet_bulb=tnw, floor_temperature=ta - rng.uniform(0, 3, n),
        surface_temperature_min=ta - rng.uniform(2, 10, n),
        air_temperature_head=ta + 0.5, air_temperature_ankle=ta - rng.uniform(0.5, 3, n),
        plane_radiant=planes, met=np.where(hot, 2.8, rng.choice([1.0, 1.1, 1.2, 1.4], n)),
        clo=rng.uniform(0.5, 1.0, n), hot_work=hot, indoor=~outdoor,
        acclimatised=rng.random(n) < 0.5, running_mean_outdoor=rng.uniform(12, 28, n),
        wbgt_time_weighted=np.where(hot, tg - 5.0, np.nan))


def subset(s: SpaceInputs, i: int) -> SpaceInputs:
    given: dict[str, object] = {}
    for name, value in vars(s).items():
        if name == "n":
            continue
        if name == "plane_radiant":
            given[name] = {k: v[i:i + 1] for k, v in value.items()}
        elif name == "posture":
            given[name] = value[i:i + 1]
        elif isinstance(value, np.ndarray):
            given[name] = value[i:i + 1]
        else:
            given[name] = value
    return SpaceInputs.create(1, **given)


def bench_indices(quick: bool) -> dict[str, float]:
    n = 10_000
    spaces = invented_spaces(n)
    compute_indices(invented_spaces(50), with_phs=False)  # warm the compiled models
    times = []
    for _ in range(3 if quick else 7):
        t0 = time.perf_counter()
        compute_indices(spaces, with_phs=False)
        times.append(time.perf_counter() - t0)
    vec = statistics.median(times)
    sample = 100 if quick else 400
    singles = [subset(spaces, i) for i in range(sample)]
    t0 = time.perf_counter()
    for one in singles:
        compute_indices(one, with_phs=False)
    loop_per_space = (time.perf_counter() - t0) / sample
    return {"indices_10k_ms": round(vec * 1000.0, 1),
            "indices_vs_loop_ratio": round(loop_per_space * n / vec, 1)}


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer repeats (under a minute)")
    args = parser.parse_args()
    figures: dict[str, float] = {}
    figures.update(bench_indices(args.quick))
    for k, v in figures.items():
        print(f"{k:>28}: {v}", file=sys.stderr)
    print(json.dumps(figures))
    return 0


if __name__ == "__main__":
    sys.exit(main())

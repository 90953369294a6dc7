"""The daily report of a large site, from the store as the service writes it (a figure,
not a timed test).

    python bench/daily_report.py [--spaces 10000]

An invented site of 10 buildings of 5 floors is given one day of 5-minute report samples
(288 records in the shape the engine stores: every index of every space) and 2,000
advisory events in a store, then ``shell.report.write_reports`` writes the site's report (roll-up
by building and floor, a line per space) and one per building, as the service's daily job
does on its own thread:

- store_mb: the store's size; report_s: wall time of the reports; report_cpu_s: CPU time
  of this process meanwhile; files and site_report_kb, building_report_kb (the largest).

The last line is one JSON object.
"""

from __future__ import annotations

import argparse
import json
import pathlib
import resource
import sys
import tempfile
import time

import numpy as np

REPO = pathlib.Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO / "daemon"))


def site_text(n: int, buildings: int = 10, floors: int = 5) -> tuple[str, int]:
    per_floor = max(1, n // (buildings * floors))
    lines = ["site: {id: bench, name: Bench Campus, timezone: UTC}",
             "defaults: {occupancy: {always: true}, people: {met: 1.2, clo: 0.6}}",
             "spaces_csv: spaces.csv"]
    return "\n".join(lines) + "\n", per_floor


def spaces_csv(n: int, buildings: int = 10, floors: int = 5) -> str:
    per_floor = max(1, n // (buildings * floors))
    rows = ["id,name,building,floor,hot_work"]
    made = 0
    for b in range(buildings):
        for f in range(1, floors + 1):
            for r in range(per_floor):
                if made < n:
                    rows.append(f"b{b:02d}-f{f}-{r:03d},Room {f}{r:03d},b{b:02d},f{f},"
                                f"{'true' if r % 50 == 0 else 'false'}")
                    made += 1
    return "\n".join(rows) + "\n"


def fill_store(path: pathlib.Path, ids: list[str], day_start: float, events: int,
               seed: int = 1) -> None:
    """One day of samples and some advisory events, written as the service writes them."""
    from thermowarden.shell.store import Store

    rng = np.random.default_rng(seed)
    n = len(ids)
    store = Store(path)

    def col(values: np.ndarray) -> list[float | None]:
        return [round(float(v), 2) for v in values]

    with store.transaction():
        for k in range(288):
            t = day_start + 300.0 * k
            base = 22.0 + 4.0 * np.sin(np.pi * k / 288) + rng.normal(0, 0.6, n)
            pmv = (base - 24.0) / 3.0
            cat = np.clip(np.abs(pmv) * 4, 0, 3).astype(int)
            wbgt = base - 3.0 + rng.normal(0, 1.0, n)
            record = {
                "t": t, "spaces": ids, "operative": col(base), "pmv": col(pmv),
                "category_iso": [int(c) for c in cat], "category_en": [None] * n,
                "en_lower": [None] * n, "en_upper": [None] * n,
                "band_lower": [20.0] * n, "band_upper": [26.0] * n,
                "wbgt": col(wbgt), "ref_unacclimatised": [27.5] * n,
                "ref_acclimatised": [30.5] * n, "heat_index": [None] * n, "utci": [None] * n,
                "occupied": [bool(8 <= (k // 12) < 18)] * n, "air_temperature": col(base),
                "relative_humidity": col(45 + rng.normal(0, 5, n)),
                "dew_point": col(base - 11.0)}
            store.add_sample(t, record)
        for e in range(events):
            sid = ids[(e * 7919) % n]
            raised = day_start + 3600 * 8 + 10.0 * e
            adv = {"id": f"{sid}.comfort.too_warm.{int(raised)}", "rule": "comfort.too_warm",
                   "title": "Too warm", "priority": "medium",
                   "raised_at": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime(raised)),
                   "space": {"id": sid, "name": sid}}
            for kind, at in (("raised", raised), ("cleared", raised + 1800)):
                store.add_event(f"{adv['id']}:{kind}", at, {
                    "event": kind, "at": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime(at)),
                    "advisory": adv})
    store.close()


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--spaces", type=int, default=10_000)
    ap.add_argument("--events", type=int, default=1_000)
    args = ap.parse_args()

    from thermowarden.config import load_site
    from thermowarden.shell.report import write_reports

    tmp = pathlib.Path(tempfile.mkdtemp(prefix="tw-report-bench-"))
    text, _ = site_text(args.spaces)
    (tmp / "site.yaml").write_text(text)
    (tmp / "spaces.csv").write_text(spaces_csv(args.spaces))
    config = load_site(tmp / "site.yaml", {})
    ids = [s.id for s in config.spaces]
    day = 1_780_012_800.0  # a midnight UTC
    store = tmp / "bench.sqlite3"
    t0 = time.perf_counter()
    fill_store(store, ids, day, args.events)
    fill_s = time.perf_counter() - t0
    cpu0 = resource.getrusage(resource.RUSAGE_SELF)
    t0 = time.perf_counter()
    written = write_reports(config, store, tmp / "reports", day, day + 86_400, "day")
    wall = time.perf_counter() - t0
    cpu1 = resource.getrusage(resource.RUSAGE_SELF)
    figures = {
        "spaces": len(ids),
        "store_mb": round(store.stat().st_size / 1e6, 1),
        "fill_s": round(fill_s, 1),
        "report_s": round(wall, 2),
        "report_cpu_s": round(cpu1.ru_utime + cpu1.ru_stime - cpu0.ru_utime - cpu0.ru_stime,
                              2),
        "files": len(written),
        "site_report_kb": round(written[0].stat().st_size / 1024),
        "building_report_kb": round(max(p.stat().st_size for p in written[1:]) / 1024)
        if len(written) > 1 else 0,
        "max_rss_mb": round(cpu1.ru_maxrss / 1024),
    }
    for k, v in figures.items():
        print(f"{k:>20}: {v}")
    print(json.dumps(figures))


if __name__ == "__main__":
    main()

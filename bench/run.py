"""Performance harness. Prints each figure when it is measured; the last line is one JSON object.

    python bench/run.py [--quick] [--only NAME ...] [--no-broker] [--no-cold] [--cluster]

Every figure is printed (and flushed) on stdout as ``name: value`` the moment its bench
returns, followed by a ``# bench`` line with its wall and CPU time and the load; the last
line is all figures as one JSON object. ``--only NAME`` runs one bench (a name from
``BENCHES``) or the bench that measures the figure NAME. A full run is planned to take
under 5 minutes on the 2-core development machine when idle (the cold assess included).

Figures are measured in this run against a baseline measured in the same run (this
machine is shared and noisy): report ratios, not absolute times, when comparing runs.

- indices_10k_ms: all indices except ISO 7933 PHS for 10,000 invented spaces, one call
  (median of repeats).
- indices_vs_loop_ratio: the same functions called one space at a time (timed on a sample
  of spaces and scaled to 10,000) divided by the vectorised time.
- ingest_msgs_per_s: decode, validate and store, in process, no broker, mixed payloads
  (plain numbers, JSON with a time, SenML packs, equipment states) for 1,000 spaces;
  ingest_vs_json_ratio: that rate divided by a bare json.loads loop over the same payloads.
- bytes_per_space: resident memory per space for 10,000 spaces with six points at 10 s
  intervals and full windows (3-minute air-speed window, 60-minute WBGT history).
- rules_10k_ms: rule evaluation and lifecycle for 10,000 spaces with the default packs, one
  steady tick given the indices; rules_10k_raise_ms: the tick in which advisories are raised
  (messages rendered for every space that crosses a threshold).
- replay_day_s, replay_space_days_per_s, replay_vs_ingest_ratio, replay_vs_ingest_in_runs_ratio:
  see bench/replay_bench.py.
- e2e_*: through the local broker, see bench/e2e.py (skipped with --no-broker).
- cluster_*: a group of one to four instances on a three-node nats-server cluster, at two
  site sizes, against a bare paho consumer on the same cluster, see bench/cluster.py
  (--cluster).
- python_start_s: a bare ``python -c pass``, the baseline of the start-up figures below
  (each the median wall time of a fresh ``python -m thermowarden.cli`` process):
  cold_assess_s: the README's ``assess`` example with an empty numba cache (kernels
  compiled); warm_assess_s: the same once cached; clone_assess_s: the same from a copy of
  the package at another path, sharing the cache (a second checkout of the same version);
  check_error_s: ``check`` of a site with a YAML syntax error; check_valid_s: ``check`` of
  the valid example site (deploy/example-site.yaml) (skipped with --no-cold: cold_assess_s).
  Each also as ``..._cpu_s``: the median CPU seconds (user + system) of the same processes,
  the figure to compare on a loaded machine, where wall time mostly measures the queue.
"""

from __future__ import annotations

import argparse
import json
import os
import pathlib
import statistics
import sys
import time

import numpy as np

sys.path.insert(0, str(__import__("pathlib").Path(__file__).resolve().parent.parent / "daemon"))
sys.path.insert(0, str(__import__("pathlib").Path(__file__).resolve().parent))

from thermowarden.config import SiteConfig  # noqa: E402
from thermowarden.core.indices import SpaceInputs, compute_indices  # noqa: E402
from thermowarden.effects import Effect  # noqa: E402


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


def _site(n: int, packs: list[str]) -> SiteConfig:
    templates = [
        {"topic": "b/{space}/ta", "quantity": "air_temperature", "interval_s": 10},
        {"topic": "b/{space}/rh", "quantity": "relative_humidity", "interval_s": 10,
         "format": {"type": "json", "value_path": "v", "time_path": "t"}},
        {"topic": "b/{space}/heat", "quantity": "globe_temperature", "interval_s": 10,
         "format": {"type": "senml", "name": "tg"}},
        {"topic": "b/{space}/heat", "quantity": "natural_wet_bulb", "interval_s": 10,
         "format": {"type": "senml", "name": "tnw"}},
        {"topic": "b/{space}/v", "quantity": "air_speed", "interval_s": 10, "unit": "fpm"},
        {"topic": "b/{space}/fan", "quantity": "fan_state", "interval_s": 10,
         "format": {"type": "state"}},
    ]
    spaces = [{"id": f"s{i:05d}", "hot_work": i % 10 == 0,
               "kind": "outdoor" if i % 20 == 7 else "indoor"} for i in range(n)]
    return SiteConfig.model_validate({
        "site": {"id": "bench", "timezone": "UTC"}, "templates": templates, "spaces": spaces,
        "defaults": {"rule_packs": packs, "occupancy": {"always": True},
                     "people": {"met": 1.2, "clo": 0.6}}})


def _messages(n_spaces: int, count: int, t0: float) -> list[tuple[str, bytes, float]]:
    rng = np.random.default_rng(11)
    out = []
    for k in range(count):
        i = k % n_spaces
        rnd = k // n_spaces
        t = t0 + rnd * 10.0 + (i % 10) * 0.5
        kind = k % 5
        if kind == 0:
            out.append((f"b/s{i:05d}/ta", f"{rng.uniform(20, 30):.2f}".encode(), t))
        elif kind == 1:
            out.append((f"b/s{i:05d}/rh", json.dumps({"v": round(rng.uniform(30, 70), 1),
                                                      "t": int(t * 1000)}).encode(), t))
        elif kind == 2:
            out.append((f"b/s{i:05d}/heat", json.dumps([
                {"bn": "", "bt": t, "n": "tg", "u": "Cel", "v": round(rng.uniform(25, 40), 2)},
                {"n": "tnw", "u": "Cel", "v": round(rng.uniform(18, 27), 2)}]).encode(), t))
        elif kind == 3:
            out.append((f"b/s{i:05d}/v", f"{rng.uniform(10, 120):.1f}".encode(), t))
        else:
            out.append((f"b/s{i:05d}/fan", b"on" if rng.random() < 0.5 else b"off", t))
    return out


def bench_ingest(quick: bool) -> dict[str, float]:
    from thermowarden.engine.ingest import Ingestor
    from thermowarden.engine.state import SiteState
    from thermowarden.site_model import build_site_model

    n = 1000
    config = _site(n, [])
    model = build_site_model(config)
    state = SiteState(model)
    ingest = Ingestor(model, state)
    msgs = _messages(n, 60_000 if quick else 200_000, 1_780_000_000.0)
    for topic, payload, t in msgs[:n * 5]:  # resolve every topic once (warm the cache)
        ingest.ingest(topic, payload, t)
    body = msgs[n * 5:]
    t0 = time.perf_counter()
    for topic, payload, t in body:
        ingest.ingest(topic, payload, t)
    ours = len(body) / (time.perf_counter() - t0)
    rejected = sum(ingest.rejected.values())
    t0 = time.perf_counter()
    for _, payload, _ in body:
        try:
            json.loads(payload)
        except ValueError:
            pass
    bare = len(body) / (time.perf_counter() - t0)
    if rejected:
        print(f"warning: {rejected} bench messages rejected", file=sys.stderr)
    return {"ingest_msgs_per_s": round(ours), "ingest_vs_json_ratio": round(ours / bare, 3)}


def _rss_bytes() -> int:
    with open("/proc/self/statm") as fh:
        return int(fh.read().split()[1]) * os.sysconf("SC_PAGE_SIZE")


def bench_memory() -> dict[str, float]:
    """Resident memory per space; built in a child process so nothing else is counted."""
    import subprocess

    here = str(pathlib.Path(__file__).resolve().parent)
    daemon = str(pathlib.Path(__file__).resolve().parent.parent / "daemon")
    code = (f"import sys; sys.path.insert(0, {here!r}); sys.path.insert(0, {daemon!r})\n"
            "import run\nprint(run._memory_child())\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, timeout=600)
    return {"bytes_per_space": float(out.stdout.strip().splitlines()[-1])}


def _memory_child() -> int:
    import gc

    from thermowarden.engine.state import SiteState
    from thermowarden.site_model import build_site_model

    n = 10_000
    gc.collect()
    before = _rss_bytes()
    config = _site(n, [])
    model = build_site_model(config)
    state = SiteState(model)
    now = 1_780_000_000.0
    for k in range(state.rings.length + 2):  # full air-speed windows (and every point written)
        t = now + 10.0 * k
        for pid in range(len(model.points)):
            state.record(pid, t, 20.0 + (k % 3), t)
    end = now + 10.0 * (state.rings.length + 2)
    for k in range(361):  # a full hour of WBGT history
        state.record_wbgt(end + 10.0 * k, np.full(n, 25.0))
    state.snapshot(end + 3600.0)
    gc.collect()
    return int((_rss_bytes() - before) / n)


def bench_rules(quick: bool) -> dict[str, float]:
    from thermowarden.engine import Engine
    from thermowarden.engine.rule_truths import rule_truths
    from thermowarden.engine.tick_batch import reads
    from thermowarden.engine.unknown_rules import count_long
    from thermowarden.rules import builtin_pack_names, load_rule_packs
    from thermowarden.site_model import build_site_model

    n = 10_000
    packs = load_rule_packs(builtin_pack_names())
    config = _site(n, builtin_pack_names())
    engine = Engine(config, build_site_model(config), packs, conditions_every_s=0, start=0.0)
    spaces = invented_spaces(n)
    table = compute_indices(spaces, with_phs=False)
    snap = engine.state.snapshot(0.0)
    book = engine.advisories
    env = engine.evaluation.environment(snap, table, 0.0)
    env["rules_unknown_long"] = count_long(book.rules, n, 0.0)
    for rt in book.rules:  # the ahead-of-time columns: not computed here, unknown
        for name in reads(rt.rule):
            if name not in env:
                env[name] = np.full(n, np.nan)
    for k in ("air_temperature", "globe_temperature", "air_speed", "natural_wet_bulb"):
        env[k] = getattr(spaces, k)
    env["relative_humidity"] = spaces.relative_humidity
    env["occupied"] = np.ones(n, dtype=bool)
    engine.last_table = table
    engine.last_snapshot = snap

    def one_tick(now: float) -> float:
        effects: list[Effect] = []
        t0 = time.perf_counter()
        book.begin(env, table)
        for rt in book.rules:
            book.step(rt, rule_truths(rt.rule, rt.params, rt.mask, env, n), now, effects)
        book.floods.flush_summaries(now, effects)
        return time.perf_counter() - t0

    one_tick(0.0)  # pending
    raise_s = one_tick(3600.0)  # every on-delay elapsed: advisories raised
    steady = statistics.median(one_tick(3600.0 + 10.0 * k) for k in range(1, 4 if quick else 8))
    live = len(engine.live_advisories())
    print(f"rules bench: {live} live advisories after the raising tick", file=sys.stderr)
    return {"rules_10k_ms": round(steady * 1000, 1), "rules_10k_raise_ms": round(raise_s * 1000)}


def bench_reload(quick: bool) -> dict[str, float]:
    """Hot reload of a 10,000-space site with full windows and live advisories, unchanged:
    the pause of the engine thread (carrying the state over and swapping) and the time to
    load and build the new engine beside it, against building the engine alone (the
    baseline a restart pays, before its windows start again from nothing)."""
    from thermowarden.engine import Engine
    from thermowarden.rules import builtin_pack_names, load_rule_packs
    from thermowarden.shell.reloading import finish_reload, prepare_reload
    from thermowarden.site_model import build_site_model

    n = 10_000
    packs = load_rule_packs(builtin_pack_names())
    config = _site(n, builtin_pack_names())
    t0 = time.perf_counter()
    engine = Engine(config, build_site_model(config), packs, conditions_every_s=0, start=0.0)
    build_s = time.perf_counter() - t0
    start = 1_780_000_000.0
    for topic, payload, t in _messages(n, n * 5 * (2 if quick else 6), start):
        engine.ingest.ingest(topic, payload, t)
    engine.tick(start + 120.0)
    prepare, pause = [], []
    for _ in range(1 if quick else 3):
        t0 = time.perf_counter()
        prepared = prepare_reload(engine, lambda: (config, packs))
        t1 = time.perf_counter()
        engine = finish_reload(engine, prepared).engine
        pause.append(time.perf_counter() - t1)
        prepare.append(t1 - t0)
    return {"reload_10k_pause_ms": round(statistics.median(pause) * 1000),
            "reload_pause_vs_build_ratio": round(statistics.median(pause) / build_s, 2),
            "reload_prepare_vs_build_ratio": round(statistics.median(prepare) / build_s, 2)}


def bench_trusted_ingest(quick: bool) -> dict[str, float]:
    """Ingest with calibration, a plausible range and a rate limit on every point, against
    the same messages on points without them."""
    from thermowarden.engine.ingest import Ingestor
    from thermowarden.engine.state import SiteState
    from thermowarden.site_model import build_site_model

    n = 1000
    plain = _site(n, [])
    trusted = plain.model_copy(update={"templates": [
        t.model_copy(update={"offset": 0.1, "scale": 1.01, "max_change_per_min": 1000.0})
        if t.quantity not in ("fan_state",) else t for t in plain.templates]})
    msgs = _messages(n, 60_000 if quick else 200_000, 1_780_000_000.0)
    rates = {}
    for name, config in (("plain", plain), ("trusted", trusted)):
        model = build_site_model(config)
        ingest = Ingestor(model, SiteState(model))
        for topic, payload, t in msgs[:n * 5]:
            ingest.ingest(topic, payload, t)
        body = msgs[n * 5:]
        t0 = time.perf_counter()
        for topic, payload, t in body:
            ingest.ingest(topic, payload, t)
        rates[name] = len(body) / (time.perf_counter() - t0)
    return {"ingest_trusted_vs_plain_ratio": round(rates["trusted"] / rates["plain"], 3)}


README_EXAMPLE = json.dumps({
    "air_temperature": 31.2, "relative_humidity": 44, "globe_temperature": 34.6,
    "natural_wet_bulb": 22.8, "air_speed": 0.4, "work_class": "moderate", "clo": 0.6})


_CHILD_CPU: list[float] = []


def _wall(cmd: list[str], env: dict[str, str], stdin: str = "") -> float:
    """Wall seconds of one run of ``cmd``; its CPU seconds (user + system) are appended to
    ``_CHILD_CPU`` (on a loaded machine the wall time mostly measures the queue)."""
    import resource
    import subprocess

    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    subprocess.run(cmd, input=stdin, env=env, capture_output=True, text=True, timeout=900)
    wall = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    _CHILD_CPU.append(after.ru_utime + after.ru_stime - before.ru_utime - before.ru_stime)
    return wall


def _cpu_median(runs: int) -> float:
    """Median CPU seconds of the last ``runs`` runs of :func:`_wall`."""
    return statistics.median(_CHILD_CPU[-runs:])


def bench_startup(quick: bool, cold: bool) -> dict[str, float]:
    """Start-up of the commands a new user runs first, each in a fresh process."""
    import shutil
    import tempfile

    repeats = 3
    root = pathlib.Path(__file__).resolve().parent.parent
    out: dict[str, float] = {}
    with tempfile.TemporaryDirectory(prefix="tw-bench-") as tmp:
        env = {**os.environ, "NUMBA_CACHE_DIR": str(pathlib.Path(tmp) / "numba"),
               "PYTHONPATH": str(root / "daemon")}
        assess = [sys.executable, "-m", "thermowarden.cli", "assess", "--format", "table"]
        report(out, "python_start_s", statistics.median(
            _wall([sys.executable, "-c", "pass"], env) for _ in range(repeats)))
        report(out, "python_start_cpu_s", _cpu_median(repeats))
        if cold:
            report(out, "cold_assess_s", _wall(assess, env, README_EXAMPLE))
            report(out, "cold_assess_cpu_s", _CHILD_CPU[-1])
        else:
            _wall(assess, env, README_EXAMPLE)  # fill the cache
        report(out, "warm_assess_s", statistics.median(
            _wall(assess, env, README_EXAMPLE) for _ in range(repeats)))
        report(out, "warm_assess_cpu_s", _cpu_median(repeats))
        clone = pathlib.Path(tmp) / "second-checkout" / "daemon"
        shutil.copytree(root / "daemon" / "thermowarden", clone / "thermowarden",
                        ignore=shutil.ignore_patterns("__pycache__"))
        clone_env = {**env, "PYTHONPATH": str(clone)}
        report(out, "clone_assess_s", statistics.median(
            _wall(assess, clone_env, README_EXAMPLE) for _ in range(repeats)))
        report(out, "clone_assess_cpu_s", _cpu_median(repeats))
        bad = pathlib.Path(tmp) / "site.yaml"
        bad.write_text("site: {id: x\n  name: [\n", encoding="utf-8")
        report(out, "check_error_s", statistics.median(
            _wall([sys.executable, "-m", "thermowarden.cli", "check", str(bad)], env)
            for _ in range(repeats)))
        report(out, "check_error_cpu_s", _cpu_median(repeats))
        good = root / "deploy" / "example-site.yaml"
        report(out, "check_valid_s", statistics.median(
            _wall([sys.executable, "-m", "thermowarden.cli", "check", str(good)], env)
            for _ in range(repeats)))
        report(out, "check_valid_cpu_s", _cpu_median(repeats))
    return out


_PRINTED: set[str] = set()


def report(out: dict, name: str, value: object) -> None:  # type: ignore[type-arg]
    """Record a figure in ``out`` and print it at once (flushed): a run cut short keeps it."""
    if isinstance(value, float):
        value = round(value, 3)
    out[name] = value
    _PRINTED.add(name)
    print(f"{name:>34}: {value}", flush=True)


# Each bench is a name and a function returning figures; they run in this order, and each
# figure is printed (and flushed) the moment its bench returns, so a run cut short keeps
# every figure measured before the cut. Planned CPU time of a full run on the 2-core
# development machine, idle: start-up 25 s (+ the cold assess: 30-60 s), indices 10 s,
# ingest 10 s, memory 10 s, rules 20 s, reload 30 s, trusted ingest 10 s, replay day 3 s,
# replay site 72 h 60-80 s with its ingest baselines over 24 h, e2e 40 s.
BENCHES = ("startup", "indices", "ingest", "memory", "rules", "reload", "trusted_ingest",
           "replay_day", "replay_site", "e2e", "cluster")


def _run_bench(name: str, args: argparse.Namespace) -> dict[str, float | str | None]:
    quick = args.quick
    if name == "startup":
        return dict(bench_startup(quick, not args.no_cold))
    if name == "indices":
        return dict(bench_indices(quick))
    if name == "ingest":
        return dict(bench_ingest(quick))
    if name == "memory":
        return dict(bench_memory())
    if name == "rules":
        return dict(bench_rules(quick))
    if name == "reload":
        return dict(bench_reload(quick))
    if name == "trusted_ingest":
        return dict(bench_trusted_ingest(quick))
    if name == "replay_day":
        from replay_bench import bench_replay_day

        return dict(bench_replay_day())
    if name == "replay_site":
        from replay_bench import bench_replay_site

        return dict(bench_replay_site(quick, report))
    if name == "e2e":
        from e2e import bench_e2e

        return dict(bench_e2e(quick))
    if name == "cluster":
        from cluster import bench_cluster

        return dict(bench_cluster(quick))
    raise ValueError(name)


def _emit(line: str) -> None:
    print(line, flush=True)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer repeats (under a minute)")
    parser.add_argument("--no-broker", action="store_true",
                        help="skip the end-to-end figures (they need mosquitto)")
    parser.add_argument("--no-cold", action="store_true",
                        help="skip cold_assess_s (compiling the kernels takes a minute)")
    parser.add_argument("--startup-only", action="store_true",
                        help="only the start-up figures (the same as --only startup)")
    parser.add_argument("--cluster", action="store_true",
                        help="also the scale-out figures on a three-node nats-server cluster "
                             "(bench/cluster.py; 15-30 minutes)")
    parser.add_argument("--cluster-only", action="store_true",
                        help="only the scale-out figures (the same as --only cluster)")
    parser.add_argument("--only", action="append", default=[], metavar="NAME",
                        help="run only this bench (" + ", ".join(BENCHES) + "), or the bench "
                             "that measures the figure NAME (e.g. warm_assess_s); repeatable")
    args = parser.parse_args()
    only = list(args.only)
    if args.startup_only:
        only.append("startup")
    if args.cluster_only:
        only.append("cluster")
    chosen: list[str] = []
    for name in only:
        bench = name if name in BENCHES else FIGURE_BENCH.get(name)
        if bench is None:
            parser.error(f"--only {name}: no such bench or figure; benches: "
                         + ", ".join(BENCHES) + "; figures: " + ", ".join(sorted(FIGURE_BENCH)))
        if bench not in chosen:
            chosen.append(bench)
    if not chosen:
        chosen = [b for b in BENCHES if (b != "e2e" or not args.no_broker)
                  and (b != "cluster" or args.cluster)]
    figures: dict[str, float | str | None] = {}
    wall0 = time.perf_counter()
    for bench in chosen:
        b0, c0 = time.perf_counter(), time.process_time()
        got = _run_bench(bench, args)
        for k, v in got.items():
            if k not in _PRINTED:
                _emit(f"{k:>34}: {v}")
        _emit(f"{'# ' + bench:>34}: {time.perf_counter() - b0:.1f} s wall, "
              f"{time.process_time() - c0:.1f} s CPU in this process "
              f"({time.perf_counter() - wall0:.0f} s so far; load {os.getloadavg()[0]:.1f})")
        figures.update(got)
    print(json.dumps(figures), flush=True)
    return 0


# The figure names each bench reports, for --only FIGURE.
FIGURE_BENCH: dict[str, str] = {
    **{k: "startup" for k in ("python_start_s", "cold_assess_s", "warm_assess_s",
                              "clone_assess_s", "check_error_s", "check_valid_s",
                              "python_start_cpu_s", "cold_assess_cpu_s",
                              "warm_assess_cpu_s", "clone_assess_cpu_s",
                              "check_error_cpu_s", "check_valid_cpu_s")},
    "indices_10k_ms": "indices", "indices_vs_loop_ratio": "indices",
    "ingest_msgs_per_s": "ingest", "ingest_vs_json_ratio": "ingest",
    "bytes_per_space": "memory",
    "rules_10k_ms": "rules", "rules_10k_raise_ms": "rules",
    "reload_10k_pause_ms": "reload", "reload_pause_vs_build_ratio": "reload",
    "reload_prepare_vs_build_ratio": "reload",
    "ingest_trusted_vs_plain_ratio": "trusted_ingest",
    "replay_day_s": "replay_day",
    **{k: "replay_site" for k in ("replay_space_days_per_s", "replay_msgs_per_s",
                                  "replay_vs_ingest_ratio",
                                  "replay_vs_ingest_in_runs_ratio")},
    **{k: "e2e" for k in ("e2e_msgs_per_s", "e2e_vs_bare_paho_ratio", "e2e_311_msgs_per_s",
                          "e2e_vs_bare_paho_311_ratio", "e2e_p99_latency_s")},
}


if __name__ == "__main__":
    sys.exit(main())

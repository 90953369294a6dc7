"""Where an idle instance of a group spends its CPU, per thread, at two site sizes.

    python bench/idle_profile.py [SPACES ...] [--instances M] [--window S] [--profile]

For each site size (default 1,000 and 4,000 spaces, the site of bench/cluster.py: one air
temperature per space, nothing arriving), ``M`` instances (default 4) share the site on a
three-node nats-server cluster; once every space is held, the CPU time of each instance
(user + system, from /proc/<pid>/task/<tid>/stat) is read over ``S`` seconds (default 60)
and printed per thread: the engine thread (the process's main thread) and the others
together (the MQTT network thread, the lease keeper and its store client, the HTTP server),
beside the spaces the instance holds and evaluates (held and standby). With ``--profile``
the first instance's engine thread is profiled (cProfile, over the idle window only; its CPU
figure then includes the profiler's cost) and the functions with the most cumulative and
own time are printed.
"""

from __future__ import annotations

import argparse
import os
import pathlib
import pstats
import shutil
import signal
import subprocess
import sys
import tempfile
import time
import uuid

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parent))

from cluster import _site, _warm  # noqa: E402
from e2e import _free_port, _metric  # noqa: E402
from tests.shell.nats_cluster import NatsCluster, nats_program  # noqa: E402


def _threads_cpu(pid: int) -> tuple[float, float]:
    """CPU seconds (user + system) of the main thread and of all the others."""
    tick = os.sysconf("SC_CLK_TCK")
    main = other = 0.0
    for task in pathlib.Path(f"/proc/{pid}/task").iterdir():
        try:
            f = (task / "stat").read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue  # a thread that ended meanwhile
        cpu = (int(f[11]) + int(f[12])) / tick
        if int(task.name) == pid:
            main += cpu
        else:
            other += cpu
    return main, other


def measure(cluster: NatsCluster, tmp: pathlib.Path, spaces: int, m: int, window: float,
            profile: bool) -> None:
    prefix = f"twip{uuid.uuid4().hex[:6]}"
    site = _site(tmp, prefix, cluster.nodes[0].url, spaces, cluster)
    procs: list[tuple[subprocess.Popen[bytes], int]] = []
    prof = tmp / f"{prefix}.prof"
    try:
        for k in range(m):
            http = _free_port()
            head = [sys.executable]
            if profile and k == 0:
                head += [str(pathlib.Path(__file__).with_name("_profiled.py")), str(prof)]
            else:
                head += ["-m", "thermowarden.cli"]
            log = open(tmp / f"svc-{prefix}-{k}.log", "wb")  # noqa: SIM115
            procs.append((subprocess.Popen(
                head + ["run", "--config", str(site), "--state-dir",
                        str(tmp / f"state-{prefix}-{k}"), "--http-port", str(http),
                        "--group", "bench", "--instance", f"i{k}", "--broker",
                        cluster.urls(k % len(cluster.nodes))],
                stdout=subprocess.DEVNULL, stderr=log), http))
        deadline = time.time() + 600
        while True:
            owned = [_metric(h, "thermowarden_group_owned_spaces") for _, h in procs]
            if sum(owned) == spaces and all(x > 0 for x in owned):
                break
            if time.time() > deadline or any(p.poll() is not None for p, _ in procs):
                raise RuntimeError(f"the group never held every space once: {owned}")
            time.sleep(0.5)
        time.sleep(10.0)
        if profile:
            procs[0][0].send_signal(signal.SIGUSR1)
        before = [_threads_cpu(p.pid) for p, _ in procs]
        w0 = time.monotonic()
        time.sleep(window)
        after = [_threads_cpu(p.pid) for p, _ in procs]
        if profile:
            procs[0][0].send_signal(signal.SIGUSR2)
            time.sleep(2.0)
        minutes = (time.monotonic() - w0) / 60
        load = pathlib.Path("/proc/loadavg").read_text().split()[:3]
        print(f"{spaces} spaces, {m} instance(s), {window:.0f} s idle, load {' '.join(load)}",
              flush=True)
        for k, ((_, h), b, a) in enumerate(zip(procs, before, after, strict=True)):
            held = _metric(h, "thermowarden_group_owned_spaces")
            evaluated = _metric(h, "thermowarden_group_evaluated_spaces")
            main = (a[0] - b[0]) / minutes
            other = (a[1] - b[1]) / minutes
            print(f"  i{k}{' (cProfile)' if profile and k == 0 else ''}: held {held:.0f}, "
                  f"evaluated {evaluated:.0f} spaces; CPU ms per minute: engine thread "
                  f"{1e3 * main:.0f}, other threads {1e3 * other:.0f}, total "
                  f"{1e3 * (main + other):.0f}", flush=True)
    finally:
        for p, _ in procs:
            p.terminate()
        for p, _ in procs:
            p.wait(60)
    if profile and prof.exists():
        stats = pstats.Stats(str(prof))
        stats.sort_stats("cumulative").print_stats(30)
        stats.sort_stats("tottime").print_stats(25)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("spaces", nargs="*", type=int, default=[1000, 4000])
    parser.add_argument("--instances", type=int, default=4)
    parser.add_argument("--window", type=float, default=60.0)
    parser.add_argument("--profile", action="store_true")
    args = parser.parse_args()
    program = nats_program()
    if program is None:
        sys.exit("nats-server is not installed")
    tmp = pathlib.Path(tempfile.mkdtemp(prefix="tw-idle-"))
    cluster = NatsCluster(tmp / "nats", program).start()
    try:
        _warm(cluster)
        for spaces in args.spaces:
            measure(cluster, tmp, spaces, args.instances, args.window, args.profile)
    finally:
        cluster.stop()
        shutil.rmtree(tmp, ignore_errors=True)


def _interrupt(_sig: int, _frame: object) -> None:
    """SIGTERM ends the bench as Ctrl-C does: the brokers and instances it started stop."""
    raise KeyboardInterrupt


if __name__ == "__main__":
    import signal as _signal

    _signal.signal(_signal.SIGTERM, _interrupt)
    main()

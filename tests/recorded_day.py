"""The recorded day of the example site (``deploy/example-site.yaml`` with
``simulated_feeds/recorded/larkfield-day.jsonl.gz``), replayed once per test session.

Replaying the day takes about half a minute on an idle machine; a dozen test modules read
it. :func:`recorded_day` replays it once per set of arguments and hands each caller its own
copy (a test may change what it got without changing what the next test sees). Between
sessions the results are kept in the pytest cache (``.pytest_cache/d/recorded-day``),
keyed by a hash of everything a replay's result depends on: the package's source and
schemas, the rule packs, the site file, the feed, this file, the interpreter and the
installed distributions' versions. Any change to one of them replays the day again;
``pytest --cache-clear`` or ``THERMOWARDEN_REPLAY_CACHE=0`` does too. Parallel workers
(``pytest -n``) share the cache: the first to need a result replays, the others wait for
it (a file lock) and read it.
"""

from __future__ import annotations

import copy
import fcntl
import functools
import gzip
import hashlib
import importlib.metadata
import json
import os
import pathlib
import pickle
import subprocess
import sys
from typing import Any

from thermowarden.replay import FeedRecord, ReplayResult, read_feed, replay

REPO = pathlib.Path(__file__).resolve().parent.parent
SITE = REPO / "deploy" / "example-site.yaml"
FEED = REPO / "simulated_feeds" / "recorded" / "larkfield-day.jsonl.gz"

CACHE_DIR: pathlib.Path | None = None
"""Set by tests/conftest.py to the pytest cache's folder for these results (None: no cache
between sessions, e.g. under ``-p no:cacheprovider``)."""

_memory: dict[tuple[Any, ...], Any] = {}


@functools.cache
def source_hash() -> str:
    """A hash of everything a replay of the recorded day depends on."""
    h = hashlib.sha256()
    files = [*sorted((REPO / "daemon" / "thermowarden").rglob("*")),
             *sorted((REPO / "rules").glob("*.yaml")), SITE, FEED, pathlib.Path(__file__)]
    for f in files:
        if f.is_file() and f.suffix in {".py", ".json", ".yaml", ".gz"} \
                and "__pycache__" not in f.parts:
            h.update(str(f.relative_to(REPO)).encode())
            h.update(f.read_bytes())
    h.update(sys.version.encode())
    dists = sorted(f"{d.metadata['Name']}=={d.version}"
                   for d in importlib.metadata.distributions())
    h.update("\n".join(dists).encode())
    return h.hexdigest()[:20]


def _cached(key: tuple[Any, ...], compute: Any) -> Any:
    """``compute()``'s result for ``key``: from memory, the pytest cache or computed (and
    kept in both)."""
    if key in _memory:
        return _memory[key]
    if CACHE_DIR is None or os.environ.get("THERMOWARDEN_REPLAY_CACHE") == "0":
        _memory[key] = compute()
        return _memory[key]
    name = hashlib.sha256(repr((source_hash(), key)).encode()).hexdigest()[:24]
    path = CACHE_DIR / f"{name}.pickle"
    with open(CACHE_DIR / f"{name}.lock", "w") as lock:
        fcntl.flock(lock, fcntl.LOCK_EX)  # another worker may be computing it
        try:
            if path.exists():
                with open(path, "rb") as fh:
                    _memory[key] = pickle.load(fh)
                return _memory[key]
            value = compute()
            tmp = path.with_suffix(f".{os.getpid()}.tmp")
            with open(tmp, "wb") as fh:
                pickle.dump(value, fh, protocol=pickle.HIGHEST_PROTOCOL)
            os.replace(tmp, path)
            _memory[key] = value
            return value
        finally:
            fcntl.flock(lock, fcntl.LOCK_UN)


@functools.cache
def _records() -> tuple[FeedRecord, ...]:
    with gzip.open(FEED, "rt", encoding="utf-8") as fh:
        return tuple(read_feed(fh, str(FEED)))


def records() -> list[FeedRecord]:
    """The day's feed records (read once; the records are immutable)."""
    return list(_records())


def recorded_day(tick_s: float | None = 60.0, full_events: bool = True) -> ReplayResult:
    """The recorded day replayed on the example site as shipped, with report samples;
    ``tick_s`` as :func:`thermowarden.replay.replay` takes it (None: the site's own 10 s),
    ``full_events``: events as published (else one line each). A copy of its own."""
    from thermowarden.config import load_site

    def compute() -> ReplayResult:
        config = load_site(SITE, {})
        return replay(config, records(), base=str(SITE), full_events=full_events,
                      tick_s=tick_s, samples=True)

    result: ReplayResult = _cached(("replay", tick_s, full_events), compute)
    return copy.deepcopy(result)


def cli_replay(*extra: str) -> str:
    """What ``thermowarden replay --config SITE FEED *extra`` prints on standard output
    (run as a command, once per session for the same arguments); the command must
    succeed."""
    from tests.conftest import COMMAND_LIMIT_S

    def compute() -> str:
        r = subprocess.run([sys.executable, "-m", "thermowarden.cli", "replay", "--config",
                            str(SITE), str(FEED), *extra], capture_output=True, text=True,
                           timeout=COMMAND_LIMIT_S)
        assert r.returncode == 0, r.stderr
        return r.stdout

    out: str = _cached(("cli", extra), compute)
    return out


def cli_replay_json(*extra: str) -> Any:
    """:func:`cli_replay` with ``--json`` added, parsed."""
    return json.loads(cli_replay(*extra, "--json"))


def recorded_coverage(tick_s: float | None = 60.0) -> dict[str, Any]:
    """:func:`thermowarden.replay.replay_coverage`'s figures for the recorded day (as
    ``replay --coverage --json`` prints them); a copy of its own."""
    from thermowarden.config import load_site
    from thermowarden.replay import replay_coverage

    def compute() -> dict[str, Any]:
        config = load_site(SITE, {})
        return replay_coverage(config, records(), base=str(SITE), tick_s=tick_s)[1]

    figures: dict[str, Any] = _cached(("coverage", tick_s), compute)
    return copy.deepcopy(figures)

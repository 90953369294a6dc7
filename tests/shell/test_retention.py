"""Retention of the event history and the conditions samples follows the site's
``retention`` settings when the nightly prune job runs (built by the real composition root,
not connected to any broker)."""

from __future__ import annotations

import textwrap

from thermowarden.shell.bootstrap import bootstrap
from thermowarden.shell.clock import Clock

NOW = 1_784_000_000.0
DAY = 86_400.0


def test_prune_keeps_what_the_site_says(tmp_path):
    site = tmp_path / "site.yaml"
    site.write_text(textwrap.dedent("""\
        site: {id: keep, timezone: UTC}
        retention: {events_days: 10, samples_days: 400}
        spaces: [{id: room, points: [{topic: k/room/ta, quantity: air_temperature}]}]
        """))
    running = bootstrap(str(site), state_dir=str(tmp_path / "state"), clock=Clock(start=NOW))
    service = running.service
    store = service.store
    for age_days in (1, 9, 11, 100, 399, 401):
        t = NOW - age_days * DAY
        store.add_event(f"e{age_days}", t, {"age": age_days})
        store.add_sample(t, {"t": t, "age": age_days})
    service._job("prune")
    assert sorted(e["age"] for e in store.events_between(0, NOW + 1)) == [1, 9]
    assert [s["age"] for s in store.samples_between(0, NOW + 1)] == [399, 100, 11, 9, 1]
    store.close()

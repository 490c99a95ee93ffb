"""The lab with 40 days of backfilled history through a real Monitor (no network).

For tests of what history says about the lab's stories (lab.yaml): the wearing laser,
the hot receiver, the dark port, and the healthy rest.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import yaml

from lightwarden.collector.readings import PollOutcome
from lightwarden.exporters.app.config import parse_config
from lightwarden.exporters.app.monitor import Monitor
from lightwarden.exporters.app.wiring import build_monitor

WALL_NOW = 1_800_000_000.0


def lab_monitor_with_history(tmp: Path) -> Iterator[Monitor]:
    from lightwarden.fixtures.lab.backfill import backfill, lab_batch
    from lightwarden.fixtures.lab.model import Lab
    from lightwarden.fixtures.lab.server import lab_plant

    lab = Lab.load()
    cfg = parse_config(yaml.safe_dump({
        "plant": lab_plant(lab),
        "devices": [{"name": d, "host": "127.0.0.1", "credentials": "c"} for d in lab.devices],
        "credentials": {"c": {"snmp_v2c": {"community": {"env": "UNUSED"}}}},
        "history": {"path": str(tmp / "h.sqlite")},
    }), "lab")
    monitor = build_monitor(cfg, base_dir=tmp, alerts=False)
    history = monitor.open_history()
    assert history is not None
    backfill(lab, lambda b: history.record(b, force=True), lab.epoch, WALL_NOW, days=40)
    # tests refresh by hand, not in a thread
    monitor._next_drift = monitor._last_drift = float("inf")
    for device in lab.devices:
        monitor.handle(PollOutcome(device, WALL_NOW, 0.1,
                                   lab_batch(lab, device, lab.epoch, WALL_NOW)))
    monitor.refresh_drift(WALL_NOW)
    yield monitor
    monitor.close()

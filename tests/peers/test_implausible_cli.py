"""Implausible values from a real SSH poll of the lab are shown, not judged.

The lab's QMOS command line prints the odd cells a faulty module or a garbled line
would (fixtures/lab/ssh_cli.py CliFaults.odd_cells); ranges are rules/plausibility.py's
(common practice).
"""

from __future__ import annotations

import asyncio

import numpy as np
import yaml

from lightwarden.collector.readings import Quantity, ReadingStatus
from lightwarden.exporters.app.config import parse_config
from lightwarden.exporters.app.wiring import build_monitor
from lightwarden.fixtures.lab.server import lab_site_config
from lightwarden.rules.findings import Condition

DEVICE = "qm-dist-b"
ODD = {"sfp1": {"temp": "99999999"}, "sfp2": {"bias": "-1000000"}, "sfp3": {"rx": "99999"},
       "sfp4": {"volts": "-3.3"}}
WHICH = {"sfp1": Quantity.TEMPERATURE, "sfp2": Quantity.BIAS, "sfp3": Quantity.RX_POWER,
         "sfp4": Quantity.SUPPLY}


def test_implausible_cells_are_unknown_with_a_note_and_the_rest_is_judged(
        frozen_lab_servers, lab_env, tmp_path):
    lab = frozen_lab_servers
    data = lab_site_config(lab.endpoints)
    data["devices"] = [d for d in data["devices"] if d["name"] == DEVICE]
    data["state_dir"] = str(tmp_path)
    monitor = build_monitor(parse_config(yaml.safe_dump(data), "test"), alerts=False)
    faults = lab.ssh.faults(DEVICE)
    faults.odd_cells = dict(ODD)

    async def poll():
        try:
            monitor.build_sources()
            return await monitor.poll_all()
        finally:
            monitor.close()

    try:
        (view,) = asyncio.run(poll())
    finally:
        faults.clear()
        faults.odd_cells = {}
    a = view.assessment
    assert a is not None, view.outcome.error
    b = a.batch
    ports = [b.optics[int(o)].port for o in b.optic]
    for port, quantity in WHICH.items():
        (i,) = [k for k in range(len(b)) if ports[k] == port and b.quantity[k] == quantity
                and b.lane[k] in (0, 1)]
        assert b.status[i] == int(ReadingStatus.INVALID), (port, b.notes.get(i))
        assert "implausible" in b.notes[i]
        assert Condition(int(a.condition[i])) is Condition.UNKNOWN
    # every other optic of the device still judged from its values
    others = np.array([p not in WHICH for p in ports])
    assert (b.status[others] == int(ReadingStatus.OK)).mean() > 0.9

"""The project's SNMP collector reading the lab's SNMP agent over UDP on loopback.

Both sides follow the SNMP mapping contract independently; this checks they meet. The lab
clock is frozen, so every reading can be compared with the lab model's sample at the same
lab time. Tolerances are half a unit of the contract's encodings (0.01 dB for the dBm
form and for 0.1 uW at the lab's power levels, 1 uA, 0.05 C, 0.5 mV) plus float slack.
"""

from __future__ import annotations

import asyncio
import math

import pytest

from lightwarden.collector.readings import Quantity, ReadingStatus
from lightwarden.collector.snmp import EnginePool, SnmpCredentials, SnmpSource
from lightwarden.fixtures.lab.model import (
    HOUR,
    LAB_COMMUNITY,
    LAB_V3_AUTH_KEY,
    LAB_V3_PRIV_KEY,
    LAB_V3_USER,
    Lab,
    LabClock,
)
from lightwarden.fixtures.lab.snmp_agent import serve

TOLERANCE = {
    Quantity.RX_POWER: 0.011,  # dB
    Quantity.TX_POWER: 0.011,
    Quantity.BIAS: 0.0006,  # mA
    Quantity.TEMPERATURE: 0.051,  # C
    Quantity.SUPPLY: 0.00051,  # V
}


def model_value(sample, quantity: Quantity, lane: int) -> float | None:
    """The lab model's reading in the batch's units (dBm, mA, C, V); 0.0 mW stays 0.0."""
    if quantity is Quantity.TEMPERATURE:
        return sample.temperature_c
    if quantity is Quantity.SUPPLY:
        return sample.supply_v
    if lane == 0 and quantity is Quantity.RX_POWER:  # a total over all lanes: mW add up
        lit = [ln.rx_mw for ln in sample.lanes if ln.rx_mw is not None]
        total = sum(lit) if lit else None
        return total if not total else 10 * math.log10(total)
    ls = sample.lanes[lane - 1]
    if quantity is Quantity.BIAS:
        return ls.bias_ma
    mw = ls.rx_mw if quantity is Quantity.RX_POWER else ls.tx_mw
    if mw is None or mw == 0.0:
        return mw
    return 10 * math.log10(mw)


@pytest.mark.parametrize(("device", "credentials"), [
    ("qm-core-a", SnmpCredentials.v3(LAB_V3_USER, LAB_V3_AUTH_KEY, LAB_V3_PRIV_KEY,
                                     auth_protocol="SHA-256", priv_protocol="AES-128")),
    ("qm-dist-b", SnmpCredentials.v2c(LAB_COMMUNITY)),
], ids=["watts-v3", "dbm-v2c"])
def test_collector_reads_what_the_lab_model_says(device: str, credentials: SnmpCredentials):
    lab = Lab.load()
    t = lab.epoch + 3 * HOUR

    async def poll_twice():
        server = await serve(lab, LabClock(t, speed=0.0), devices=[device])
        engines = EnginePool()
        try:
            source = SnmpSource(device, "127.0.0.1", credentials, port=server.ports[device],
                                engines=engines, timeout=5)
            first = await source.poll(t)
            second = await source.poll(t)
            return first, second, source.discoveries
        finally:
            engines.close()
            await server.close()

    first, second, discoveries = asyncio.run(poll_twice())
    assert not first.error, first.error
    assert not second.error, second.error
    assert discoveries == 1  # the agent's entLastChangeTime and sysUpTime held still

    samples = {s.port.name: s for s in lab.sample(device, t)}
    batch = first.batch
    fitted = {name for name, s in samples.items() if s.optic is not None}
    assert {o.port for o in batch.optics} == fitted
    for ident in batch.optics:
        optic = samples[ident.port].optic
        assert (ident.form_factor, ident.pmd, ident.part_number, ident.serial, ident.lanes) == (
            optic.part.form_factor, optic.part.pmd, optic.part.part_number, optic.serial,
            optic.part.lanes)
        assert ident.oper_up == samples[ident.port].oper_up
    seen = set()
    for ident, lane, quantity, value, status, note in batch.rows():
        want = model_value(samples[ident.port], quantity, lane)
        where = (ident.port, quantity.name, lane, note)
        if want is None:
            assert status is ReadingStatus.UNAVAILABLE, where
        elif want == 0.0 and quantity in (Quantity.RX_POWER, Quantity.TX_POWER):
            assert status is ReadingStatus.NO_LIGHT, where
        else:
            assert status is ReadingStatus.OK, where
            assert value == pytest.approx(want, abs=TOLERANCE[quantity]), where
        seen.add((ident.port, quantity, lane))
    # 2 module sensors + 3 per lane, + 1 where the total_power_sensor story adds a total
    expected_rows = sum(2 + 3 * samples[p].optic.part.lanes + samples[p].optic.total_rx_sensor
                        for p in fitted)
    assert len(seen) == len(batch) == expected_rows
    # the stories this test relies on to exercise both edge statuses on these devices
    statuses = set(batch.status.tolist())
    if device == "qm-core-a":
        assert ReadingStatus.UNAVAILABLE in statuses  # sfp2 bias (sensor_unavailable)
    assert ReadingStatus.NO_LIGHT in statuses  # sfp20 (dark_port, either end)

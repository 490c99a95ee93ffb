"""The SNMP source against the simulated lab's SNMP agent (fixtures/lab/snmp_agent.py).

The lab agent runs on a frozen lab clock so the collector and net-snmp's snmpbulkwalk
read the same snapshot; their readings must agree after the RFC 3433 conversion written
out in support/snmp_check.py (source: standards.md, verified from the MIB text). One lab device
reports optical power as watts(6), the other as other(1) + "dBm": both encodings of the
mapping contract are covered.
"""

from __future__ import annotations

import asyncio

import pytest
from support import snmp_check as _snmp_check
from support.snmpd import require_binary

from lightwarden.collector.readings import PollOutcome, ReadingStatus
from lightwarden.collector.snmp import EnginePool, SnmpCredentials, SnmpSource
from lightwarden.fixtures.lab.model import (
    LAB_COMMUNITY,
    LAB_V3_AUTH_KEY,
    LAB_V3_PRIV_KEY,
    LAB_V3_USER,
)
from lightwarden.fixtures.lab.snmp_agent import LabSnmpAgent

pytestmark = pytest.mark.external

DEVICES = ("qm-core-a", "qm-core-b")  # watts encoding, dBm encoding (lab.yaml)
V2C = ["-v2c", "-c", LAB_COMMUNITY]
# the lab agent's default v3 protocols: SHA-256 + AES-128
V3 = ["-v3", "-l", "authPriv", "-u", LAB_V3_USER, "-a", "SHA-256", "-A", LAB_V3_AUTH_KEY,
      "-x", "AES", "-X", LAB_V3_PRIV_KEY]  # fmt: skip
# IEEE 802.3 PMD names the collector is told about (the rules catalogue supplies them live)
PMD_NAMES = ("1000BASE-LX", "10GBASE-SR", "10GBASE-LR", "10GBASE-ER", "100GBASE-LR4",
             "400GBASE-FR4", "400GBASE-DR4", "100GBASE-SR4")  # fmt: skip


@pytest.fixture(scope="module")
def lab_agent(lab_snmp_agent):
    require_binary("snmpbulkwalk")
    # lab time stands still, so every read sees the same values
    return lab_snmp_agent(30, DEVICES)


def poll(agent: LabSnmpAgent, device: str, credentials: SnmpCredentials) -> PollOutcome:
    async def main():
        pool = EnginePool()
        host, port = agent.endpoint(device)
        source = SnmpSource(device, host, credentials, port=port, timeout=3.0, retries=1,
                            engines=pool, pmd_names=PMD_NAMES)  # fmt: skip
        try:
            return await source.poll(1_790_000_000.0)
        finally:
            pool.close()

    return asyncio.run(main())


CREDENTIALS = {
    "v2c": (SnmpCredentials.v2c(LAB_COMMUNITY), V2C),
    "v3-SHA-256-AES-128": (
        SnmpCredentials.v3(LAB_V3_USER, LAB_V3_AUTH_KEY, LAB_V3_PRIV_KEY, "SHA-256", "AES-128"),
        V3,
    ),
}


@pytest.mark.parametrize("device", DEVICES)
@pytest.mark.parametrize("version", list(CREDENTIALS))
def test_collector_agrees_with_net_snmp_on_lab_agent(lab_agent, device, version):
    credentials, cli_auth = CREDENTIALS[version]
    host, port = lab_agent.endpoint(device)
    expected = _snmp_check.expected_readings(f"udp:{host}:{port}", cli_auth)
    assert expected, "net-snmp found no optic sensors"
    outcome = poll(lab_agent, device, credentials)
    _snmp_check.assert_agrees(outcome, expected)
    statuses = {status for status, _ in expected.values()}
    assert ReadingStatus.OK in statuses


@pytest.mark.parametrize("device", DEVICES)
def test_lab_identities_match_the_lab_model(lab, lab_agent, device):
    outcome = poll(lab_agent, device, CREDENTIALS["v2c"][0])
    assert outcome.ok, outcome.error
    got = {o.port: o for o in outcome.batch.optics}
    model_ports = {p.name: p for p in lab.devices[device].ports if p.optic is not None}
    assert set(got) == set(model_ports)
    for name, port in model_ports.items():
        optic = got[name]
        part = port.optic.part
        assert optic.if_index == port.if_index
        assert optic.alias == port.alias
        assert (optic.form_factor, optic.pmd) == (part.form_factor, part.pmd)
        assert (optic.part_number, optic.serial) == (part.part_number, port.optic.serial)
        assert optic.lanes == part.lanes
        assert optic.admin_up is not None and optic.oper_up is not None

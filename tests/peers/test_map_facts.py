"""Memory maps in the pollers: which parts of a map are trusted, and reading them once.

Trust by check byte (collector/map_facts.py): maps are built with the project's encoder
and one check byte spoiled at a time; the check byte coverage is standards.md's SFF-8472
table (CC_BASE bytes 0-62, CC_EXT 64-94 incl. byte 92, CC_DMI A2h 0-94 incl. the
thresholds) (verified). The pollers are run against the lab's real SNMP agent and SSH
server on loopback; net-snmp's snmpget reads the same map column as a cross-check.
"""

from __future__ import annotations

import asyncio
import os
import subprocess

import numpy as np
import pytest
from support.snmpd import require_binary

from lightwarden.collector.map_facts import (
    OMA_ROW_NOTE,
    MapFacts,
    apply_map_facts,
    apply_to_identity,
    facts_from_map,
)
from lightwarden.collector.readings import BatchBuilder, OpticIdentity, Quantity, Thresholds
from lightwarden.collector.snmp import EnginePool, SnmpCredentials, SnmpSource
from lightwarden.collector.ssh.platforms.platform import load_platform
from lightwarden.collector.ssh.source import SshCredentials, SshSource, SshWorkers
from lightwarden.fixtures.lab.encode import encode_cmis, encode_sff8472, encode_sff8636
from lightwarden.fixtures.lab.maps import lab_memory_map
from lightwarden.fixtures.lab.model import (
    LAB_COMMUNITY,
    LAB_SSH_PASSWORD,
    LAB_SSH_USER,
    LabClock,
)
from lightwarden.fixtures.lab.snmp_agent import EEPROM_OID
from lightwarden.fixtures.lab.ssh_cli import LabSshServer

RX = Quantity.RX_POWER
RX_T = Thresholds(high_alarm=2.0, low_alarm=-18.0, high_warning=0.0, low_warning=-15.0)


# -- trust by check byte ----------------------------------------------------------------


def test_clean_map_gives_thresholds_type_and_identity():
    f = facts_from_map(encode_sff8472(thresholds={RX: RX_T}, rx_power_type="oma",
                                      serial="HG1"))
    # -18 dBm = 158.5 steps of 0.1 uW: one step there is 0.027 dB (standards.md LSB, verified)
    assert f.thresholds[RX].low_alarm == pytest.approx(-18.0, abs=0.03)
    assert (f.rx_power_type, f.pmd, f.serial, f.form_factor) == ("oma", "10GBASE-LR", "HG1",
                                                                  "SFP+")
    assert f.notes == (OMA_ROW_NOTE,)


def test_bad_cc_dmi_drops_thresholds_only():
    f = facts_from_map(encode_sff8472(thresholds={RX: RX_T}, bad_checksum="CC_DMI"))
    assert f.thresholds == {}
    assert f.pmd == "10GBASE-LR" and f.rx_power_type == "average"
    assert len(f.notes) == 1 and "CC_DMI" in f.notes[0] and "not used" in f.notes[0]


def test_bad_cc_base_keeps_thresholds_drops_identity():
    f = facts_from_map(encode_sff8472(thresholds={RX: RX_T}, bad_checksum="CC_BASE"))
    assert RX in f.thresholds
    assert (f.pmd, f.part_number, f.wavelength_nm) == ("", "", None)
    assert "CC_BASE" in f.notes[0] and "thresholds are" in f.notes[0]


def test_bad_cc_ext_drops_rx_type_and_serial():
    f = facts_from_map(encode_sff8472(thresholds={RX: RX_T}, rx_power_type="oma",
                                      bad_checksum="CC_EXT"))
    assert f.rx_power_type is None and f.serial == ""
    assert RX in f.thresholds and f.pmd == "10GBASE-LR"
    assert any("CC_EXT" in n for n in f.notes) and OMA_ROW_NOTE not in f.notes


def test_paged_layouts_follow_their_check_bytes():
    cmis_bad_thresholds = facts_from_map(encode_cmis(thresholds={RX: RX_T},
                                                     bad_checksum="page 02h"))
    assert cmis_bad_thresholds.thresholds == {} and cmis_bad_thresholds.pmd == "400GBASE-DR4"
    cmis_bad_id = facts_from_map(encode_cmis(thresholds={RX: RX_T}, bad_checksum="page 00h"))
    assert RX in cmis_bad_id.thresholds and cmis_bad_id.part_number == ""
    qsfp_bad_base = facts_from_map(encode_sff8636(thresholds={RX: RX_T},
                                                  bad_checksum="CC_BASE"))
    assert RX in qsfp_bad_base.thresholds and qsfp_bad_base.pmd == ""
    assert qsfp_bad_base.lanes is None
    assert facts_from_map(encode_sff8636(thresholds={RX: RX_T})).lanes == 4


@pytest.mark.parametrize("data", [b"", b"\x00" * 16, bytes(range(256)) * 2])
def test_unusable_bytes_say_why(data):
    f = facts_from_map(data)
    assert not f.usable and f.thresholds == {}
    assert f.notes and f.notes[0].startswith("memory map not usable")


def test_apply_fills_only_what_the_device_did_not_say():
    cli = {RX: Thresholds(1.0, -20.0, 0.0, -17.0), Quantity.BIAS: Thresholds(9.0, 1.0)}
    ident = OpticIdentity("d", "p1", serial="HG1", pmd="10GBASE-LR", pmd_source="entity",
                          thresholds=dict(cli))
    facts = MapFacts(serial="HG1", pmd="10GBASE-ER", rx_power_type="oma",
                     thresholds={RX: RX_T}, wavelength_nm=1310.0, notes=("n",))
    assert apply_to_identity(ident, facts) == ("n",)
    assert (ident.pmd, ident.pmd_source) == ("10GBASE-LR", "entity")  # device's own kept
    assert ident.thresholds == {RX: RX_T, Quantity.BIAS: cli[Quantity.BIAS]}
    assert (ident.rx_power_type, ident.wavelength_nm) == ("oma", 1310.0)
    bare = OpticIdentity("d", "p2")
    apply_to_identity(bare, facts)
    assert (bare.pmd, bare.pmd_source, bare.serial) == ("10GBASE-ER", "eeprom", "HG1")


def test_a_map_of_another_module_is_not_used():
    ident = OpticIdentity("d", "p1", serial="HG2")
    notes = apply_to_identity(ident, MapFacts(serial="HG1", thresholds={RX: RX_T}))
    assert ident.thresholds == {} and "HG1" in notes[0] and "HG2" in notes[0]


def test_notes_land_on_rx_rows_only():
    b = BatchBuilder("d")
    o = b.add_optic(OpticIdentity("d", "p1"))
    b.add(o, 1, Quantity.RX_POWER, -3.0)
    b.add(o, 1, Quantity.TX_POWER, -2.0)
    b.add(o, 0, Quantity.TEMPERATURE, 30.0)
    batch = b.build(0.0)
    apply_map_facts(batch, {"p1": MapFacts(rx_power_type="oma", notes=(OMA_ROW_NOTE,))})
    assert batch.notes == {0: OMA_ROW_NOTE}
    assert batch.optics[0].rx_power_type == "oma"


# -- the pollers against the lab ---------------------------------------------------------


@pytest.fixture(scope="module")
def clock(lab):
    return LabClock(lab.epoch, speed=0.0)


@pytest.fixture(scope="module")
def agent(lab_snmp_agent):
    return lab_snmp_agent(0, ["qm-dist-a", "qm-core-b"])


def test_snmp_reads_each_module_once(agent, lab):
    host, port = agent.endpoint("qm-dist-a")
    optics = [p for p in lab.devices["qm-dist-a"].ports if p.optic is not None]

    async def go():
        pool = EnginePool()
        src = SnmpSource("qm-dist-a", host, SnmpCredentials.v2c(LAB_COMMUNITY), port=port,
                         engines=pool, eeprom_oid=EEPROM_OID, timeout=3.0)
        try:
            first = await src.poll(1.0)
            reads = [src.map_reads]
            await src.poll(2.0)
            reads.append(src.map_reads)
            src.forget()  # rediscovery: the same modules, so no map is read again
            await src.poll(3.0)
            reads.append(src.map_reads)
            # one module "new" (as after a swap): only its map is fetched, by GET
            gone = next(k for k in src._maps if k[0] == optics[0].if_index)
            del src._maps[gone]
            src.forget()
            last = await src.poll(4.0)
            reads.append(src.map_reads)
            return first, last, reads
        finally:
            pool.close()

    first, last, reads = asyncio.run(go())
    assert first.ok and last.ok
    # Each module's map once, except a module with a status flag set (the lab's tx_fault
    # story, elsewhere): its map is read every poll, so the flag is seen to clear.
    flagged = sum(1 for p in optics if p.optic.tx_fault)
    n = len(optics)
    assert reads == [n, n + flagged, n + 2 * flagged, n + 3 * flagged + 1]
    for outcome in (first, last):
        with_thresholds = [o for o in outcome.batch.optics if RX in o.thresholds]
        assert len(with_thresholds) == len(optics)


def test_snmp_without_a_map_column_still_polls(agent):
    host, port = agent.endpoint("qm-dist-a")
    column = "1.3.6.1.4.1.32473.7.1.9"  # nothing served here

    async def go():
        pool = EnginePool()
        src = SnmpSource("qm-dist-a", host, SnmpCredentials.v2c(LAB_COMMUNITY), port=port,
                         engines=pool, eeprom_oid=column, timeout=3.0)
        try:
            return await src.poll(1.0)
        finally:
            pool.close()

    out = asyncio.run(go())
    assert out.ok
    assert all(o.thresholds == {} for o in out.batch.optics)
    rx_rows = np.nonzero(out.batch.quantity == int(RX))[0]
    assert all(f"no memory map at {column}." in out.batch.notes[int(r)] for r in rx_rows)


@pytest.mark.external
def test_net_snmp_reads_the_same_map(agent, lab, clock):
    snmpget = require_binary("snmpget")
    host, port = agent.endpoint("qm-dist-a")
    lab_port = lab.devices["qm-dist-a"].port("qsfp1")  # CMIS, 896 bytes
    cmd = [snmpget, "-v2c", "-c", LAB_COMMUNITY, "-On", "-Ox", "-t", "3", "-r", "1",
           f"{host}:{port}", f"{EEPROM_OID}.{lab_port.if_index}"]
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=60,
                          env={**os.environ, "MIBS": ""})
    assert done.returncode == 0, done.stderr
    hex_text = done.stdout.split("Hex-STRING:", 1)[1]
    got = bytes.fromhex("".join(hex_text.split()))
    assert got == lab_memory_map(lab.sample_port(lab_port, clock.now()))


def test_ssh_reads_each_module_once(lab, clock):
    qmos = load_platform("qmos")
    with LabSshServer(lab, clock, listeners={"qm-dist-a": "qm-dist-a"}) as server:

        async def go():
            with SshWorkers(2) as workers:
                src = SshSource("qm-dist-a", server.host, qmos,
                                SshCredentials(LAB_SSH_USER, LAB_SSH_PASSWORD), workers,
                                port=server.port("qm-dist-a"), known_hosts=server.known_hosts,
                                read_maps=True)
                first = await src.poll(1.0)
                reads = src.map_reads
                second = await src.poll(2.0)
                await src.aclose()
                return first, second, reads, src.map_reads

        first, second, reads_first, reads_second = asyncio.run(go())
    count = sum(1 for p in lab.devices["qm-dist-a"].ports if p.optic is not None)
    flagged = sum(1 for p in lab.devices["qm-dist-a"].ports if p.optic and p.optic.tx_fault)
    assert first.ok and second.ok, (first.error, second.error)
    # once per module, and every poll for the one with a flag set (tx_fault story)
    assert (reads_first, reads_second) == (count, count + flagged)
    for outcome in (first, second):
        sfp6 = next(o for o in outcome.batch.optics if o.port == "sfp6")
        rows = np.nonzero((outcome.batch.quantity == int(RX))
                          & (outcome.batch.optic == outcome.batch.optics.index(sfp6)))[0]
        assert all("CC_BASE" in outcome.batch.notes[int(r)] for r in rows)


@pytest.mark.external
def test_a_flagged_module_is_read_every_poll(agent, lab):
    # The tx_fault story's module (lab.yaml) keeps its flag: its map is fetched each poll,
    # the others' once (collector/map_facts.py MAP_REFRESH_S).
    device = "qm-core-b"
    host, port = agent.endpoint(device)
    optics = [p for p in lab.devices[device].ports if p.optic is not None]
    assert sum(1 for p in optics if p.optic.tx_fault) == 1

    async def go():
        pool = EnginePool()
        src = SnmpSource(device, host, SnmpCredentials.v2c(LAB_COMMUNITY), port=port,
                         engines=pool, eeprom_oid=EEPROM_OID, timeout=3.0)
        try:
            first = await src.poll(1.0)
            reads = [src.map_reads]
            await src.poll(2.0)
            reads.append(src.map_reads)
            return first, reads
        finally:
            pool.close()

    first, reads = asyncio.run(go())
    faulted = next(o for o in first.batch.optics if o.port == "sfp27")
    assert ("tx_fault", 1) in faulted.flags
    # every module with a flag set is read again (the faulted one, and the hot receiver
    # of the hot_receiver story whose own Rx high alarm flag is set), the rest are not
    flagged = [o.port for o in first.batch.optics if o.flags]
    assert "sfp27" in flagged and "sfp31" in flagged
    assert reads == [len(optics), len(optics) + len(flagged)]

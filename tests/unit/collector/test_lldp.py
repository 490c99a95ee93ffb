"""LLDP neighbours (IEEE 802.1AB LLDP-MIB): the local port number is the agent's own.

Index and column layout of lldpLocPortTable (1.0.8802.1.1.2.1.3.7) and lldpRemTable
(1.0.8802.1.1.2.1.4.1) from the LLDP-MIB in IEEE 802.1AB-2005 Annex (from memory);
port id subtypes: interfaceName(5), local(7), macAddress(3).
"""

from __future__ import annotations

from lightwarden.collector.readings import OpticIdentity
from lightwarden.collector.snmp import lldp
from lightwarden.rules.consistency import (
    Mismatch,
    check_patching,
    discovered_links,
    resolve_neighbour,
)
from lightwarden.rules.plant import Plant

LOC = {lldp.LOC_PORT_ID_SUBTYPE: {(7001,): 5, (7002,): 3},
       lldp.LOC_PORT_ID: {(7001,): b"sfp1", (7002,): b"\x00\x1a\x2b\x3c\x4d\x5e"},
       lldp.LOC_PORT_DESC: {(7001,): b"uplink", (7002,): b"sfp2"}}
REM = {lldp.REM_PORT_ID_SUBTYPE: {(0, 7001, 1): 5, (0, 7002, 3): 3},
       lldp.REM_PORT_ID: {(0, 7001, 1): b"Eth9", (0, 7002, 3): b"\x00\x00\x00\x00\x00\x01"},
       lldp.REM_PORT_DESC: {(0, 7001, 1): b"", (0, 7002, 3): b"sfp7"},
       lldp.REM_SYS_NAME: {(0, 7001, 1): b"qm-far-1.lab.example", (0, 7002, 3): b"qm-far-2"}}


def test_local_port_numbers_map_through_the_local_port_table():
    got = lldp.neighbours(LOC, REM, {"sfp1", "sfp2", "sfp3"})
    # 7001 is not an ifIndex: it maps through lldpLocPortId (interfaceName) to sfp1; 7002's
    # id is a MAC, so its description names the port; a MAC remote id falls back to the
    # remote port description
    assert got == {"sfp1": ("qm-far-1.lab.example", "Eth9"), "sfp2": ("qm-far-2", "sfp7")}


def test_neighbours_resolve_to_our_devices_and_contradict_the_record():
    devices = {"qm-far-1", "qm-near"}
    assert resolve_neighbour(("QM-FAR-1.lab.example", "Eth9"), devices) == ("qm-far-1", "Eth9")
    assert resolve_neighbour(("someone-else", "x"), devices) is None
    plant = Plant([], {("qm-near", "sfp1"): ("qm-far-1", "Eth8"),
                       ("qm-far-1", "Eth8"): ("qm-near", "sfp1")})
    o = OpticIdentity(device="qm-near", port="sfp1", lldp_far=("qm-far-1", "eth9"))
    (f,) = check_patching([o], plant, devices)
    assert f.kind is Mismatch.PATCHING
    assert (f.device, f.port, f.far_device, f.far_port) == ("qm-far-1", "Eth8", "qm-near",
                                                            "sfp1")
    assert f.text.startswith("qm-far-1 Eth8 / qm-near sfp1: ")  # the record's ends
    assert "LLDP on qm-near sfp1 sees qm-far-1 eth9" in f.text
    # agreeing (names compared case-insensitively) or outside our fleet: nothing
    ok = OpticIdentity(device="qm-near", port="sfp1", lldp_far=("qm-far-1", "eth8"))
    assert check_patching([ok], plant, devices) == []
    # no record: the discovered link is used, both ways
    free = OpticIdentity(device="qm-near", port="sfp3", lldp_far=("qm-far-1", "Eth3"))
    assert discovered_links([free], plant, devices) == {
        ("qm-near", "sfp3"): ("qm-far-1", "Eth3"), ("qm-far-1", "Eth3"): ("qm-near", "sfp3")}

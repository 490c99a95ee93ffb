"""Where an optic's Rx window comes from once memory maps are read, end to end.

The whole lab runs (real SNMP agents over UDP, real SSH servers, loopback only) on a
frozen lab clock; the service's Monitor polls it with the lab's own site config
(`lab_site_config`: SNMP devices with `eeprom_oid`, the SSH device with `read_maps`),
and once more with every device over SSH with `read_maps`. Without maps the SNMP
optics have no module thresholds and are judged by the IEEE PMD table; with maps the
module's declared thresholds (lab.yaml) become the window, and an OMA module is judged
only in its own terms, with a note saying so.

Sources: PMD edges from standards.md PMD table, 10GBASE-LR row: sensitivity -14.4 dBm,
overload +0.5 dBm (verified). Window precedence site > module > PMD table: rules/windows.py
(design). Register resolution (0.1 uW LSB): standards.md SFF-8472 rows (verified).
"""

from __future__ import annotations

import asyncio
import math
from typing import Any

import numpy as np
import pytest
from prometheus_client.parser import text_string_to_metric_families

from lightwarden.collector.map_facts import OMA_ROW_NOTE
from lightwarden.collector.readings import Quantity, ReadingStatus
from lightwarden.exporters.app.config import SiteConfig
from lightwarden.exporters.app.monitor import Monitor
from lightwarden.exporters.app.wiring import build_monitor
from lightwarden.exporters.pages.view import DeviceView
from lightwarden.fixtures.lab.model import Lab
from lightwarden.fixtures.lab.server import LabServers, lab_site_config
from lightwarden.fixtures.lab.snmp_agent import EEPROM_OID
from lightwarden.rules.findings import WindowSource
from lightwarden.rules.windows import OMA_NOTE

pytestmark = pytest.mark.slow

PMD_LR = (-14.4, 0.5)  # 10GBASE-LR (sensitivity, overload). source: standards.md (verified)
EXTERNAL = ("qm-core-a", "sfp1")  # LF-10GLR-10, calibration external (lab.yaml groups)
OMA = ("qm-core-b", "sfp3")  # lab.yaml story oma_module: LF-10GLR-OMA
BAD_BASE = ("qm-dist-a", "sfp6")  # lab.yaml story bad_checksum: corrupt CC_BASE
SSH_OPTIC = ("qm-dist-b", "sfp1")  # LF-10GLR-10 on the lab's SSH device


def dbm_close(got: float, want: float) -> bool:
    """Within one register step (0.1 uW) of the declared edge, compared in mW."""
    return abs(10 ** (got / 10) - 10 ** (want / 10)) <= 1e-4 * 1.1


@pytest.fixture(scope="module")
def servers(frozen_lab_servers):
    # Lab time stands still at the epoch: every protocol serves the same snapshot.
    return frozen_lab_servers


@pytest.fixture(scope="module")
def env(lab_env):
    return None


def lab_config(servers: LabServers, *, maps: bool = True, all_ssh: bool = False) -> SiteConfig:
    data: dict[str, Any] = lab_site_config(servers.endpoints, secrets="env")
    endpoints = servers.endpoints
    for dev in data["devices"]:
        if all_ssh:
            dev.update(protocol="ssh", credentials="lab-ssh", platform="qmos",
                       port=endpoints.ssh[dev["name"]])
            dev.pop("eeprom_oid", None)
            dev["read_maps"] = True
        if not maps:
            dev.pop("eeprom_oid", None)
            dev.pop("read_maps", None)
    return SiteConfig.model_validate(data)


def poll_once(cfg: SiteConfig, lab: Lab) -> tuple[Monitor, dict[str, DeviceView]]:
    monitor = build_monitor(cfg, clock=lambda: lab.epoch, alerts=False)

    async def sweep() -> list[DeviceView]:
        try:
            return await monitor.poll_all()
        finally:
            monitor.close()

    views = asyncio.run(sweep())
    by_device = {v.outcome.device: v for v in views}
    for name, view in by_device.items():
        assert view.outcome.ok, (name, view.outcome.error)
    return monitor, by_device


def rx_rows(view: DeviceView, port: str) -> tuple[Any, list[int]]:
    batch = view.outcome.batch
    slot = next(i for i, o in enumerate(batch.optics) if o.port == port)
    rows = np.nonzero((batch.optic == slot) & (batch.quantity == int(Quantity.RX_POWER)))[0]
    assert len(rows) == batch.optics[slot].lanes
    return batch.optics[slot], rows.tolist()


def row_note(view: DeviceView, row: int) -> str:
    return " | ".join(filter(None, (view.outcome.batch.notes.get(row),
                                    view.assessment.notes.get(row))))


@pytest.fixture(scope="module")
def with_maps(servers, lab, env):
    cfg = lab_config(servers)
    assert all(d.eeprom_oid == EEPROM_OID for d in cfg.devices if d.protocol == "snmp")
    assert all(d.read_maps for d in cfg.devices if d.protocol == "ssh")
    return poll_once(cfg, lab)


@pytest.fixture(scope="module")
def without_maps(servers, lab, env):
    return poll_once(lab_config(servers, maps=False), lab)


@pytest.fixture(scope="module")
def all_ssh(servers, lab, env):
    return poll_once(lab_config(servers, all_ssh=True), lab)


def assert_module_window(view: DeviceView, port: str, declared: tuple[float, ...]) -> None:
    """Rx levels of every lane = the module's declared (HA, LA, HW, LW), source module.

    (The margin edges beside them are the standard's where the PMD is known: see
    rules/windows.py, two judgements per reading.)
    """
    high_alarm, low_alarm, high_warning, low_warning = declared
    a = view.assessment
    _, rows = rx_rows(view, port)
    for r in rows:
        assert a.window_source[r] == WindowSource.MODULE
        assert list(a.edge_sources[r, 2:]) == [WindowSource.MODULE] * 4
        assert dbm_close(a.low_alarm[r], low_alarm) and dbm_close(a.high_alarm[r], high_alarm)
        assert dbm_close(a.low_warning[r], low_warning)
        assert dbm_close(a.high_warning[r], high_warning)


def test_snmp_optic_window_comes_from_the_module_with_maps(with_maps, without_maps, lab):
    device, port = EXTERNAL
    part = lab.devices[device].port(port).optic.part
    assert part.calibration == "external"
    _, views = with_maps
    assert_module_window(views[device], port, part.thresholds["rx_power"])
    optic, _ = rx_rows(views[device], port)
    assert optic.pmd == "10GBASE-LR" and optic.rx_power_type == "average"

    # Before: the same optic polled without its map has no module thresholds and is
    # judged by the PMD table.
    _, before = without_maps
    a = before[device].assessment
    optic, rows = rx_rows(before[device], port)
    assert optic.thresholds == {}
    for r in rows:
        assert a.window_source[r] == WindowSource.PMD_TABLE
        assert (a.low_edge[r], a.high_edge[r]) == pytest.approx(PMD_LR)
        assert math.isnan(a.low_warning[r])


def test_every_snmp_optic_gets_its_part_thresholds(with_maps, lab):
    _, views = with_maps
    checked = 0
    for name, view in views.items():
        if view.outcome.device not in ("qm-core-a", "qm-core-b", "qm-dist-a"):
            continue
        for optic in view.outcome.batch.optics:
            lab_optic = lab.devices[name].port(optic.port).optic
            declared = lab_optic.part.thresholds
            got = optic.thresholds[Quantity.RX_POWER]
            assert dbm_close(got.low_alarm, declared["rx_power"][1])
            assert optic.thresholds[Quantity.BIAS].high_alarm == pytest.approx(
                declared["bias"][0], abs=0.002)  # bias LSB 2 uA (standards.md, verified)
            assert optic.rx_power_type == lab_optic.part.rx_power_type
            checked += 1
    assert checked > 100


def test_oma_optic_is_judged_in_its_own_terms_with_a_note(with_maps, without_maps, lab):
    device, port = OMA
    part = lab.devices[device].port(port).optic.part
    assert part.rx_power_type == "oma"
    _, views = with_maps
    view = views[device]
    optic, rows = rx_rows(view, port)
    assert optic.rx_power_type == "oma"
    assert_module_window(view, port, part.thresholds["rx_power"])
    a = view.assessment
    for r in rows:
        # not the PMD's average-power edges, and the reason is on the row
        assert not dbm_close(a.low_edge[r], PMD_LR[0])
        assert not dbm_close(a.high_edge[r], PMD_LR[1])
        assert OMA_ROW_NOTE in row_note(view, r)
        # judged against the standard's OMA sensitivity (cl.52 10GBASE-LR -12.6 dBm OMA,
        # pmd_catalogue.csv, from memory), never compared with its average-power row
        assert "Rx judged in OMA" in row_note(view, r)
        assert dbm_close(a.low_edge[r], -12.6)
        assert "average receive power" not in row_note(view, r)

    # Without the map the same optic passes for average power: judged by the PMD table
    # with no word about OMA. This is the silent comparison the map prevents.
    _, before = without_maps
    optic, rows = rx_rows(before[device], port)
    assert optic.rx_power_type == "average"
    for r in rows:
        assert before[device].assessment.window_source[r] == WindowSource.PMD_TABLE
        assert "OMA" not in row_note(before[device], r)


def test_bad_base_checksum_keeps_thresholds_and_says_so(with_maps, lab):
    device, port = BAD_BASE
    optic_lab = lab.devices[device].port(port).optic
    assert optic_lab.bad_checksum
    _, views = with_maps
    view = views[device]
    assert_module_window(view, port, optic_lab.part.thresholds["rx_power"])
    optic, rows = rx_rows(view, port)
    assert optic.pmd == "10GBASE-LR" and optic.pmd_source != "eeprom"  # from ENTITY-MIB
    for r in rows:
        note = row_note(view, r)
        assert "CC_BASE" in note and "thresholds are" in note


def test_ssh_with_maps_learns_the_rx_power_type(all_ssh, lab):
    device, port = OMA
    part = lab.devices[device].port(port).optic.part
    _, views = all_ssh
    view = views[device]
    optic, rows = rx_rows(view, port)
    assert optic.rx_power_type == "oma"
    assert_module_window(view, port, part.thresholds["rx_power"])
    for r in rows:
        note = row_note(view, r)
        assert OMA_ROW_NOTE in note and OMA_NOTE not in note
    # the lab's SSH device in the lab config reads its maps too
    device, port = SSH_OPTIC
    assert_module_window(view := views[device], port,
                         lab.devices[device].port(port).optic.part.thresholds["rx_power"])
    assert all(view.outcome.batch.status[r] == ReadingStatus.OK
               for r in rx_rows(view, port)[1])


def test_exposition_names_each_edges_source(with_maps, lab):
    monitor, _ = with_maps
    device, port = EXTERNAL
    declared_overload = lab.devices[device].port(port).optic.part.thresholds["rx_power"][0]
    text = monitor.exposition.body().decode()
    margin, levels = {}, {}
    for family in text_string_to_metric_families(text):
        for sample in family.samples:
            key = (sample.labels.get("device"), sample.labels.get("port"))
            if sample.name == "lightwarden_rx_overload_dbm":
                margin[key] = (sample.labels["window_source"], sample.value)
            if sample.name == "lightwarden_rx_level_dbm" and \
                    sample.labels["level"] == "high_alarm":
                levels[key] = (sample.labels["source"], sample.value)
    # The margin edge: the standard's 10GBASE-LR overload +0.5 dBm (IEEE 802.3 cl.52,
    # standards.md, verified); the module's own high alarm beside it, source module.
    assert margin[(device, port)] == ("standard", PMD_LR[1])
    source, value = levels[(device, port)]
    assert source == "module" and dbm_close(value, declared_overload)
    # The OMA module: no average-power standard edge applies, so its margin edge is the
    # module's own alarm.
    source, value = margin[OMA]
    assert source == "module"
    assert dbm_close(value, lab.devices[OMA[0]].port(OMA[1]).optic.part.thresholds["rx_power"][0])


# Display resolution of the two paths: the lab's SNMP agent encodes power as 0.1 uW or
# 0.01 dB, bias in uA, temperature in 0.1 C, supply in mV; its command line prints two
# decimals (dBm, mA, C, V) or four (mW). Tolerances cover the coarser of each pair.
_TOLERANCE = {
    Quantity.RX_POWER: 0.02,  # dB
    Quantity.TX_POWER: 0.02,
    Quantity.BIAS: 0.01,  # mA
    Quantity.TEMPERATURE: 0.1,  # C
    Quantity.SUPPLY: 0.01,  # V
}


def _readings(view: DeviceView) -> dict[tuple[str, int, Quantity], tuple[float, int]]:
    b = view.outcome.batch
    return {
        (b.optics[int(b.optic[i])].port, int(b.lane[i]), Quantity(int(b.quantity[i]))):
            (float(b.value[i]), int(b.status[i]))
        for i in range(len(b))
    }


@pytest.mark.parametrize("device", ["qm-core-a", "qm-core-b", "qm-dist-a"])
def test_ssh_and_snmp_give_the_same_readings_for_the_same_optics(with_maps, all_ssh, device):
    """issue: polling over SSH gives the same readings as the SNMP path (frozen lab time)."""
    snmp = _readings(with_maps[1][device])
    ssh = _readings(all_ssh[1][device])
    # The SNMP agent also offers a total Rx sensor on one optic (lab story
    # total_power_sensor), stored at lane 0; the command line has no such row.
    totals = {k for k in snmp if k[1] == 0 and k[2] == Quantity.RX_POWER}
    assert len(totals) == (device == "qm-core-b")
    for k in totals:
        del snmp[k]
    assert snmp.keys() == ssh.keys()
    for key, (value, status) in snmp.items():
        ssh_value, ssh_status = ssh[key]
        assert ReadingStatus(ssh_status) == ReadingStatus(status), key
        if status == ReadingStatus.OK:
            assert math.isclose(ssh_value, value, abs_tol=_TOLERANCE[key[2]]), (key, value,
                                                                               ssh_value)
    # and the same windows judged them: module thresholds from the maps on both paths
    def sources(view: DeviceView) -> dict[tuple[str, int, Quantity], tuple[int, ...]]:
        b, a = view.outcome.batch, view.assessment
        return {(b.optics[int(b.optic[i])].port, int(b.lane[i]), Quantity(int(b.quantity[i]))):
                tuple(a.edge_sources[i].tolist()) for i in range(len(b))}

    s_snmp, s_ssh = sources(with_maps[1][device]), sources(all_ssh[1][device])
    assert {k: s_snmp[k] for k in ssh} == s_ssh

"""The lab SNMP agent over real UDP on loopback, read with net-snmp's command-line tools.

The agent runs on a frozen lab clock (speed 0) so every value it serves can be compared
exactly with the lab model's own sample at the same lab time. Sensor values are decoded
with the RFC 3433 rule, physical = value x 10^(3 x (scale - 9)) x 10^(-precision)
(source: standards.md, "RFC 3433 ENTITY-SENSOR-MIB", verified from the MIB module text),
not with the agent's own encoder. Sensors are identified through the ENTITY-MIB names and
containment the mapping contract prescribes, not through the agent's index scheme.
"""

from __future__ import annotations

import asyncio
import functools
import math
import os
import re
import socket
import subprocess
import time
from importlib import resources

import pytest
import yaml
from support.procs import require_binary

from lightwarden.fixtures.lab.model import (
    HOUR,
    LAB_COMMUNITY,
    LAB_V3_AUTH_KEY,
    LAB_V3_PRIV_KEY,
    LAB_V3_USER,
    Lab,
    LabClock,
)
from lightwarden.fixtures.lab.snmp_agent import (
    EEPROM_OID,
    LabAgentError,
    LabSnmpAgent,
    build_device_table,
    encode_power,
    serve,
)

HOST = "127.0.0.1"
SYS_UPTIME = "1.3.6.1.2.1.1.3.0"
SYS_NAME = "1.3.6.1.2.1.1.5.0"
IF_NAME = "1.3.6.1.2.1.31.1.1.1.1"
ENT_PHYS = "1.3.6.1.2.1.47.1.1.1.1"
ENT_ALIAS_ID = "1.3.6.1.2.1.47.1.3.2.1.2"
SENSOR = "1.3.6.1.2.1.99.1.1.1"
SENSOR_COLUMNS = 8  # entPhySensorType .. entPhySensorValueUpdateRate (RFC 3433)

V2C = ["-v2c", "-c", LAB_COMMUNITY]


def v3(auth: str, auth_key: str = LAB_V3_AUTH_KEY) -> list[str]:
    return ["-v3", "-l", "authPriv", "-u", LAB_V3_USER, "-a", auth, "-A", auth_key,
            "-x", "AES", "-X", LAB_V3_PRIV_KEY]


def require_net_snmp() -> None:
    for tool in ("snmpget", "snmpbulkwalk", "snmpbulkget"):
        require_binary(tool, "snmp")


def run_tool(tool: str, port: int, creds: list[str], *args: str, timeout: int = 3,
             retries: int = 1) -> subprocess.CompletedProcess[str]:
    cmd = [tool, *creds, "-On", "-OQ", "-Ot", "-t", str(timeout), "-r", str(retries),
           f"{HOST}:{port}", *args]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=60,
                          env={**os.environ, "MIBS": ""})


def parse(stdout: str) -> dict[str, str]:
    """'.1.3.6 = value' lines -> {'1.3.6': value} (quotes stripped from strings)."""
    out: dict[str, str] = {}
    for line in stdout.splitlines():
        oid, sep, value = line.partition(" = ")
        assert sep, f"unexpected net-snmp output line: {line!r}"
        value = value.strip()
        if len(value) >= 2 and value[0] == value[-1] == '"':
            value = value[1:-1]
        out[oid.lstrip(".")] = value
    return out


def snmp(tool: str, port: int, creds: list[str], *args: str) -> dict[str, str]:
    done = run_tool(tool, port, creds, *args)
    assert done.returncode == 0, f"{tool} failed: {done.stderr.strip()}"
    return parse(done.stdout)


def column(rows: dict[str, str], prefix: str) -> dict[int, str]:
    """Rows of one single-index column: {index: value}."""
    return {int(oid[len(prefix) + 1:]): v for oid, v in rows.items()
            if oid.startswith(prefix + ".") and "." not in oid[len(prefix) + 1:]}


def rfc3433(value: int, scale: int, precision: int) -> float:
    # source: standards.md / RFC 3433 (verified): value x 10^((scale-9)*3) x 10^-precision
    return value * 10.0 ** (3 * (scale - 9)) * 10.0 ** (-precision)


SENSOR_NAME = re.compile(
    r"^(?P<port>\S+) (?P<what>Rx Power|Tx Power|Bias|Temperature|Supply Voltage)"
    r"(?: Lane (?P<lane>\d+)| (?P<total>Total))?$")


@functools.cache
def sensors_on(port: int, creds: tuple[str, ...]) -> dict[tuple[str, str, int], dict[str, float]]:
    """sensors_by_name, once per agent port and credentials (the module's clock is frozen)."""
    return sensors_by_name(port, list(creds))


def sensors_by_name(port: int, creds: list[str]) -> dict[tuple[str, str, int], dict[str, float]]:
    """Walk ENTITY-MIB + ENTITY-SENSOR-MIB; key each sensor by (port, quantity, lane).

    The port comes from the containment chain the contract prescribes (sensor ->
    transceiver -> port entity -> ifIndex -> ifName), and must agree with the name.
    """
    ent = {c: column(snmp("snmpbulkwalk", port, creds, "-Cr50", f"{ENT_PHYS}.{c}"),
                     f"{ENT_PHYS}.{c}") for c in (4, 5, 7)}
    names = ent[7]
    parents = {k: int(v) for k, v in ent[4].items()}
    classes = {k: int(v) for k, v in ent[5].items()}
    alias = {int(oid.split(".")[-2]): int(v.rsplit(".", 1)[1])
             for oid, v in snmp("snmpbulkwalk", port, creds, ENT_ALIAS_ID).items()}
    if_names = column(snmp("snmpbulkwalk", port, creds, IF_NAME), IF_NAME)
    rows = snmp("snmpbulkwalk", port, creds, "-Cr50", SENSOR)
    cols = {c: column(rows, f"{SENSOR}.{c}") for c in range(1, SENSOR_COLUMNS + 1)}
    out: dict[tuple[str, str, int], dict[str, float]] = {}
    for idx, value in cols[4].items():
        assert classes[idx] == 8, f"sensor row {idx} is not a sensor entity"
        xcvr = parents[idx]
        assert classes[xcvr] == 9, f"sensor {idx} not contained in a module"
        port_ent = parents[xcvr]
        assert classes[port_ent] == 10 and parents[port_ent] == 1
        m = SENSOR_NAME.match(names[idx])
        assert m, f"sensor name {names[idx]!r} does not follow the contract"
        assert if_names[alias[port_ent]] == m["port"]
        # the name's lane as the device numbers it; "Total" (one story) is kept as -1
        key = (m["port"], m["what"], -1 if m["total"] else int(m["lane"] or 0))
        out[key] = {
            "type": int(cols[1][idx]), "scale": int(cols[2][idx]),
            "precision": int(cols[3][idx]), "value": int(value),
            "status": int(cols[5][idx]), "units": cols[6][idx], "index": idx,
        }
    return out


@pytest.fixture(scope="module")
def lab_t(lab: Lab) -> float:
    # Three lab hours in: well after the lab's stories have started.
    return lab.epoch + 3 * HOUR


@pytest.fixture(scope="module")
def agent(lab_snmp_agent):
    require_net_snmp()
    return lab_snmp_agent(3)


def expected(lab: Lab, device: str, port_name: str, what: str, lane: int, t: float):
    """The model's reading in SI units (W, A, C, V) or None when the sensor does not report."""
    ps = next(s for s in lab.sample(device, t) if s.port.name == port_name)
    if what == "Temperature":
        return ps.temperature_c
    if what == "Supply Voltage":
        return ps.supply_v
    assert ps.optic is not None
    if lane == -1:  # the total_power_sensor story: all lanes' mW added up
        lit = [ln.rx_mw for ln in ps.lanes if ln.rx_mw is not None]
        return sum(lit) / 1000.0 if lit else None
    # the lanes_from_zero story numbers an optic's sensors from 0
    ls = ps.lanes[lane - ps.optic.lane_base]
    raw = {"Rx Power": ls.rx_mw, "Tx Power": ls.tx_mw, "Bias": ls.bias_ma}[what]
    return None if raw is None else raw / 1000.0


# -- identity and interfaces --------------------------------------------------------------
@pytest.mark.external
def test_every_device_answers_with_its_own_name_and_ifnames(agent: LabSnmpAgent, lab: Lab):
    assert set(agent.ports) == set(lab.devices)
    assert len(set(agent.ports.values())) == len(lab.devices)
    for device, port in agent.ports.items():
        assert snmp("snmpget", port, V2C, SYS_NAME)[SYS_NAME] == device
        names = column(snmp("snmpbulkwalk", port, V2C, IF_NAME), IF_NAME)
        want = {p.if_index: p.name for p in lab.devices[device].ports}
        assert names == want  # the walk stopped at the end of the column: nothing extra
        assert len(names) == 52


@pytest.mark.external
def test_sysuptime_counts_lab_time(agent: LabSnmpAgent, lab_t: float):
    table = agent.tables["qm-core-a"]
    ticks = int(snmp("snmpget", agent.ports["qm-core-a"], V2C, SYS_UPTIME)[SYS_UPTIME])
    # TimeTicks are hundredths of a second (RFC 2578), wrapping at 2^32
    assert ticks == int((lab_t - table.boot_lab_s) * 100) % 2**32


# -- ENTITY-MIB tree -----------------------------------------------------------------------
@pytest.mark.external
def test_transceiver_entities_describe_the_fitted_optic(agent: LabSnmpAgent, lab: Lab):
    device = "qm-core-a"
    port = agent.ports[device]
    ent = snmp("snmpbulkwalk", port, V2C, "-Cr50", ENT_PHYS)
    descr, model = column(ent, f"{ENT_PHYS}.2"), column(ent, f"{ENT_PHYS}.13")
    serial, mfg = column(ent, f"{ENT_PHYS}.11"), column(ent, f"{ENT_PHYS}.12")
    parents = {k: int(v) for k, v in column(ent, f"{ENT_PHYS}.4").items()}
    classes = {k: int(v) for k, v in column(ent, f"{ENT_PHYS}.5").items()}
    alias = {int(oid.split(".")[-2]): v.lstrip(".")
             for oid, v in snmp("snmpbulkwalk", port, V2C, ENT_ALIAS_ID).items()}
    modules = {idx for idx, c in classes.items() if c == 9}
    lab_ports = {p.if_index: p for p in lab.devices[device].ports}
    assert len(modules) == sum(p.optic is not None for p in lab_ports.values())
    seen = set()
    for idx in modules:
        port_ent = parents[idx]
        assert classes[port_ent] == 10
        if_index = int(alias[port_ent].rsplit(".", 1)[1])
        assert alias[port_ent] == f"1.3.6.1.2.1.2.2.1.1.{if_index}"  # contract: ifIndex OID
        optic = lab_ports[if_index].optic
        assert optic is not None
        assert descr[idx] == f"{optic.part.form_factor} {optic.part.pmd}"
        assert (model[idx], serial[idx], mfg[idx]) == (
            optic.part.part_number, optic.serial, optic.part.vendor)
        seen.add(if_index)
    # The 100G core links and a 10G LR run, by name, as the contract's examples show
    qsfp1 = lab.devices[device].port("qsfp1").if_index
    assert qsfp1 in seen
    got = snmp("snmpget", port, V2C, f"{ENT_PHYS}.2.{2000 + qsfp1}")
    assert got[f"{ENT_PHYS}.2.{2000 + qsfp1}"] == "QSFP28 100GBASE-LR4"
    # A port with no optic has no transceiver entity
    empty = next(p for p in lab_ports.values() if p.optic is None)
    got = snmp("snmpget", port, V2C, f"{ENT_PHYS}.2.{2000 + empty.if_index}")
    assert "No Such Instance" in got[f"{ENT_PHYS}.2.{2000 + empty.if_index}"]


# -- ENTITY-SENSOR-MIB values against the model --------------------------------------------
@pytest.mark.external
@pytest.mark.parametrize(("device", "creds"), [
    ("qm-core-a", v3("SHA-256")),  # watts encoding, v3 SHA-256 + AES-128
    ("qm-dist-a", V2C),            # watts encoding, v2c
    ("qm-core-b", V2C),            # dBm encoding, v2c
    ("qm-dist-b", v3("SHA-256")),  # dBm encoding, v3
])
def test_sensor_values_decode_to_the_model_sample(agent: LabSnmpAgent, lab: Lab, lab_t: float,
                                                  device: str, creds: list[str]):
    sensors = sensors_on(agent.ports[device], tuple(creds))
    dev = lab.devices[device]
    want_count = sum(2 + 3 * p.optic.part.lanes + p.optic.total_rx_sensor
                     for p in dev.ports if p.optic is not None)
    assert len(sensors) == want_count
    dbm = dev.power_encoding == "dbm"
    for (port_name, what, lane), s in sensors.items():
        model = expected(lab, device, port_name, what, lane, lab_t)
        if model is None:
            assert (s["status"], s["value"]) == (2, 0), (port_name, what, lane)
            continue
        assert s["status"] == 1, (port_name, what, lane)
        if what in ("Rx Power", "Tx Power") and dbm:
            # contract encoding (b): other(1), "dBm", units(9), precision 2
            assert (s["type"], s["units"], s["scale"], s["precision"]) == (1, "dBm", 9, 2)
            got_dbm = rfc3433(s["value"], s["scale"], s["precision"])
            if model <= 1e-7:  # below -40 dBm: reported at the floor (no light)
                assert s["value"] == -4000
            else:
                assert got_dbm == pytest.approx(10 * math.log10(model * 1000), abs=0.005)
            continue
        unit_type, unit = {"Rx Power": (6, 1e-7), "Tx Power": (6, 1e-7), "Bias": (5, 1e-6),
                           "Temperature": (8, 0.1), "Supply Voltage": (4, 1e-3)}[what]
        # watts(6), amperes(5), celsius(8), voltsDC(4): RFC 3433 EntitySensorDataType
        assert s["type"] == unit_type, (port_name, what)
        got = rfc3433(s["value"], s["scale"], s["precision"])
        # one least significant digit of the encoding is the most a rounding may cost
        assert got == pytest.approx(model, abs=unit / 2 * 1.001), (port_name, what, lane)


@pytest.mark.external
def test_watts_encoding_matches_contract_example_units(agent: LabSnmpAgent, lab: Lab,
                                                       lab_t: float):
    # contract (a): watts(6), micro(7), precision 1 -> the value counts 0.1 uW
    sensors = sensors_on(agent.ports["qm-core-a"], tuple(V2C))
    s = sensors[("sfp1", "Rx Power", 1)]
    assert (s["type"], s["scale"], s["precision"]) == (6, 7, 1)
    rx_mw = expected(lab, "qm-core-a", "sfp1", "Rx Power", 1, lab_t) * 1000
    assert s["value"] == round(rx_mw * 1000 * 10)


@pytest.mark.external
def test_no_light_reads_zero_watts_and_dbm_floor(agent: LabSnmpAgent, lab: Lab, lab_t: float):
    # dark_port story: qm-dist-b sfp20's far transmitter (qm-core-a sfp20) is disabled
    far = next(s for s in lab.sample("qm-core-a", lab_t) if s.port.name == "sfp20")
    near = next(s for s in lab.sample("qm-dist-b", lab_t) if s.port.name == "sfp20")
    assert far.lanes[0].tx_mw == 0.0 and near.lanes[0].rx_mw == 0.0  # the premise
    watts = sensors_on(agent.ports["qm-core-a"], tuple(V2C))[("sfp20", "Tx Power", 1)]
    assert (watts["status"], watts["value"]) == (1, 0)  # contract: watts value 0 = no light
    dbm = sensors_on(agent.ports["qm-dist-b"], tuple(V2C))[("sfp20", "Rx Power", 1)]
    assert (dbm["status"], dbm["value"]) == (1, -4000)  # contract: -40.00 dBm floor


@pytest.mark.external
def test_sensor_that_does_not_report_is_unavailable(agent: LabSnmpAgent):
    # sensor_unavailable story: qm-core-a sfp2 bias
    sensors = sensors_on(agent.ports["qm-core-a"], tuple(v3("SHA-256")))
    bias = sensors[("sfp2", "Bias", 1)]
    assert (bias["status"], bias["value"]) == (2, 0)  # RFC 3433 unavailable(2)
    assert sensors[("sfp2", "Rx Power", 1)]["status"] == 1
    assert sensors[("sfp2", "Temperature", 0)]["status"] == 1


# -- protocol behaviour ---------------------------------------------------------------------
@pytest.mark.external
def test_walk_past_the_last_object_ends_cleanly(agent: LabSnmpAgent):
    port = agent.ports["qm-dist-a"]
    # The walk of the sensor table must stop at its end.
    done = run_tool("snmpbulkwalk", port, V2C, "-Cr40", SENSOR)
    assert done.returncode == 0, done.stderr
    lines = done.stdout.splitlines()
    data = [ln for ln in lines if "No more variables" not in ln]
    assert len(lines) - len(data) <= 1
    rows = parse("\n".join(data))
    assert all(oid.startswith(SENSOR + ".") for oid in rows)
    assert len(rows) % SENSOR_COLUMNS == 0
    # The memory-map column (enterprise 32473) is the last subtree served.
    last = ".".join(map(str, agent.tables["qm-dist-a"].keys[-1]))
    assert last.startswith(EEPROM_OID + ".")
    # GETNEXT / GETBULK beyond the last OID: endOfMibView, and no padding repetitions
    for tool, extra in (("snmpgetnext", []), ("snmpbulkget", ["-Cn0", "-Cr10"])):
        got = run_tool(tool, port, V2C, *extra, last)
        assert got.returncode == 0, got.stderr
        out = got.stdout.splitlines()
        assert len(out) == 1 and "No more variables left" in out[0], (tool, out)


@pytest.mark.external
def test_bulk_across_column_end_moves_to_next_column(agent: LabSnmpAgent):
    port = agent.ports["qm-core-a"]
    # GETBULK from ifName.52 continues lexicographically into the next served column.
    got = snmp("snmpbulkget", port, V2C, "-Cn0", "-Cr3", f"{IF_NAME}.52")
    oids = list(got)
    assert oids[0] == "1.3.6.1.2.1.31.1.1.1.18.1" and got[oids[0]] == "to qm-dist-a sfp1"


@pytest.mark.external
def test_wrong_community_gets_no_answer(agent: LabSnmpAgent):
    done = run_tool("snmpget", agent.ports["qm-core-a"], ["-v2c", "-c", "not-the-community"],
                    SYS_NAME, timeout=1, retries=0)
    assert done.returncode != 0
    assert "Timeout" in done.stderr


@pytest.mark.external
def test_wrong_v3_key_is_refused(agent: LabSnmpAgent):
    done = run_tool("snmpget", agent.ports["qm-core-a"], v3("SHA-256", "wrong-key-0000"),
                    SYS_NAME, timeout=1, retries=0)
    assert done.returncode != 0
    assert done.stdout == ""


@pytest.mark.external
@pytest.mark.parametrize(("auth", "priv", "net_snmp_priv"), [
    ("SHA", "AES-128", "AES"),         # the "SHA family and AES": SHA-1 + AES-128
    ("SHA-512", "AES-256", "AES256"),  # draft-blumenthal key extension (net-snmp AES256)
    ("SHA", "AES-256-C", "AES256C"),   # Reeder key extension (net-snmp AES256C)
])
def test_other_v3_protocols_when_configured(lab: Lab, lab_t: float, auth: str, priv: str,
                                            net_snmp_priv: str):
    require_net_snmp()
    with LabSnmpAgent(lab, LabClock(lab_t, speed=0.0), devices=["qm-dist-b"],
                      auth_protocol=auth, priv_protocol=priv) as a:
        port = a.ports["qm-dist-b"]
        creds = v3(auth)
        creds[creds.index("-x") + 1] = net_snmp_priv
        assert snmp("snmpget", port, creds, SYS_NAME)[SYS_NAME] == "qm-dist-b"
        units = snmp("snmpget", port, creds, f"{SENSOR}.6.{100000 + 49 * 100 + 11}")
        assert list(units.values()) == ["dBm"]  # qsfp1 Rx lane 1 (index scheme, docstring)
        # an agent configured otherwise must not accept SHA-256 + AES-128
        if auth != "SHA-256":
            wrong = run_tool("snmpget", port, v3("SHA-256"), SYS_NAME, timeout=1, retries=0)
            assert wrong.returncode != 0 and wrong.stdout == ""


@pytest.mark.external
def test_values_follow_lab_time(lab: Lab):
    require_net_snmp()
    # dirty_connector story (lab.yaml): loss steps on the span into qm-dist-b sfp9.
    # Compare lab time 0 with a minute after the largest step, wherever lab.yaml puts it.
    port9 = lab.devices["qm-dist-b"].port("sfp9")
    steps = port9.link.steps_into["sfp9@qm-dist-b"]
    t_dirty = max(steps, key=lambda st: st.db).after_s + 60.0
    assert steps[0].after_s > lab.epoch  # lab time 0 is before the first step

    clock = LabClock(lab.epoch, speed=0.0)
    with LabSnmpAgent(lab, clock, devices=["qm-dist-b"], refresh_s=0.001) as a:
        port = a.ports["qm-dist-b"]
        names = column(snmp("snmpbulkwalk", port, V2C, "-Cr50", f"{ENT_PHYS}.7"),
                       f"{ENT_PHYS}.7")
        rx = f"{SENSOR}.4." + str(next(i for i, n in names.items()
                                       if n == "sfp9 Rx Power Lane 1"))

        def read() -> tuple[int, int]:
            got = snmp("snmpget", port, V2C, rx, SYS_UPTIME)
            return int(got[rx]), int(got[SYS_UPTIME])

        before, up_before = read()
        clock.epoch = t_dirty  # the frozen clock moved: lab time jumps
        time.sleep(0.01)  # past refresh_s, so the next request takes a new snapshot
        after, up_after = read()

    # dBm x 100 encoding: the served change must be the model's change in dB x 100.
    def model_dbm(t: float) -> float:
        s = next(s for s in lab.sample("qm-dist-b", t) if s.port.name == "sfp9")
        return 10 * math.log10(s.lanes[0].rx_mw)

    model_step = model_dbm(t_dirty) - model_dbm(lab.epoch)
    assert model_step < -1.0  # the story's premise: a loss step of more than 1 dB
    assert after - before == pytest.approx(100 * model_step, abs=1.01)
    assert up_after - up_before == round((t_dirty - lab.epoch) * 100)


@pytest.mark.external
def test_async_serve_inside_a_running_loop(lab: Lab, lab_t: float):
    require_net_snmp()

    async def scenario() -> str:
        server = await serve(lab, LabClock(lab_t, speed=0.0), devices=["qm-dist-a"])
        try:
            proc = await asyncio.create_subprocess_exec(
                "snmpget", *V2C, "-On", "-OQ", "-t", "3", "-r", "1",
                f"{HOST}:{server.ports['qm-dist-a']}", SYS_NAME,
                stdout=asyncio.subprocess.PIPE, stderr=asyncio.subprocess.PIPE)
            out, _ = await proc.communicate()
            return out.decode()
        finally:
            await server.close()

    assert parse(asyncio.run(scenario()))[SYS_NAME] == "qm-dist-a"


# -- bad input ---------------------------------------------------------------------------------
def test_unknown_device_is_named_in_the_error(lab: Lab):
    agent = LabSnmpAgent(lab, LabClock(lab.epoch, speed=0.0), devices=["qm-nowhere"])
    with pytest.raises(LabAgentError, match="qm-nowhere"):
        agent.start()


def test_port_in_use_is_named_in_the_error(lab: Lab):
    with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as taken:
        taken.bind((HOST, 0))
        busy = taken.getsockname()[1]
        agent = LabSnmpAgent(lab, LabClock(lab.epoch, speed=0.0), devices=["qm-core-a"],
                             ports={"qm-core-a": busy})
        with pytest.raises(LabAgentError, match=rf"qm-core-a.*{busy}"):
            agent.start()


def test_unknown_protocol_is_named_in_the_error(lab: Lab):
    agent = LabSnmpAgent(lab, LabClock(lab.epoch, speed=0.0), devices=["qm-core-a"],
                         auth_protocol="md4")
    with pytest.raises(LabAgentError, match="md4"):
        agent.start()


def test_bad_power_encoding_in_lab_yaml_is_named(lab: Lab):
    spec = yaml.safe_load(
        resources.files("lightwarden.fixtures.lab").joinpath("lab.yaml").read_text())
    spec["devices"]["qm-core-b"]["power_encoding"] = "milliwatts"
    odd = Lab.from_dict(spec)
    with pytest.raises(LabAgentError, match=r"qm-core-b.*milliwatts"):
        build_device_table(odd, "qm-core-b", LabClock(odd.epoch, speed=0.0))


# -- the encoder alone, against the standards sheet ----------------------------------------
def test_encoder_reproduces_the_rfc3433_worked_example():
    # source: standards.md / RFC 3433 (verified): watts, micro, precision 1, value 8000
    # -> 800.0 uW -> -0.97 dBm
    assert encode_power(0.8, "watts") == (8000, 1)
    assert encode_power(0.8, "dbm") == (-97, 1)  # contract (b): dBm x 100
    assert rfc3433(8000, 7, 1) == pytest.approx(800.0e-6)
    # no light and a silent sensor (contract)
    assert encode_power(0.0, "watts") == (0, 1)
    assert encode_power(0.0, "dbm") == (-4000, 1)
    assert encode_power(None, "dbm") == (0, 2)

"""Independent reading of an agent with net-snmp's CLI, for cross-checking the collector.

net-snmp (C, no pysnmp) walks the ENTITY-SENSOR-MIB and ENTITY-MIB names; the raw
numbers are converted here with the RFC 3433 formula written out by hand
(source: standards.md "RFC 3433 ENTITY-SENSOR-MIB", verified from the MIB text:
physical = value x 10^((scale - 9) x 3) x 10^-precision) and the textbook dBm
definition (dBm = 10 log10(P / 1 mW)). Sensors are identified by the entPhysicalName
phrases of the mapping contract, not by any agent's index scheme.
"""

from __future__ import annotations

import math
import os
import re
import subprocess

from lightwarden.collector.readings import PollOutcome, Quantity, ReadingStatus
from support.snmpd import require_binary

SENSOR = "1.3.6.1.2.1.99.1.1.1"
ENT_NAME = "1.3.6.1.2.1.47.1.1.1.1.7"

Key = tuple[str, Quantity, int]

_LINE = re.compile(r'^\.?([\d.]+) = (?:([A-Za-z0-9]+): )?"?(.*?)"?$')
_PHRASES = {
    "Rx Power": Quantity.RX_POWER,
    "Tx Power": Quantity.TX_POWER,
    "Bias": Quantity.BIAS,
    "Temperature": Quantity.TEMPERATURE,
    "Supply Voltage": Quantity.SUPPLY,
}
_NAME = re.compile(r"^(?P<port>.+?) (?P<what>Rx Power|Tx Power|Bias|Temperature|Supply Voltage)"
                   r"(?: Lane (?P<lane>\d+)| (?P<total>Total))?$")  # fmt: skip


def cli_walk(address: str, auth: list[str], oid: str) -> dict[str, tuple[str, str]]:
    """snmpbulkwalk -On as {oid: (type, text)}."""
    done = subprocess.run(
        [require_binary("snmpbulkwalk"), *auth, "-t", "3", "-r", "1", "-On", "-M", "/dev/null",
         address, oid],
        capture_output=True, text=True, timeout=120, env={**os.environ, "MIBS": ""},
    )  # fmt: skip
    if done.returncode != 0:
        raise RuntimeError(f"snmpbulkwalk {oid} failed: {done.stderr.strip()}")
    rows = {}
    for line in done.stdout.splitlines():
        match = _LINE.match(line.strip())
        if match:
            rows[match.group(1)] = (match.group(2) or "", match.group(3))
    return rows


def expected_readings(address: str, auth: list[str]) -> dict[Key, tuple]:
    """(port, quantity, lane) -> (ReadingStatus, value in reading units or None)."""
    walked = cli_walk(address, auth, SENSOR)
    names = cli_walk(address, auth, ENT_NAME)
    expected: dict[Key, tuple] = {}
    # The contract's lanes are 1..N: a device numbering an optic's sensors from 0 has
    # them shifted by one; a "Total" sensor is the all-lanes reading at lane 0.
    base: dict[str, int] = {}
    for _, name in names.values():
        m = _NAME.match(name)
        if m and m["lane"]:
            base[m["port"]] = min(base.get(m["port"], 1), int(m["lane"]))
    for oid, (_, name) in names.items():
        index = oid.rsplit(".", 1)[1]
        match = _NAME.match(name)
        if f"{SENSOR}.1.{index}" not in walked or match is None:
            continue
        quantity = _PHRASES[match["what"]]
        lane = int(match["lane"]) + 1 - base.get(match["port"], 1) if match["lane"] else (
            0 if match["total"] else
            1 if quantity in (Quantity.RX_POWER, Quantity.TX_POWER, Quantity.BIAS) else 0)

        def column(col: int, index: str = index) -> tuple[str, str]:
            return walked[f"{SENSOR}.{col}.{index}"]

        kind = int(column(1)[1])
        scale, precision = int(column(2)[1]), int(column(3)[1])
        value_type, value_text = column(4)
        status, units = int(column(5)[1]), column(6)[1]
        key = (match["port"], quantity, lane)
        if status != 1:
            expected[key] = (ReadingStatus.UNAVAILABLE, None)
            continue
        if value_type != "INTEGER":
            expected[key] = (ReadingStatus.INVALID, None)
            continue
        physical = int(value_text) * 10.0 ** ((scale - 9) * 3) * 10.0 ** (-max(precision, 0))
        if kind == 6:  # watts -> dBm
            expected[key] = ((ReadingStatus.NO_LIGHT, None) if physical == 0
                             else (ReadingStatus.OK, 10 * math.log10(physical / 1e-3)))  # fmt: skip
        elif kind == 1 and units == "dBm":  # contract: at or below -40 dBm = no light
            expected[key] = ((ReadingStatus.NO_LIGHT, None) if physical <= -40
                             else (ReadingStatus.OK, physical))  # fmt: skip
        elif kind == 5:  # amperes -> mA
            expected[key] = (ReadingStatus.OK, physical * 1e3)
        else:  # celsius(8), voltsDC(4)
            expected[key] = (ReadingStatus.OK, physical)
    return expected


def collector_rows(outcome: PollOutcome) -> dict[Key, tuple]:
    assert outcome.ok, outcome.error
    return {(o.port, q, lane): (status, value, note)
            for o, lane, q, value, status, note in outcome.batch.rows()}  # fmt: skip


def assert_agrees(outcome: PollOutcome, expected: dict[Key, tuple]) -> None:
    got = collector_rows(outcome)
    assert set(got) == set(expected)
    for key, (status, value) in expected.items():
        got_status, got_value, note = got[key]
        assert got_status is status, (key, note)
        if status is ReadingStatus.OK:
            assert abs(got_value - value) <= 1e-9, (key, got_value, value)
        else:
            assert math.isnan(got_value) and note, key

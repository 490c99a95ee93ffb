"""Offline captures: a saved `snmpbulkwalk -On` judged as if polled (`check --walk`).

The capture is made with net-snmp's own snmpbulkwalk (a general-purpose reference tool)
against the lab's SNMP agent, frozen in lab time, so the live poll and the capture see
the same values; the rows must be the same.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
from support.procs import require_binary

from lightwarden.collector.snmp.capture import CaptureError, parse_capture
from lightwarden.fixtures.lab.model import LAB_COMMUNITY
from lightwarden.fixtures.lab.snmp_agent import EEPROM_OID

pytestmark = pytest.mark.external

TREES = ("1.3.6.1.2.1.1", "1.3.6.1.2.1.2.2.1", "1.3.6.1.2.1.31.1.1.1", "1.3.6.1.2.1.47.1",
         "1.3.6.1.2.1.99.1.1", EEPROM_OID)


def _capture(port: int, path: Path) -> None:
    tool = require_binary("snmpbulkwalk", "snmp")
    with path.open("w") as out:
        for tree in TREES:  # several walks concatenated in one file, as operators send them
            done = subprocess.run([tool, "-v2c", "-c", LAB_COMMUNITY, "-On", "-Cr50",
                                   f"udp:127.0.0.1:{port}", tree], capture_output=True,
                                  text=True, timeout=120, check=False)
            assert done.returncode == 0, done.stderr
            out.write(done.stdout)


def _check(*argv: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "lightwarden.exporters.app.cli", "check",
                           *argv], capture_output=True, text=True, timeout=300, check=False,
                          env={"PATH": "/usr/bin:/bin", "LW_CAP": LAB_COMMUNITY})


def _rows(text: str) -> dict[tuple[str, int], dict]:
    return {(r["port"], r["lane"]): r for r in json.loads(text)}


def test_a_capture_is_judged_like_the_live_device(lab_snmp_agent, tmp_path):
    agent = lab_snmp_agent(2.0, ["qm-core-a"])
    host, port = agent.endpoint("qm-core-a")
    cap = tmp_path / "qm-core-a.walk"
    _capture(port, cap)
    text = cap.read_text()
    assert "Hex-STRING" in text  # the memory maps, wrapped over many lines
    offline = _check("--walk", str(cap), "--eeprom-oid", EEPROM_OID, "--json")
    live = _check(f"{host}:{port}", "--community-env", "LW_CAP", "--eeprom-oid", EEPROM_OID,
                  "--json")
    assert offline.returncode == live.returncode == 1, offline.stderr + live.stderr
    got, want = _rows(offline.stdout), _rows(live.stdout)
    assert got.keys() == want.keys() and len(got) > 40
    assert {r["device"] for r in got.values()} == {"qm-core-a"}  # named by sysName
    for key, row in want.items():
        for field in ("rx_power_dbm", "tx_power_dbm", "bias_ma", "temperature_c", "condition",
                      "rx_edges", "pmd"):
            assert got[key][field] == row[field], (key, field)


def test_bad_captures_are_named_errors(tmp_path):
    with pytest.raises(CaptureError, match="line 2: not a numeric walk line"):
        parse_capture(".1.3.6.1.2.1.1.5.0 = STRING: \"x\"\nIF-MIB::ifName.1 = STRING: a\n")
    bad = tmp_path / "bad.walk"
    bad.write_text("hello\n")
    res = _check("--walk", str(bad))
    assert res.returncode == 2 and "bad.walk: line 1" in res.stderr
    assert "Traceback" not in res.stderr


def test_parser_reads_the_forms_net_snmp_writes():
    text = (".1.3.6.1.2.1.1.3.0 = Timeticks: (12345) 0:02:03.45\n"
            ".1.3.6.1.2.1.99.1.1.1.5.7 = INTEGER: ok(1)\n"
            ".1.3.6.1.4.1.32473.7.1.1.3 = Hex-STRING: 03 04 07 10 00 00 \n"
            "00 00 00 00 \n"
            ".1.3.6.1.2.1.47.1.1.1.1.7.5 = STRING: \"sfp1 Rx Power Lane 1\"\n"
            ".1.3.6.1.2.1.47.1.1.1.1.2.5 = STRING: \"two\n"
            "lines\"\n"
            ".1.3.6.1.2.1.47.1.1.1.1.3.5 = OID: .1.3.6.1.4.1.32473.1\n"
            ".1.3.6.1.2.1.1.9.1.2.1 = No Such Object available on this agent at this OID\n")
    v = parse_capture(text)
    assert v[(1, 3, 6, 1, 2, 1, 1, 3, 0)] == 12345
    assert v[(1, 3, 6, 1, 2, 1, 99, 1, 1, 1, 5, 7)] == 1
    assert v[(1, 3, 6, 1, 4, 1, 32473, 7, 1, 1, 3)] == bytes([3, 4, 7, 16, 0, 0, 0, 0, 0, 0])
    assert v[(1, 3, 6, 1, 2, 1, 47, 1, 1, 1, 1, 7, 5)] == b"sfp1 Rx Power Lane 1"
    assert v[(1, 3, 6, 1, 2, 1, 47, 1, 1, 1, 1, 2, 5)] == b"two\nlines"
    assert v[(1, 3, 6, 1, 2, 1, 47, 1, 1, 1, 1, 3, 5)] == "1.3.6.1.4.1.32473.1"
    assert v[(1, 3, 6, 1, 2, 1, 1, 9, 1, 2, 1)] is None

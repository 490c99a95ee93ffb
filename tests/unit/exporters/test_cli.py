"""The `lightwarden` command against the lab served by `lightwarden lab`, as a user runs it.

Everything goes through real processes: the lab in one (SNMP over UDP, SSH over TCP on
loopback), the command in another, its output parsed as a user's script would.
"""

from __future__ import annotations

import json
import os
import re
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest
import yaml

from lightwarden.fixtures.lab.model import LAB_COMMUNITY, LAB_ENV, Lab
from lightwarden.fixtures.lab.server import fixed_endpoints, lab_site_config, site_yaml_text

REPO = Path(__file__).resolve().parents[3]
JSON_FIELDS = {
    "device", "port", "lane", "pmd", "rx_power_dbm", "tx_power_dbm", "bias_ma",
    "temperature_c", "supply_v", "rx_overload_dbm", "rx_sensitivity_dbm",
    "margin_to_overload_db", "margin_to_sensitivity_db", "window_source", "condition", "notes",
}
SEVERITY = {"healthy": 0, "unknown": 1, "latched_warning": 1, "near_sensitivity": 2,
            "near_overload": 2, "warning": 2, "off_standard": 2, "not_ready": 2,
            "latched_alarm": 2, "below_sensitivity": 3, "overloaded": 3, "alarm": 3, "dark": 3,
            "laser_off": 3, "tx_fault": 3, "loss_of_signal": 3, "lane_imbalance": 2}


def lightwarden(*args: str, env: dict[str, str] | None = None, timeout: float = 120,
                cwd: Path | None = None) -> subprocess.CompletedProcess[str]:
    full_env = {**os.environ, **(env or {})}
    return subprocess.run(
        [sys.executable, "-m", "lightwarden.exporters.app.cli", *args],
        capture_output=True, text=True, timeout=timeout, env=full_env, cwd=cwd,
    )


def _free_block(n: int) -> int:
    """A base port where n consecutive TCP and UDP ports are free right now."""
    for _ in range(50):
        with socket.socket() as s:
            s.bind(("127.0.0.1", 0))
            base = s.getsockname()[1]
        if base + n >= 65535:
            continue
        ok = True
        for p in range(base, base + n):
            for kind in (socket.SOCK_STREAM, socket.SOCK_DGRAM):
                with socket.socket(socket.AF_INET, kind) as t:
                    try:
                        t.bind(("127.0.0.1", p))
                    except OSError:
                        ok = False
        if ok:
            return base
    raise RuntimeError("no block of free ports")


@pytest.fixture(scope="module")
def lab_process(tmp_path_factory: pytest.TempPathFactory):
    tmp = tmp_path_factory.mktemp("lab")
    base = _free_block(4)
    known = tmp / "known_hosts"
    proc = subprocess.Popen(
        [sys.executable, "-m", "lightwarden.exporters.app.cli", "lab", "--port", str(base),
         "--known-hosts", str(known), "--duration", "600"],
        stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True,
    )
    try:
        deadline = time.monotonic() + 60
        while not known.exists():
            if proc.poll() is not None or time.monotonic() > deadline:
                out = proc.stdout.read() if proc.stdout else ""
                pytest.fail(f"lab did not start: {out}")
            time.sleep(0.1)
        lab = Lab.load()
        endpoints = fixed_endpoints(lab, base, str(known))
        yield base, endpoints, tmp
    finally:
        proc.terminate()
        try:
            proc.wait(10)
        except subprocess.TimeoutExpired:
            proc.kill()


def _site(tmp: Path, endpoints, name: str, devices: list[str] | None = None,
          plant: bool = False) -> Path:
    data = lab_site_config(endpoints, secrets="env", known_hosts=str(endpoints.known_hosts),
                           lab=Lab.load() if plant else None)
    if devices is not None:
        data["devices"] = [d for d in data["devices"] if d["name"] in devices]
    path = tmp / name
    path.write_text(yaml.safe_dump(data))
    return path


def test_check_json_has_every_optic_and_lane_worst_first(lab_process):
    _base, endpoints, tmp = lab_process
    site = _site(tmp, endpoints, "site.yaml", plant=True)
    res = lightwarden("check", "-c", str(site), "--json", env=LAB_ENV)
    assert res.returncode == 1, res.stderr  # the lab has scripted faults: findings
    rows = json.loads(res.stdout)
    lab = Lab.load()
    # one row per lane, plus one for a total-power sensor (lab story total_power_sensor;
    # only the SNMP agents offer it, and the lab config polls that device over SNMP)
    expected = sum(p.optic.part.lanes + p.optic.total_rx_sensor  # type: ignore[union-attr]
                   for p in lab.optic_ports())
    assert len(rows) == expected
    for r in rows:
        assert set(r) >= JSON_FIELDS, r
        assert r["window_source"] in {"site", "module", "standard", "practice", "none"}
        if r["rx_power_dbm"] is None:
            assert r["notes"], r  # an unavailable value always says why
    sev = [SEVERITY[r["condition"]] for r in rows]
    assert sev == sorted(sev, reverse=True)
    by_port = {(r["device"], r["port"], r["lane"]): r for r in rows}
    hot = by_port[("qm-core-a", "sfp31", 1)]
    # Two judgements, both in the row with their sources: the margin edge is the
    # standard's (IEEE 802.3 cl.52 10GBASE-ER overload -1.0 dBm, standards.md, from
    # memory), the module's own high alarm the TK-10GER-40 level declared in lab.yaml
    # (1.0 dBm, within one 0.1 uW register step, read from the memory map); both sit
    # below the hot receiver's level.
    assert hot["rx_edges"]["overload"] == {"value": -1.0, "source": "standard"}
    declared = lab.devices["qm-core-a"].port("sfp31").optic.part.thresholds["rx_power"][0]
    assert hot["rx_edges"]["high_alarm"]["source"] == "module"
    assert hot["rx_edges"]["high_alarm"]["value"] == pytest.approx(declared, abs=1e-3)
    assert hot["rx_overload_dbm"] == -1.0
    assert hot["condition"] == "overloaded"
    assert hot["edge"]["name"] == "overload" and hot["edge"]["source"] == "standard"
    # margin to overload = overload - Rx (dB arithmetic; standards.md practice)
    assert hot["margin_to_overload_db"] == pytest.approx(
        hot["rx_overload_dbm"] - hot["rx_power_dbm"], abs=2e-3)
    dark = by_port[("qm-dist-b", "sfp20", 1)]
    assert dark["rx_power_dbm"] is None and dark["condition"] == "dark"
    assert any("no light" in n for n in dark["notes"])
    assert by_port[("qm-core-a", "sfp2", 1)]["bias_ma"] is None
    lr4 = [r for r in rows if r["device"] == "qm-core-a" and r["port"] == "qsfp1"]
    assert sorted(r["lane"] for r in lr4) == [1, 2, 3, 4]
    # Lab stories (lab.yaml) through check --json:
    # lanes_from_zero: qm-core-a qsfp2's sensors are named lanes 0..3, read as 1..4
    assert sorted(r["lane"] for r in rows
                  if (r["device"], r["port"]) == ("qm-core-a", "qsfp2")) == [1, 2, 3, 4]
    # total_power_sensor: qm-core-b qsfp2 has a lane-0 row judged against 4 lanes' sum
    (total,) = [r for r in rows if (r["device"], r["port"], r["lane"]) == ("qm-core-b",
                                                                           "qsfp2", 0)]
    assert any("total power of 4 lanes" in n for n in total["notes"])
    # tx_fault: the module flags TX_FAULT; its far receiver (by the plant record) is
    # dark and caused by it
    fault = by_port[("qm-core-b", "sfp27", 1)]
    assert fault["condition"] == "tx_fault"
    assert any("TX_FAULT" in n for n in fault["notes"])
    far = by_port[("qm-core-a", "sfp27", 1)]
    assert (far["condition"], far["cause"]) == ("dark", "qm-core-b|sfp27|1|tx_power")
    # every lane with a far end in the plant carries its span, measured both ways and as
    # engineered (span loss = Tx at one end - Rx at the other: standards.md, practice)
    spans = [r for r in rows if r["span"]]
    assert len(spans) >= 150
    lit = by_port[("qm-core-a", "sfp31", 1)]["span"]
    assert lit["far"] == "qm-core-b sfp31"
    assert lit["loss_in_db"] > 0 and lit["loss_out_db"] > 0 and lit["engineered_db"] > 0
        # dark_port: this end's laser is off (bias 0 mA), the far receiver caused by it
    assert by_port[("qm-core-a", "sfp20", 1)]["condition"] == "laser_off"
    assert by_port[("qm-dist-b", "sfp20", 1)]["cause"] == "qm-core-a|sfp20|1|tx_power"


def test_check_table_and_exit_zero_when_all_healthy(lab_process):
    _base, endpoints, tmp = lab_process
    site = _site(tmp, endpoints, "dist-a.yaml", devices=["qm-dist-a"])
    res = lightwarden("check", "-c", str(site), env=LAB_ENV)
    assert res.returncode == 0, res.stdout + res.stderr
    lines = res.stdout.split("\n\n")[0].splitlines()  # the table, before notes and advice
    assert lines[0].startswith("DEVICE")
    assert len(lines) == 1 + sum(
        p.optic.part.lanes for p in Lab.load().devices["qm-dist-a"].ports if p.optic
    )
    assert all("healthy" in ln for ln in lines[1:])


def test_adhoc_check_by_host_and_community(lab_process):
    base, _endpoints, _tmp = lab_process
    res = lightwarden("check", f"127.0.0.1:{base}", "--community-env", "LW_LAB_COMMUNITY",
                      "--json", env=LAB_ENV)
    assert res.returncode == 1, res.stderr
    rows = json.loads(res.stdout)
    assert {r["device"] for r in rows} == {"127.0.0.1"}
    assert any(r["port"] == "sfp31" and r["condition"] == "overloaded" for r in rows)
    # The community is never echoed, even when given on the command line.
    res2 = lightwarden("check", f"127.0.0.1:{base}", "--community", LAB_COMMUNITY)
    assert LAB_COMMUNITY not in res2.stdout + res2.stderr


def test_adhoc_check_reads_maps_and_agrees_with_the_configured_check(lab_process):
    # Ad hoc and configured checks of the same device agree once both read module maps:
    # the module's own levels (here the TK-10GER-40's high alarm in lab.yaml) and its
    # flags come from the map, not from the ENTITY-MIB sensors alone.
    base, endpoints, tmp = lab_process
    oid = "1.3.6.1.4.1.32473.7.1.1"  # the lab's map column (fixtures/lab/snmp_agent.py)
    res = lightwarden("check", f"127.0.0.1:{base}", "--community-env", "LW_LAB_COMMUNITY",
                      "--eeprom-oid", oid, "--json", env=LAB_ENV)
    assert res.returncode == 1, res.stderr
    adhoc = {(r["port"], r["lane"]): r for r in json.loads(res.stdout)}
    site = _site(tmp, endpoints, "one.yaml", devices=["qm-core-a"])
    configured = {(r["port"], r["lane"]): r for r in json.loads(
        lightwarden("check", "-c", str(site), "--json", env=LAB_ENV).stdout)}
    assert adhoc.keys() == configured.keys()
    for key, row in configured.items():
        assert adhoc[key]["condition"] == row["condition"], key
        assert adhoc[key]["rx_edges"] == row["rx_edges"], key
    assert adhoc[("sfp31", 1)]["rx_edges"]["high_alarm"]["source"] == "module"


def test_check_collection_error_exits_2_and_names_device(tmp_path: Path):
    with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
        res = lightwarden("check", f"127.0.0.1:{port}", "--community-env", "LW_LAB_COMMUNITY",
                          "--timeout", "0.3", "--retries", "0", env=LAB_ENV)
    assert res.returncode == 2
    assert "127.0.0.1" in res.stdout + res.stderr
    assert "Traceback" not in res.stderr


def test_config_errors_name_file_line_key_without_traceback_or_secret(tmp_path: Path):
    bad = tmp_path / "bad.yaml"
    bad.write_text(
        "site: x\n"
        "credentials:\n"
        "  ro: {snmp_v2c: {community: s3cret-value}}\n"
        "devices:\n"
        "  - {name: a, host: 127.0.0.1, credentials: ro, colour: red}\n"
    )
    res = lightwarden("validate", "-c", str(bad))
    assert res.returncode == 2
    assert f"{bad}:3: credentials.ro.snmp_v2c.community: inline secrets" in res.stderr
    assert f"{bad}:5: devices[0].colour: unknown key" in res.stderr
    assert "s3cret-value" not in res.stderr
    assert "Traceback" not in res.stderr
    missing = lightwarden("check", "-c", str(tmp_path / "nope.yaml"))
    assert missing.returncode == 2 and "nope.yaml" in missing.stderr


def test_missing_secret_names_the_variable_not_a_value(tmp_path: Path):
    site = tmp_path / "s.yaml"
    site.write_text(
        "credentials:\n  ro: {snmp_v2c: {community: {env: LW_TEST_UNSET_VAR}}}\n"
        "devices:\n  - {name: a, host: 127.0.0.1, port: 9, credentials: ro}\n"
    )
    env = {k: v for k, v in os.environ.items() if k != "LW_TEST_UNSET_VAR"}
    res = subprocess.run([sys.executable, "-m", "lightwarden.exporters.app.cli", "check", "-c",
                          str(site)], capture_output=True, text=True, env=env, timeout=60)
    assert res.returncode == 2
    assert "LW_TEST_UNSET_VAR is not set" in res.stderr and "device 'a'" in res.stderr


def test_committed_site_yaml_matches_generator_and_validates(tmp_path):
    text = (REPO / "fixtures" / "site.yaml").read_text()
    assert text == site_yaml_text(Lab.load())
    site = str(REPO / "fixtures" / "site.yaml")
    state = str(tmp_path / "state")
    # Its known_hosts is the one `lightwarden lab` writes into the state directory:
    # before the lab has run, validate names it, as run and check would.
    res = lightwarden("validate", "-c", site, "--state-dir", state)
    assert res.returncode == 2 and "lab_known_hosts not found" in res.stderr, res.stderr
    ran = lightwarden("lab", "--port", "0", "--duration", "0.5", "--state-dir", state)
    assert ran.returncode == 0, ran.stderr
    res = lightwarden("validate", "-c", site, "--state-dir", state)
    assert res.returncode == 0, res.stderr


def test_usage_errors_exit_2():
    assert lightwarden().returncode == 2
    res = lightwarden("check")
    assert res.returncode == 2 and "give -c SITE.yaml or HOST[:PORT]" in res.stderr


def test_check_says_what_to_do_with_the_laser_caution(lab_process):
    _base, endpoints, tmp = lab_process
    site = _site(tmp, endpoints, "advice.yaml", devices=["qm-core-a"])
    res = lightwarden("check", "-c", str(site), env=LAB_ENV)
    assert res.returncode == 1
    text = res.stdout
    assert "What to do:" in text
    # the hot 10GBASE-ER receiver gets a stocked pad (standards.md practice: 1, 3, 5, 7,
    # 10, 15, 20 dB); the port whose own laser is off (lab story dark_port: the
    # transmitter at qm-core-a sfp20 disabled) is told to look at this end, not the far one
    pad = re.search(r"qm-core-a sfp31 lane 1 \(overloaded\): .*?attenuator of (\d+) dB", text)
    assert pad and int(pad.group(1)) in {1, 3, 5, 7, 10, 15, 20}, text
    off = re.search(r"qm-core-a sfp20 lane 1 \(laser_off\): (.*)", text)
    assert off and "disabled on purpose" in off.group(1) and "far-end" not in off.group(1), text
    assert "never look into a fibre end" in text
    rows = json.loads(lightwarden("check", "-c", str(site), "--json", env=LAB_ENV).stdout)
    hot = next(r for r in rows if r["port"] == "sfp31")
    assert "attenuator" in hot["advice"] and "Laser safety" in hot["caution"]
    assert all(r["advice"] == "" for r in rows if r["condition"] == "healthy")


def test_check_shows_the_lab_consistency_stories(lab_process):
    """lab.yaml's consistency stories through `check` (text and --json), with the plant."""
    _base, endpoints, tmp = lab_process
    data = lab_site_config(endpoints, secrets="env", known_hosts=str(endpoints.known_hosts),
                           lab=Lab.load())
    site = tmp / "site-plant.yaml"
    site.write_text(yaml.safe_dump(data))
    res = lightwarden("check", "-c", str(site), "--json", env=LAB_ENV)
    assert res.returncode == 1, res.stderr
    rows = json.loads(res.stdout)
    found = {(r["device"], r["port"]): {(f["kind"], f["severity"]) for f in r["findings"]}
             for r in rows if r["findings"]}
    # Span findings show at both ends. Kinds and severities are ours; 1471/1491 nm are
    # adjacent ITU-T G.694.2 channels; 1310/1570 nm is no common BiDi pair (practice).
    bidi = {("bidi-not-complementary", "warning")}
    cwdm = {("cwdm-channel-mismatch", "critical")}
    sm_on_mm = {("fibre-type-mismatch", "warning")}
    wrong = {("pmd-mismatch", "warning")}
    # record_swapped: the two crossed records, contradicted by LLDP (IEEE 802.1AB) on the
    # ports; each shows at both ends of its record
    patch = {("patching-differs", "warning")}
    assert found == {
        ("qm-core-a", "sfp37"): bidi, ("qm-core-b", "sfp37"): bidi,
        ("qm-core-a", "sfp39"): cwdm, ("qm-core-b", "sfp39"): cwdm,
        ("qm-dist-a", "sfp41"): sm_on_mm, ("qm-dist-b", "sfp41"): sm_on_mm,
        ("qm-core-b", "sfp15"): wrong, ("qm-dist-b", "sfp15"): wrong,
        ("qm-core-a", "sfp10"): patch, ("qm-dist-a", "sfp11"): patch,
        ("qm-core-a", "sfp11"): patch, ("qm-dist-a", "sfp10"): patch,
    }
    swapped = next(r for r in rows if (r["device"], r["port"]) == ("qm-core-a", "sfp10"))
    assert "LLDP on" in swapped["findings"][0]["text"]
    cw = next(r for r in rows if (r["device"], r["port"]) == ("qm-core-a", "sfp39"))
    cw = cw["findings"][0]
    assert "1471 nm (channel 1471 nm) vs 1491 nm (channel 1491 nm), 20 nm apart" in cw["text"]
    text = lightwarden("check", "-c", str(site), env=LAB_ENV).stdout
    assert "Optics and plant that do not belong together:" in text
    assert "critical cwdm-channel-mismatch: qm-core-a sfp39 / qm-core-b sfp39" in text
    assert "plant records OM4 multimode fibre" in text


def test_lab_on_a_busy_port_is_a_clear_error(lab_process):
    base, _endpoints, tmp = lab_process
    res = lightwarden("lab", "--port", str(base), "--duration", "1",
                      "--known-hosts", str(tmp / "other_known_hosts"))
    assert res.returncode == 2
    assert "the lab could not start" in res.stderr and str(base) in res.stderr
    assert "Traceback" not in res.stderr
    bad = lightwarden("lab", "--port", "70000")
    assert bad.returncode == 2 and "is not a port" in bad.stderr

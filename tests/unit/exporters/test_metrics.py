"""Prometheus exposition: content, units, escaping, and lint by the real promtool.

The exposition is read back with prometheus_client's text parser (a general-purpose
reference parser, not ours) and linted with ``promtool check metrics`` (Debian package
``prometheus``).
"""

from __future__ import annotations

import gzip
import math
import subprocess

import numpy as np
import pytest
from prometheus_client.parser import text_string_to_metric_families
from support.exposition_data import (
    LR_OVERLOAD_DBM,
    LR_SENSITIVITY_DBM,
    ODD_ALIAS,
    ODD_PORT,
    lab_assessment,
    lab_batch,
    ok_outcome,
    promtool_path,
)

from lightwarden.collector.readings import PollErrorKind, PollOutcome, Quantity, ReadingStatus
from lightwarden.exporters.prometheus.exposition import (
    DEVICE_FAMILIES,
    Exposition,
    ExpositionOptions,
    escape_label_value,
    render_alerts,
)
from lightwarden.rules.assess import assess
from lightwarden.rules.findings import (
    AlertEvent,
    AlertKind,
    AlertSeverity,
    Condition,
    WindowSource,
)

DEV = "hg-core-1"


def samples(body: bytes) -> dict[str, list[tuple[dict[str, str], float]]]:
    """Sample name -> [(labels, value)], parsed by prometheus_client."""
    out: dict[str, list[tuple[dict[str, str], float]]] = {}
    for fam in text_string_to_metric_families(body.decode("utf-8")):
        for s in fam.samples:
            out.setdefault(s.name, []).append((dict(s.labels), s.value))
    return out


def one(found, **labels) -> float:
    hits = [v for lab, v in found if all(lab.get(k) == str(w) for k, w in labels.items())]
    assert len(hits) == 1, (labels, found)
    return hits[0]


def promtool_check(body: bytes) -> subprocess.CompletedProcess:
    return subprocess.run(
        [promtool_path(), "check", "metrics"],
        input=body,
        capture_output=True,
        timeout=60,
    )


@pytest.fixture
def exposition() -> Exposition:
    exp = Exposition(margin_target_overload_db=3.0, margin_target_sensitivity_db=2.5)
    batch = lab_batch(DEV)
    exp.update(ok_outcome(batch), lab_assessment(batch))
    batch2 = lab_batch("hg-edge-3")
    exp.update(ok_outcome(batch2), None)  # a device whose rules have not run yet
    return exp


@pytest.mark.external
def test_promtool_finds_nothing(exposition: Exposition) -> None:
    exposition.set_alert_source(lambda: [_alert()])
    body = exposition.body()
    done = promtool_check(body)
    assert done.returncode == 0, done.stdout + done.stderr
    assert done.stdout == b"" and done.stderr == b""


@pytest.mark.external
def test_promtool_flags_a_bad_exposition() -> None:
    # The check above can fail: promtool does flag what our names avoid (milli units).
    done = promtool_check(
        b"# HELP x_milliamperes x\n# TYPE x_milliamperes gauge\nx_milliamperes 1\n"
    )
    assert done.returncode != 0


def test_units_and_values(exposition: Exposition) -> None:
    found = samples(exposition.body())
    sfp = {"device": DEV, "port": "sfp1"}
    # source: standards.md / SFF-8472 worked decode (verified): bias 0x1770 = 12.000 mA
    assert one(found["lightwarden_bias_amperes"], **sfp, lane=1) == pytest.approx(0.012, abs=1e-12)
    # source: standards.md / SFF-8472 worked decode (verified): Rx 0x1F40 = -0.969 dBm
    assert one(found["lightwarden_rx_power_dbm"], **sfp, lane=1, pmd="10GBASE-LR") == (
        pytest.approx(-0.969, abs=5e-4)
    )
    # source: standards.md / SFF-8472 worked decode (verified): Tx 0x2710 = 0.000 dBm
    assert one(found["lightwarden_tx_power_dbm"], **sfp, lane=1) == pytest.approx(0.0, abs=1e-9)
    # source: standards.md / SFF-8472 worked decodes (verified): 0x1A80 = 26.5 C, 0x80E8 = 3.3 V
    assert one(found["lightwarden_temperature_celsius"], **sfp) == 26.5
    assert one(found["lightwarden_supply_volts"], **sfp) == pytest.approx(3.3, abs=1e-9)
    # Module quantities carry no lane label.
    for lab, _ in found["lightwarden_temperature_celsius"]:
        assert "lane" not in lab


def test_window_edges_and_margins(exposition: Exposition) -> None:
    found = samples(exposition.body())
    sfp = {"device": DEV, "port": "sfp1", "lane": 1}
    # source: standards.md / IEEE 802.3 10GBASE-LR row (verified): overload +0.5, Rx min -14.4
    assert one(found["lightwarden_rx_overload_dbm"], **sfp, window_source="standard") == 0.5
    assert one(found["lightwarden_rx_sensitivity_dbm"], **sfp, window_source="standard") == -14.4
    rx = 10 * math.log10(0.8)
    assert one(found["lightwarden_rx_margin_to_overload_db"], **sfp) == pytest.approx(
        LR_OVERLOAD_DBM - rx
    )
    assert one(found["lightwarden_rx_margin_to_sensitivity_db"], **sfp) == pytest.approx(
        rx - LR_SENSITIVITY_DBM
    )
    assert found["lightwarden_rx_margin_target_overload_db"] == [({}, 3.0)]
    assert found["lightwarden_rx_margin_target_sensitivity_db"] == [({}, 2.5)]
    # The device without an assessment has readings but no edges, margins or conditions.
    for name in (
        "lightwarden_rx_overload_dbm",
        "lightwarden_rx_margin_to_overload_db",
        "lightwarden_optic_condition",
        "lightwarden_optic_severity",
    ):
        assert all(lab["device"] == DEV for lab, _ in found[name]), name
    assert any(lab["device"] == "hg-edge-3" for lab, _ in found["lightwarden_rx_power_dbm"])


def test_edges_can_be_switched_off() -> None:
    exp = Exposition(options=ExpositionOptions(window_edges=False))
    batch = lab_batch(DEV)
    exp.update(ok_outcome(batch), lab_assessment(batch))
    found = samples(exp.body())
    assert "lightwarden_rx_overload_dbm" not in found
    assert "lightwarden_rx_sensitivity_dbm" not in found
    assert "lightwarden_rx_margin_to_overload_db" in found


def test_no_light_is_not_a_number(exposition: Exposition) -> None:
    body = exposition.body()
    found = samples(body)
    dark = {"device": DEV, "port": ODD_PORT, "lane": 3}
    assert not [
        lab
        for lab, _ in found["lightwarden_rx_power_dbm"]
        if lab.items() >= {("device", DEV), ("port", ODD_PORT), ("lane", "3")}
    ]
    assert one(found["lightwarden_reading_condition"], **dark, quantity="rx_power",
               condition="dark") == 1
    assert one(found["lightwarden_reading_unavailable"], **dark, quantity="rx_power") == 1
    assert (
        one(
            found["lightwarden_reading_unavailable"], **dark, quantity="rx_power", reason="no_light"
        )
        == 1
    )
    # No margin either for the dark lane, and no NaN or infinity anywhere.
    assert not [
        1
        for lab, _ in found["lightwarden_rx_margin_to_overload_db"]
        if lab["port"] == ODD_PORT and lab["lane"] == "3"
    ]
    for name, rows in found.items():
        for _, v in rows:
            assert math.isfinite(v), name
    for bad in (b"NaN", b"Inf"):
        assert bad not in body


def test_every_row_is_a_value_or_unavailable(exposition: Exposition) -> None:
    batch = lab_batch(DEV)
    found = samples(exposition.body())
    value_family = {
        Quantity.RX_POWER: "lightwarden_rx_power_dbm",
        Quantity.TX_POWER: "lightwarden_tx_power_dbm",
        Quantity.BIAS: "lightwarden_bias_amperes",
        Quantity.TEMPERATURE: "lightwarden_temperature_celsius",
        Quantity.SUPPLY: "lightwarden_supply_volts",
    }
    for optic, lane, q, _value, status, _note in batch.rows():
        labels = {"device": DEV, "port": optic.port}
        if q in (Quantity.RX_POWER, Quantity.TX_POWER, Quantity.BIAS):
            labels["lane"] = str(lane)
        values = [v for lab, v in found.get(value_family[q], []) if lab.items() >= labels.items()]
        unavailable = [
            lab["reason"]
            for lab, _ in found["lightwarden_reading_unavailable"]
            if lab.items() >= {**labels, "lane": str(lane), "quantity": q.label}.items()
        ]
        if status is ReadingStatus.OK:
            assert len(values) == 1 and not unavailable
        else:
            assert not values and unavailable == [status.name.lower()]


def test_odd_label_values_round_trip(exposition: Exposition) -> None:
    found = samples(exposition.body())
    info = one(found["lightwarden_optic_info"], device=DEV, port=ODD_PORT)
    assert info == 1
    (labels,) = [
        lab
        for lab, _ in found["lightwarden_optic_info"]
        if lab["device"] == DEV and lab["port"] == ODD_PORT
    ]
    assert labels["alias"] == ODD_ALIAS
    assert labels["part_number"] == 'HGL-"100"-LR4'
    assert labels["serial"] == "HGL\\0002"
    assert labels["wavelength_nm"] == "1304.5"
    assert labels["window_source"] == "site"
    assert labels["form_factor"] == "QSFP28"


def test_escape_label_value_per_text_format() -> None:
    # source: Prometheus text exposition format 0.0.4 (label values escape \\, \" and \n)
    assert escape_label_value('a"b') == 'a\\"b'
    assert escape_label_value("a\\b") == "a\\\\b"
    assert escape_label_value("a\nb") == "a\\nb"
    assert escape_label_value("plain") == "plain"


def test_condition_and_severity(exposition: Exposition) -> None:
    found = samples(exposition.body())
    conds = {lab["port"]: lab["condition"] for lab, _ in found["lightwarden_optic_condition"]}
    assert conds == {"sfp1": "near_overload", ODD_PORT: "dark"}
    assert one(found["lightwarden_optic_severity"], device=DEV, port="sfp1") == 2
    assert one(found["lightwarden_optic_severity"], device=DEV, port=ODD_PORT) == 3


def test_reading_conditions_are_the_rule_layers_judgement() -> None:
    # Judged by assess(): bias 12 mA is past the module's 10 mA high warning and inside
    # its 15 mA alarm; the lab's LR4 lane 3 reads no light. The family carries exactly
    # the rule layer's held conditions at warning or worse, with the edge and its source.
    batch = lab_batch(DEV)
    exp = Exposition()
    exp.update(ok_outcome(batch), assess(batch))
    found = samples(exp.body())["lightwarden_reading_condition"]
    got = sorted((lab["port"], lab["lane"], lab["quantity"], lab["condition"], lab["edge"],
                  lab["source"], lab["cause"]) for lab, v in found if v == 1)
    assert got == [
        ("sfp1", "1", "bias", "warning", "high_warning", "module", ""),
        (ODD_PORT, "3", "rx_power", "dark", "sensitivity", "standard", ""),
    ]


def test_headers_once_per_family_across_devices(exposition: Exposition) -> None:
    text = exposition.body().decode()
    for fam in DEVICE_FAMILIES:
        help_lines = text.count(f"# HELP {fam.name} ")
        assert help_lines <= 1, fam.name
        assert text.count(f"# TYPE {fam.name} ") == help_lines
    # and both devices are in one group
    lines = [ln for ln in text.splitlines() if ln.startswith("lightwarden_rx_power_dbm{")]
    devices = [ln.split('device="')[1].split('"')[0] for ln in lines]
    assert set(devices) == {DEV, "hg-edge-3"}
    assert devices == sorted(devices)


def test_failed_poll_keeps_health_and_drops_readings(exposition: Exposition) -> None:
    failed = PollOutcome(
        device=DEV,
        started_at=1_800_000_060.0,
        duration_s=3.0,
        error="timed out after 3 tries",
        error_kind=PollErrorKind.TIMEOUT,
    )
    exposition.update(failed)
    exposition.update(failed)
    found = samples(exposition.body())
    assert one(found["lightwarden_device_up"], device=DEV) == 0
    assert one(found["lightwarden_device_up"], device="hg-edge-3") == 1
    assert one(found["lightwarden_device_last_success_timestamp_seconds"], device=DEV) == (
        1_800_000_000.0
    )
    assert one(found["lightwarden_device_poll_duration_seconds"], device=DEV) == 3.0
    assert one(found["lightwarden_device_poll_errors_total"], device=DEV, kind="timeout") == 2
    assert one(found["lightwarden_device_optics"], device=DEV) == 2
    assert not [lab for lab, _ in found["lightwarden_rx_power_dbm"] if lab["device"] == DEV]
    # the error text (free-form) never becomes a label
    assert b"timed out after" not in exposition.body()
    # a later success brings the readings back; the counter keeps counting from 2
    batch = lab_batch(DEV, taken_at=1_800_000_120.0)
    exposition.update(ok_outcome(batch), lab_assessment(batch))
    found = samples(exposition.body())
    assert one(found["lightwarden_device_up"], device=DEV) == 1
    assert one(found["lightwarden_device_poll_errors_total"], device=DEV, kind="timeout") == 2
    assert one(found["lightwarden_device_last_success_timestamp_seconds"], device=DEV) == (
        1_800_000_120.0
    )


def test_counter_family_reads_back_as_counter(exposition: Exposition) -> None:
    exposition.update(
        PollOutcome(
            device=DEV, started_at=0.0, duration_s=0.5, error="x", error_kind=PollErrorKind.AUTH
        )
    )
    fams = {f.name: f for f in text_string_to_metric_families(exposition.body().decode())}
    # prometheus_client strips _total from a counter family's name
    assert fams["lightwarden_device_poll_errors"].type == "counter"


def test_misaligned_assessment_still_exports_readings(exposition: Exposition) -> None:
    batch = lab_batch(DEV)
    wrong = lab_assessment(lab_batch(DEV))
    wrong.margin_low_db = wrong.margin_low_db[:3]
    exposition.update(ok_outcome(batch), wrong)
    found = samples(exposition.body())
    assert one(found["lightwarden_bias_amperes"], device=DEV, port="sfp1", lane=1) == 0.012
    assert not [
        lab for lab, _ in found.get("lightwarden_optic_condition", []) if lab["device"] == DEV
    ]


def test_duplicate_rows_and_ports_do_not_duplicate_series() -> None:
    batch = lab_batch(DEV)
    # append a copy of row 0 (same optic, lane, quantity)
    for col in ("optic", "lane", "quantity", "value", "status"):
        arr = getattr(batch, col)
        setattr(batch, col, np.concatenate([arr, arr[:1]]))
    exp = Exposition()
    chunks = exp.update(ok_outcome(batch))
    assert chunks.skipped_rows == 1
    found = samples(exp.body())
    assert one(found["lightwarden_rx_power_dbm"], device=DEV, port="sfp1", lane=1) < 0
    done = promtool_check(exp.body())
    assert done.returncode == 0, done.stdout + done.stderr


def test_remove_device_ends_its_series(exposition: Exposition) -> None:
    exposition.remove("hg-edge-3")
    assert b'device="hg-edge-3"' not in exposition.body()
    assert exposition.devices() == [DEV]


def _alert(**kw) -> AlertEvent:
    base = dict(
        kind=AlertKind.OPEN,
        key="k1",
        sequence=1,
        alertname="OpticRxNearOverload",
        severity=AlertSeverity.WARNING,
        device=DEV,
        port=ODD_PORT,
        lane=1,
        quantity=Quantity.RX_POWER,
        condition=Condition.NEAR_OVERLOAD,
        value=-1.0,
        unit="dBm",
        edge_name="overload",
        edge_value=0.5,
        window_source=WindowSource.PMD_TABLE,
        margin_db=1.5,
        rate_per_day=None,
        summary="s",
        advice="a",
        caution="",
        starts_at=1.0,
    )
    base.update(kw)
    return AlertEvent(**base)


def test_open_alerts() -> None:
    events = [
        _alert(),
        _alert(kind=AlertKind.UPDATE, sequence=2),  # same alert again: one series
        _alert(kind=AlertKind.RESOLVE, key="k2", port="sfp1", sequence=3),
        _alert(key="k3", alertname="OpticDark", severity=AlertSeverity.CRITICAL, lane=3),
    ]
    found = samples(render_alerts(events))
    rows = sorted(
        (lab["alertname"], lab["lane"], lab["port"]) for lab, _ in found["lightwarden_alert_open"]
    )
    assert rows == [("OpticDark", "3", ODD_PORT), ("OpticRxNearOverload", "1", ODD_PORT)]
    assert render_alerts([]) == b""


def test_broken_alert_source_does_not_break_the_scrape(exposition: Exposition) -> None:
    def broken():
        raise RuntimeError("password=hunter2")

    exposition.set_alert_source(broken)
    body = exposition.body()
    assert b"lightwarden_rx_power_dbm" in body and b"lightwarden_alert_open" not in body


def test_gzip_body_is_the_same_text(exposition: Exposition) -> None:
    exposition.set_alert_source(lambda: [_alert()])
    plain = exposition.body()
    assert gzip.decompress(exposition.body_gzip()) == plain
    # second scrape reuses the cached device part; the alert member is appended fresh
    exposition.set_alert_source(lambda: [])
    assert gzip.decompress(exposition.body_gzip()) == exposition.body()


def test_partial_poll_exports_rows_and_counts_the_error() -> None:
    exp = Exposition()
    batch = lab_batch(DEV)
    partial = PollOutcome(
        device=DEV,
        started_at=batch.taken_at,
        duration_s=2.0,
        batch=batch,
        error="dropped after 10 of 12 ports",
        error_kind=PollErrorKind.DROPPED,
    )
    exp.update(partial)
    found = samples(exp.body())
    assert one(found["lightwarden_device_up"], device=DEV) == 0
    assert one(found["lightwarden_device_poll_errors_total"], device=DEV, kind="dropped") == 1
    assert one(found["lightwarden_bias_amperes"], device=DEV, port="sfp1", lane=1) == 0.012
    # not a success: no last-success time yet
    assert "lightwarden_device_last_success_timestamp_seconds" not in found

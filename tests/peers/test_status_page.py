"""The status page and JSON API over real HTTP, fed by real polls of the lab."""

from __future__ import annotations

import asyncio
import json
import urllib.error
import urllib.request

import pytest
import yaml
from prometheus_client.parser import text_string_to_metric_families
from support.lab_findings import LAB_FINDINGS, label_tuple

from lightwarden.exporters.app.config import parse_config
from lightwarden.exporters.app.wiring import build_monitor
from lightwarden.exporters.pages.http import HttpServer
from lightwarden.exporters.pages.status import StatusPage
from lightwarden.fixtures.lab.model import LAB_ENV, LAB_SSH_PASSWORD
from lightwarden.fixtures.lab.server import lab_site_config
from lightwarden.rules.advice import LASER_CAUTION
from lightwarden.rules.consistency import ALERTNAME

SEVERITY = {"healthy": 0, "unknown": 1, "latched_warning": 1, "near_sensitivity": 2,
            "near_overload": 2, "warning": 2, "off_standard": 2, "not_ready": 2,
            "latched_alarm": 2, "below_sensitivity": 3, "overloaded": 3, "alarm": 3, "dark": 3,
            "laser_off": 3, "tx_fault": 3, "loss_of_signal": 3, "lane_imbalance": 2}


@pytest.fixture(scope="module")
def served(frozen_lab_servers, lab_env):
    lab = frozen_lab_servers
    endpoints = lab.endpoints
    data = lab_site_config(endpoints, lab=lab.lab)
    data["alerting"] = {"open_hold_s": 0, "resolve_hold_s": 0}
    monitor = build_monitor(parse_config(yaml.safe_dump(data), "test"))

    async def poll() -> None:
        try:
            monitor.build_sources()
            await monitor.poll_all()
        finally:
            monitor.close()

    asyncio.run(poll())
    server = HttpServer(monitor.exposition, port=0)
    StatusPage(monitor).mount(server)
    server.start()
    try:
        yield server, monitor
    finally:
        server.stop()


def _get(url: str) -> tuple[str, bytes]:
    with urllib.request.urlopen(url, timeout=10) as resp:
        return resp.headers["Content-Type"], resp.read()


def test_api_lists_every_optic_worst_first_with_alerts(served):
    server, _monitor = served
    ctype, body = _get(server.url + "/api/optics")
    assert ctype == "application/json"
    doc = json.loads(body)
    sev = [SEVERITY[r["condition"]] for r in doc["optics"]]
    assert sev == sorted(sev, reverse=True) and sev[0] == 3
    assert {d["device"] for d in doc["devices"]} == {"qm-core-a", "qm-core-b", "qm-dist-a",
                                                     "qm-dist-b"}
    assert all(d["up"] for d in doc["devices"])
    # lab.yaml story wrong_optic: a 10GBASE-ER part (1550 nm) facing a 10GBASE-LR one
    # (1310 nm) on the qm-core-b sfp15 / qm-dist-b sfp15 span. One cause, one finding:
    # the PMD finding carries both wavelengths, so no separate wavelength finding.
    wrong = [i for i in doc["links"] if i["port"] == "sfp15"]
    assert [i["kind"] for i in wrong] == ["pmd-mismatch"], doc["links"]
    assert "1310 nm and 1550 nm" in wrong[0]["text"]
    # The consistency stories, and nothing else (the matched BiDi pair on sfp38 and the LX
    # run over OM4 with mode-conditioning cords on sfp42 give no finding).
    assert {label_tuple(i) for i in doc["links"]} == LAB_FINDINGS
    opened = {label_tuple(a) for a in doc["alerts"] if a["alertname"] == ALERTNAME}
    assert opened == LAB_FINDINGS
    hot = [a for a in doc["alerts"] if a["device"] == "qm-core-a" and a["port"] == "sfp31"]
    assert hot and "dB" in hot[0]["advice"]
    assert hot[0]["caution"] == LASER_CAUTION


def test_page_shows_worst_first_caution_and_no_secret(served):
    server, _monitor = served
    ctype, body = _get(server.url + "/")
    assert ctype.startswith("text/html")
    text = body.decode()
    first_row = text.index("<tr class=crit>")
    assert first_row < text.index("<tr class=ok>")
    assert "Laser safety" in text
    assert "Optics and plant that do not belong together" in text
    assert "cwdm-channel-mismatch" in text
    for secret in (*LAB_ENV.values(), LAB_SSH_PASSWORD):
        assert secret not in text


def test_report_route_says_when_no_history_is_kept(served):
    server, _monitor = served
    with pytest.raises(urllib.error.HTTPError) as err:
        urllib.request.urlopen(server.url + "/api/report", timeout=10)
    assert err.value.code == 404
    assert b"no history" in err.value.read()


def test_metrics_carry_one_series_per_lab_finding(served):
    server, _monitor = served
    _ctype, body = _get(server.url + "/metrics")
    found = {
        label_tuple(x.labels)
        for fam in text_string_to_metric_families(body.decode())
        for x in fam.samples if x.name == "lightwarden_link_consistency" and x.value == 1
    }
    assert found == LAB_FINDINGS

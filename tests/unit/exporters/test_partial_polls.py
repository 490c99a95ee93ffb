"""Device health up / partial / down, the same in page, JSON and metrics; a failed
device's last readings stay in the metrics only up to the stale age, and the page shows
them marked stale with their age, never as fresh."""

from __future__ import annotations

import json

import yaml
from prometheus_client.parser import text_string_to_metric_families
from support.exposition_data import lab_batch

from lightwarden.collector.readings import PollErrorKind, PollOutcome
from lightwarden.exporters.app.config import parse_config
from lightwarden.exporters.app.wiring import build_monitor
from lightwarden.exporters.pages.http import HttpRequest
from lightwarden.exporters.pages.status import StatusPage

DEV = "hg-core-1"
T0 = 1_800_000_000.0
REQ = HttpRequest("GET", "/api/optics", {}, {})


def metrics(monitor) -> dict[str, list[tuple[dict[str, str], float]]]:
    out: dict[str, list[tuple[dict[str, str], float]]] = {}
    text = b"".join(monitor.exposition.scrape()).decode()
    for fam in text_string_to_metric_families(text):
        for s in fam.samples:
            if s.labels.get("device") == DEV:
                out.setdefault(s.name, []).append((s.labels, s.value))
    return out


def health_metric(m) -> str:
    (word,) = [lab["health"] for lab, v in m["lightwarden_device_health"] if v == 1]
    return word


def api(monitor) -> dict:
    return json.loads(StatusPage(monitor).api(REQ)[2])


def page(monitor) -> str:
    return StatusPage(monitor).page(REQ)[2].decode()


NOW = [T0]  # the monitor's clock, moved by the tests


def make_monitor(tmp_path):
    cfg = parse_config(yaml.safe_dump({"poll": {"stale_after_s": 30.0},
                                       "state_dir": str(tmp_path)}))
    return build_monitor(cfg, alerts=False, clock=lambda: NOW[0])


def test_partial_poll_is_partial_everywhere_and_its_rows_are_fresh(tmp_path):
    m = make_monitor(tmp_path)
    batch = lab_batch(DEV, T0)
    m.handle(PollOutcome(DEV, T0, 1.0, batch=batch,
                         error=f"{DEV}: 'optics levels' line 9 not understood",
                         error_kind=PollErrorKind.PARSE))
    doc = api(m)
    (dev,) = doc["devices"]
    assert dev["health"] == "partial" and "line 9" in dev["reason"]
    assert dev["last_success_at"] == T0 and dev["since"] == T0
    assert all(r["stale_s"] is None for r in doc["optics"]) and doc["optics"]
    met = metrics(m)
    assert health_metric(met) == "partial"
    assert met["lightwarden_device_up"][0][1] == 1
    assert "partial" in page(m) and "line 9" in page(m)


def test_a_failed_device_keeps_its_readings_until_the_stale_age_then_withdraws(tmp_path):
    m = make_monitor(tmp_path)
    m.handle(PollOutcome(DEV, T0, 1.0, batch=lab_batch(DEV, T0)))
    assert health_metric(metrics(m)) == "up"
    failed = PollOutcome(DEV, T0 + 10, 2.0, error=f"{DEV}: no answer after 2 tries",
                         error_kind=PollErrorKind.TIMEOUT)
    m.handle(failed)
    m.handle(PollOutcome(DEV, T0 + 20, 2.0, error=failed.error, error_kind=failed.error_kind))
    met = metrics(m)
    assert health_metric(met) == "down"
    assert met["lightwarden_device_up"][0][1] == 0
    assert "lightwarden_rx_power_dbm" in met  # 22 s old, within 30 s: still exported
    assert met["lightwarden_device_last_success_timestamp_seconds"][0][1] == T0
    (dev,) = api(m)["devices"]
    assert dev["health"] == "down" and dev["since"] == T0 + 10  # since the first failure
    assert m.withdraw_stale(T0 + 25) == []
    assert m.withdraw_stale(T0 + 31) == [DEV]
    NOW[0] = T0 + 31
    met = metrics(m)
    assert "lightwarden_rx_power_dbm" not in met  # withdrawn: not served as current
    assert health_metric(met) == "down"
    # the page and JSON still show the last readings, marked stale with their age
    rows = api(m)["optics"]
    assert rows and all(r["stale_s"] is not None and r["stale_s"] > 30 for r in rows)
    assert "stale: read" in page(m)
    # back: fresh again, health up since the poll that answered
    m.handle(PollOutcome(DEV, T0 + 40, 1.0, batch=lab_batch(DEV, T0 + 40)))
    (dev,) = api(m)["devices"]
    assert dev["health"] == "up" and dev["since"] == T0 + 40
    assert all(r["stale_s"] is None for r in api(m)["optics"])
    assert "lightwarden_rx_power_dbm" in metrics(m)


def test_a_device_failing_from_the_start_has_no_readings_to_show(tmp_path):
    m = make_monitor(tmp_path)
    m.handle(PollOutcome(DEV, T0, 2.0, error=f"{DEV}: connection refused",
                         error_kind=PollErrorKind.REFUSED))
    assert api(m)["optics"] == []
    assert "lightwarden_rx_power_dbm" not in metrics(m)
    assert health_metric(metrics(m)) == "down"

"""Alertmanager v2 delivery against the real Alertmanager binary on loopback.

source: /work/shared/notes/prometheus.md (Alertmanager v2 section, measured with 0.25):
POST /api/v2/alerts, dedupe by label set, resolve by endsAt <= now, webhook receiver
with send_resolved gets "status": "resolved".
"""

from __future__ import annotations

import json
import random
import time
import urllib.request
from datetime import datetime

import pytest
from support.alert_helpers import Receiver, make_event
from support.procs import (
    ALERTMANAGER_CONFIG,
    LOOPBACK,
    alertmanager_argv,
    require_binary,
    start_on_free_port,
    wait_for,
)

from lightwarden.exporters.alerts.delivery import Dispatcher
from lightwarden.exporters.alerts.http import AlertDestination, RetryPolicy
from lightwarden.exporters.alerts.outbox import Outbox
from lightwarden.rules.findings import AlertSeverity, Condition

pytestmark = [pytest.mark.external]



@pytest.fixture
def hook():
    r = Receiver()
    yield r
    r.down()


@pytest.fixture
def alertmanager(tmp_path, hook):
    binary = require_binary("prometheus-alertmanager")
    cfg = tmp_path / "alertmanager.yml"
    cfg.write_text(ALERTMANAGER_CONFIG.format(group_wait="100ms", url=hook.url))
    storage = tmp_path / "am-data"
    storage.mkdir()

    def argv(port: int) -> list[str]:
        return alertmanager_argv(binary, cfg, storage, port, "--log.level=debug")

    proc, port = start_on_free_port(argv, tmp_path / "alertmanager.log", "/-/ready")
    yield f"http://{LOOPBACK}:{port}", proc
    proc.stop()


def am_alerts(base: str) -> list[dict]:
    opener = urllib.request.build_opener(urllib.request.ProxyHandler({}))
    with opener.open(base + "/api/v2/alerts?active=true&silenced=true&inhibited=true") as r:
        return json.loads(r.read())


def ours(alerts: list[dict], device: str = "hg-core-01") -> list[dict]:
    return [a for a in alerts if a["labels"].get("device") == device]


def parse_time(s: str) -> float:
    return datetime.fromisoformat(s.replace("Z", "+00:00")).timestamp()


def make_dispatcher(tmp_path, name: str, base: str, **kw) -> Dispatcher:
    dest = AlertDestination(
        "alertmanager",
        base,
        timeout_s=5.0,
        static_labels={"site": "quillmoor-lab"},
        generator_url="http://127.0.0.1:9817/",
    )
    return Dispatcher(
        Outbox(tmp_path / f"{name}.sqlite"),
        [dest],
        retry=RetryPolicy(0.05, 0.5),
        rng=random.Random(3),
        idle_poll_s=0.2,
        **kw,
    )


def notifications(hook: Receiver, status: str) -> list[dict]:
    return [b for b in hook.bodies() if b.get("status") == status]


def test_open_then_resolve_reaches_webhook_receiver(tmp_path, alertmanager, hook):
    base, proc = alertmanager
    d = make_dispatcher(tmp_path, "a", base)
    d.start()
    now = time.time()
    d.submit([make_event("open", 1, at=now)])
    fired = wait_for(lambda: notifications(hook, "firing"), 20, "a firing notification")
    alert = fired[0]["alerts"][0]
    assert alert["labels"] == {
        "alertname": "OpticRxNearOverload",
        "severity": "warning",
        "device": "hg-core-01",
        "port": "sfp7",
        "lane": "0",
        "quantity": "rx_power",
        "site": "quillmoor-lab",
    }
    assert "margin 0.9 dB" in alert["annotations"]["description"]
    assert "overload edge 0.5 dBm (from module)" in alert["annotations"]["description"]
    assert alert["annotations"]["caution"].startswith("Never look into a fibre end")
    assert alert["generatorURL"] == "http://127.0.0.1:9817/"

    d.submit([make_event("resolve", 2, at=time.time())])
    resolved = wait_for(lambda: notifications(hook, "resolved"), 20, "a resolved notification")
    assert resolved[0]["alerts"][0]["labels"]["device"] == "hg-core-01"
    assert d.open_alerts() == []
    assert d.stop(2.0), proc.log_tail()


def test_two_senders_one_alert_and_periodic_resend(tmp_path, alertmanager):
    base, _ = alertmanager
    interval = 1.0
    a = make_dispatcher(tmp_path, "a", base, resend_interval_s=interval)
    b = make_dispatcher(tmp_path, "b", base, resend_interval_s=interval)
    a.start()
    b.start()
    now = time.time()
    # two monitor instances judge the same optic: same key and labels, own timestamps
    a.submit([make_event("open", 1, at=now)])
    b.submit([make_event("open", 1, at=now + 0.3)])
    wait_for(lambda: not a.backlog() and not b.backlog(), 20, "both senders delivered")
    got = wait_for(lambda: ours(am_alerts(base)), 20, "the alert in Alertmanager")
    assert len(got) == 1
    assert "instance" not in got[0]["labels"]
    first_end = parse_time(got[0]["endsAt"])
    # endsAt is a few resend intervals ahead, so a dead monitor's alert expires by itself
    assert first_end > parse_time(got[0]["startsAt"])
    # re-sends keep pushing endsAt forward while a monitor lives
    wait_for(
        lambda: parse_time(ours(am_alerts(base))[0]["endsAt"]) > first_end,
        20,
        "a re-send to move endsAt forward",
    )
    assert len(ours(am_alerts(base))) == 1
    a.stop(1.0)
    b.stop(1.0)


def test_stale_alert_stays_open_with_note(tmp_path, alertmanager):
    base, _ = alertmanager
    d = make_dispatcher(tmp_path, "a", base)
    d.start()
    now = time.time()
    d.submit([make_event("open", 1, at=now), make_event("stale", 2, at=now + 1)])
    got = wait_for(
        lambda: [a for a in ours(am_alerts(base)) if "stale" in a["annotations"]],
        20,
        "the stale annotation",
    )
    assert got[0]["status"]["state"] == "active"
    assert got[0]["annotations"]["stale"].startswith("Data is stale since")
    assert [e.kind for e in d.open_alerts()] == ["stale"]
    d.stop(1.0)


def test_outage_keeps_events_until_alertmanager_answers(tmp_path, hook):
    """Alertmanager not yet running: events wait in the outbox, then arrive."""
    binary = require_binary("prometheus-alertmanager")
    from support.procs import Proc, free_port

    port = free_port()
    base = f"http://{LOOPBACK}:{port}"
    d = make_dispatcher(tmp_path, "a", base)
    d.start()
    d.submit([make_event("open", 1, at=time.time())])
    wait_for(lambda: d.status()[0].failures >= 2, 20, "failed attempts while absent")
    assert d.backlog() == {d.status()[0].name: 1}
    cfg = tmp_path / "am.yml"
    cfg.write_text(ALERTMANAGER_CONFIG.format(group_wait="100ms", url=hook.url))
    (tmp_path / "data").mkdir()
    with Proc(
        [
            binary,
            f"--config.file={cfg}",
            f"--storage.path={tmp_path / 'data'}",
            f"--web.listen-address={LOOPBACK}:{port}",
            "--cluster.listen-address=",
        ],
        tmp_path / "am.log",
    ) as proc:
        proc.wait_http(base + "/-/ready")
        wait_for(lambda: not d.backlog(), 30, "the queued event to be delivered")
        assert len(ours(am_alerts(base))) == 1, proc.log_tail()
        d.stop(1.0)


def test_condition_change_retires_old_label_set(tmp_path, alertmanager):
    """One lifecycle key moves from near-overload to overloaded: the alertname label
    changes, so the old label set must be resolved rather than left to expire."""
    base, _ = alertmanager
    d = make_dispatcher(tmp_path, "a", base)
    d.start()
    now = time.time()
    d.submit([make_event("open", 1, at=now)])
    wait_for(lambda: ours(am_alerts(base)), 20, "the first alert")
    d.submit(
        [
            make_event(
                "update",
                2,
                at=now + 1,
                alertname="OpticRxOverloaded",
                severity=AlertSeverity.CRITICAL,
                condition=Condition.OVERLOADED,
                value=0.8,
                margin_db=-0.3,
            )
        ]
    )

    def active_names() -> list[str]:
        return sorted(a["labels"]["alertname"] for a in ours(am_alerts(base)))

    wait_for(lambda: active_names() == ["OpticRxOverloaded"], 20, "only the new alertname")
    assert [e.alertname for e in d.open_alerts()] == ["OpticRxOverloaded"]
    d.stop(1.0)

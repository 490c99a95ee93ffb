"""Consistency findings outside the rule layer: alert events, delivery labels, metrics, page.

The words checked are ours (kinds, alert name, labels); what is under test is that a
finding opens when first seen, resolves when gone, keeps its identity through the outbox
codec and a restart, and carries the same labels pushed as the generated rule produces
(deploy/prometheus/lightwarden-alerts.test.yml checks the rule's side with promtool).
"""

from __future__ import annotations

import json

import pytest
from prometheus_client.parser import text_string_to_metric_families

from lightwarden.exporters.alerts.alertmanager import to_alertmanager
from lightwarden.exporters.alerts.outbox import Outbox
from lightwarden.exporters.pages.status import StatusPage
from lightwarden.exporters.prometheus.alert_rules import RuleParams, build_rules
from lightwarden.exporters.prometheus.exposition import Exposition, render_links
from lightwarden.rules.advice import LASER_CAUTION
from lightwarden.rules.assess import MarginTargets
from lightwarden.rules.consistency import ALERTNAME, Finding, Mismatch
from lightwarden.rules.event_codec import event_from_dict, event_to_dict
from lightwarden.rules.findings import AlertKind, AlertSeverity, Severity
from lightwarden.rules.link_alerts import LinkAlerts
from lightwarden.rules.plant import Plant

T0 = 1_800_000_000.0


def _f(kind: Mismatch = Mismatch.BIDI_NOT_COMPLEMENTARY, severity: Severity = Severity.WARNING,
       far: bool = True, text: str = "qm-a sfp1 / qm-b sfp1: BiDi ends at 1310 and 1610 nm"
       ) -> Finding:
    return Finding(kind, severity, "qm-a", "sfp1", "qm-b" if far else "", "sfp1" if far else "",
                   text, "Fit the matching other half.")


def test_finding_opens_once_updates_on_change_and_resolves_when_gone():
    la = LinkAlerts()
    (op,) = la.observe([_f()], {"qm-a"}, T0)
    assert (op.kind, op.alertname, op.severity, op.sequence) == (
        AlertKind.OPEN, ALERTNAME, AlertSeverity.WARNING, 1)
    assert op.quantity is None and op.condition is None and op.finding == "bidi-not-complementary"
    assert op.caution == LASER_CAUTION  # the advice means handling optics
    assert la.observe([_f()], {"qm-b"}, T0 + 60) == []  # unchanged: nothing to send
    (up,) = la.observe([_f(severity=Severity.CRITICAL)], {"qm-a"}, T0 + 120)
    assert (up.kind, up.severity, up.starts_at, up.sequence) == (
        AlertKind.UPDATE, AlertSeverity.CRITICAL, T0, 2)
    # A poll of an unrelated device resolves nothing; one of either end does.
    assert la.observe([], {"qm-c"}, T0 + 180) == []
    (res,) = la.observe([], {"qm-b"}, T0 + 240)
    assert (res.kind, res.ends_at, res.sequence) == (AlertKind.RESOLVE, T0 + 240, 3)
    assert la.open_alerts() == []
    (again,) = la.observe([_f()], {"qm-a"}, T0 + 300)
    assert again.sequence == 4  # (key, sequence) never repeats


def test_state_survives_a_restart_through_the_outbox(tmp_path):
    la = LinkAlerts()
    la.observe([_f(), _f(Mismatch.OUT_OF_BAND, far=False, text="qm-a sfp1: 1550 nm")],
               {"qm-a"}, T0)
    with Outbox(tmp_path / "outbox.sqlite") as box:
        box.save_state("link-alerts", json.loads(json.dumps(la.to_dict())))
        saved = box.load_state("link-alerts")
    assert saved is not None
    back = LinkAlerts()
    back.load(saved)
    assert back.open_alerts() == la.open_alerts()
    assert back.observe([_f()], {"qm-a"}, T0 + 60)[0].kind is AlertKind.RESOLVE  # the other
    with pytest.raises(ValueError, match="link alert snapshot"):
        LinkAlerts.from_dict({"format": "something else"})


def test_event_codec_round_trip_keeps_the_finding():
    (ev,) = LinkAlerts().observe([_f()], {"qm-a"}, T0)
    doc = event_to_dict(ev)
    assert (doc["quantity"], doc["condition"], doc["finding"], doc["far_device"]) == (
        None, None, "bidi-not-complementary", "qm-b")
    assert event_from_dict(json.loads(json.dumps(doc))) == ev


def test_pushed_labels_match_the_generated_rule():
    la = LinkAlerts()
    span, single = la.observe([_f(), _f(Mismatch.OUT_OF_BAND, far=False)], {"qm-a"}, T0)
    pushed = to_alertmanager(span, T0)["labels"]
    assert pushed == {"alertname": ALERTNAME, "severity": "warning", "device": "qm-a",
                      "port": "sfp1", "far_device": "qm-b", "far_port": "sfp1",
                      "kind": "bidi-not-complementary"}
    assert "far_device" not in to_alertmanager(single, T0)["labels"]
    (rule,) = next(g["rules"] for g in build_rules(RuleParams())["groups"]
                   if g["name"] == "lightwarden-links")
    assert rule["alert"] == ALERTNAME
    kept = rule["expr"].split("by (", 1)[1].split(")")[0].replace(" ", "").split(",")
    assert {*kept, "alertname"} == set(pushed)


def test_metric_family_one_series_per_finding():
    text = render_links([_f(), _f(), _f(Mismatch.OUT_OF_BAND, far=False)]).decode()
    samples = [s for fam in text_string_to_metric_families(text) for s in fam.samples]
    assert [(s.name, s.labels["kind"], s.labels["severity"], s.value) for s in samples] == [
        ("lightwarden_link_consistency", "bidi-not-complementary", "warning", 1.0),
        ("lightwarden_link_consistency", "wavelength-out-of-band", "warning", 1.0)]
    assert render_links([]) == b""
    expo = Exposition()
    expo.set_link_source(lambda: [_f()])
    assert b'lightwarden_link_consistency{device="qm-a",port="sfp1",far_device="qm-b"' \
        in expo.body()


class _View:
    site = "Quillmoor"
    targets = MarginTargets()
    history = None

    def __init__(self) -> None:
        self.views: dict = {}

    def open_alerts(self) -> list:
        return LinkAlerts().observe([_f()], {"qm-a"}, T0)

    def link_issues(self) -> list[Finding]:
        return [_f()]

    def plant_with_history(self) -> Plant:
        return Plant([], {})


def test_status_page_and_api_show_findings_and_their_alerts():
    page = StatusPage(_View())
    _code, _ctype, body = page.api(None)  # type: ignore[arg-type]
    doc = json.loads(body)
    assert doc["links"] == [{"kind": "bidi-not-complementary", "severity": "warning",
                             "device": "qm-a", "port": "sfp1", "far_device": "qm-b",
                             "far_port": "sfp1", "text": _f().text,
                             "advice": "Fit the matching other half.",
                             "caution": LASER_CAUTION}]
    (alert,) = doc["alerts"]
    assert (alert["alertname"], alert["kind"], alert["quantity"]) == (
        ALERTNAME, "bidi-not-complementary", "")
    _code, _ctype, html = page.page(None)  # type: ignore[arg-type]
    assert b"bidi-not-complementary" in html and b"qm-a sfp1 / qm-b sfp1" in html

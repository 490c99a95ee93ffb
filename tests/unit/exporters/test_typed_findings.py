"""Typed findings: members inside, the same words outside, one severity order everywhere.

The severity order and every word checked here are ours (the design's vocabulary, no
outside source); what is under test is that each reader takes them from the one table in
rules/findings.py and that the words written out are the ones always written.
"""

from __future__ import annotations

import dataclasses
import itertools
import json
import re

import numpy as np
import pytest
from prometheus_client.parser import text_string_to_metric_families
from support.alert_helpers import make_event
from support.assessments import build_assessment, rx_assessment

from lightwarden.collector.readings import (
    BatchBuilder,
    OpticIdentity,
    PollErrorKind,
    PollOutcome,
    Quantity,
)
from lightwarden.exporters.pages.rows import optic_rows, worst_first
from lightwarden.exporters.pages.status import StatusPage
from lightwarden.exporters.pages.view import DeviceView
from lightwarden.exporters.prometheus.exposition import Exposition
from lightwarden.rules import hysteresis
from lightwarden.rules.assess import MarginTargets, _worst_per_optic
from lightwarden.rules.event_codec import event_from_dict, event_to_dict
from lightwarden.rules.findings import (
    SEVERITY_OF,
    AlertKind,
    AlertSeverity,
    Condition,
    Severity,
    WindowSource,
)
from lightwarden.rules.lifecycle import AlertLifecycle
from lightwarden.rules.plant import Plant

T0 = 1_800_000_000.0
DEVICE = "qm-edge-4"

#: Our severity order per condition (design choice, see rules/findings.py).
EXPECTED = {
    Condition.HEALTHY: Severity.NONE,
    Condition.UNKNOWN: Severity.INFO,
    Condition.NEAR_SENSITIVITY: Severity.WARNING,
    Condition.NEAR_OVERLOAD: Severity.WARNING,
    Condition.WARNING: Severity.WARNING,
    Condition.BELOW_SENSITIVITY: Severity.CRITICAL,
    Condition.OVERLOADED: Severity.CRITICAL,
    Condition.ALARM: Severity.CRITICAL,
    Condition.DARK: Severity.CRITICAL,
    Condition.LASER_OFF: Severity.CRITICAL,
    Condition.OFF_STANDARD: Severity.WARNING,
    Condition.TX_FAULT: Severity.CRITICAL,
    Condition.LOSS_OF_SIGNAL: Severity.CRITICAL,
    Condition.NOT_READY: Severity.WARNING,
    Condition.LATCHED_ALARM: Severity.WARNING,
    Condition.LATCHED_WARNING: Severity.INFO,
    Condition.LANE_IMBALANCE: Severity.WARNING,
}
#: The status page's row colours (ours).
PAGE_CLASS = {Severity.NONE: "ok", Severity.INFO: "unknown", Severity.WARNING: "warn",
              Severity.CRITICAL: "crit"}


# -- the one table ----------------------------------------------------------------------


def test_table_per_condition_and_its_array_agree():
    assert {c: c.severity for c in Condition} == EXPECTED
    assert SEVERITY_OF.tolist() == [int(EXPECTED[Condition(k)]) for k in range(len(Condition))]
    with pytest.raises(ValueError, match="read-only"):
        SEVERITY_OF[int(Condition.DARK)] = 0


def test_alert_severity_words_are_the_alerting_rungs_of_severity():
    assert [(s.name, s.value) for s in AlertSeverity] == [
        (s.name, s.word) for s in Severity if s >= Severity.WARNING
    ]
    assert [s.level for s in AlertSeverity] == [Severity.WARNING, Severity.CRITICAL]
    assert Severity.CRITICAL.alert is AlertSeverity.CRITICAL
    for quiet in (Severity.NONE, Severity.INFO):
        with pytest.raises(ValueError, match=f"{quiet.word!r} does not raise an alert"):
            _ = quiet.alert


def test_worst_condition_per_optic_follows_the_table():
    # One optic, two rows, every pair of conditions: the optic takes the more severe one,
    # and between equally severe ones the higher code (a fixed, documented tie-break).
    pairs = list(itertools.product(Condition, repeat=2))
    b = BatchBuilder(DEVICE)
    for n, _ in enumerate(pairs):
        o = b.add_optic(OpticIdentity(device=DEVICE, port=f"p{n}"))
        b.add(o, 1, Quantity.RX_POWER, -5.0)
        b.add(o, 1, Quantity.TX_POWER, -2.0)
    batch = b.build(T0)
    cond = np.array([int(c) for pair in pairs for c in pair], dtype=np.int8)
    worst = _worst_per_optic(batch, cond).tolist()
    expected = [int(max(pair, key=lambda c: (EXPECTED[c], int(c)))) for pair in pairs]
    assert worst == expected


def test_hysteresis_ranks_by_the_same_table():
    assert np.array_equal(hysteresis.RANK, SEVERITY_OF)


@pytest.mark.parametrize("condition", list(Condition))
def test_lifecycle_alerts_exactly_from_warning_up(condition: Condition):
    events = AlertLifecycle().observe(rx_assessment(-5.0, condition, T0), T0)
    if EXPECTED[condition] >= Severity.WARNING:
        (ev,) = events
        assert ev.severity is EXPECTED[condition].alert and ev.condition is condition
    else:
        assert events == []


class _View:
    """The read-only monitor view the status page needs, over one assessment."""

    site = "Quillmoor"
    targets = MarginTargets()
    history = None

    def __init__(self, views: dict[str, DeviceView]) -> None:
        self.views = views

    def open_alerts(self) -> list:
        return []

    def link_issues(self) -> list:
        return []

    def plant_with_history(self) -> Plant:
        return Plant([], {})


def test_rows_page_and_exposition_read_one_severity_per_condition():
    # One optic per condition, one Rx row each, ports named after the condition.
    b = BatchBuilder(DEVICE)
    for c in Condition:
        o = b.add_optic(OpticIdentity(device=DEVICE, port=c.word, pmd="10GBASE-LR"))
        b.add(o, 1, Quantity.RX_POWER, -5.0)
    batch = b.build(T0)
    a = build_assessment(batch, list(Condition), low_edge=-14.4, high_edge=0.5)
    outcome = PollOutcome(DEVICE, T0, 0.5, batch)

    rows = optic_rows(a)
    assert {r.port: r.severity for r in rows} == {c.word: EXPECTED[c] for c in Condition}
    worst_first(rows, MarginTargets())
    assert [r.severity for r in rows] == sorted(EXPECTED.values(), reverse=True)

    expo = Exposition()
    expo.update(outcome, a)
    found = {
        s.labels["port"]: s.value
        for fam in text_string_to_metric_families(expo.body().decode())
        for s in fam.samples
        if s.name == "lightwarden_optic_severity"
    }
    assert found == {c.word: float(EXPECTED[c]) for c in Condition}

    page = StatusPage(_View({DEVICE: DeviceView(outcome, a)})).page(None)[2].decode()
    shown = re.findall(r"<tr class=(\w+)><td class=l>[^<]*</td><td class=l>(\w+)</td>", page)
    assert {port: cls for cls, port in shown} == {
        c.word: PAGE_CLASS[EXPECTED[c]] for c in Condition
    }


# -- members inside, words outside ------------------------------------------------------


def test_event_words_are_unchanged():
    # The words every receiver, row and snapshot has always seen.
    assert [k.value for k in AlertKind] == ["open", "update", "stale", "resolve"]
    assert [s.value for s in AlertSeverity] == ["warning", "critical"]
    # The standard's edges were once written "pmd-table": still read, now written "standard".
    assert [w.word for w in WindowSource] == ["none", "standard", "module", "site", "practice"]
    assert WindowSource.from_word("pmd-table") is WindowSource.PMD_TABLE
    assert [q.label for q in Quantity] == ["rx_power", "tx_power", "bias", "temperature",
                                           "supply"]


def _variants():
    for kind in AlertKind:
        yield {"kind": kind}
    for sev in AlertSeverity:
        yield {"severity": sev}
    for q in Quantity:
        yield {"quantity": q}
    for c in Condition:
        yield {"condition": c}
    for w in WindowSource:
        yield {"window_source": w}


def _variant_id(over: dict) -> str:
    ((name, member),) = over.items()
    return f"{name}-{member.name}"


@pytest.mark.parametrize("over", list(_variants()), ids=_variant_id)
def test_codec_writes_words_and_reads_members_back(over):
    ev = dataclasses.replace(make_event(), **over)
    doc = json.loads(json.dumps(event_to_dict(ev)))
    (name, member), = over.items()
    word = member.label if isinstance(member, Quantity) else getattr(member, "word", None)
    assert doc[name] == (word if word is not None else member.value)
    assert type(doc[name]) is str
    back = event_from_dict(doc)
    assert back == ev and type(getattr(back, name)) is type(member)


def test_codec_refuses_what_it_cannot_read_by_field():
    doc = event_to_dict(make_event())
    bad = r"where\.condition: condition 'near_overlaod' is not one of"
    with pytest.raises(ValueError, match=bad):
        event_from_dict({**doc, "condition": "near_overlaod"}, "where")
    with pytest.raises(ValueError, match=r"where: missing fields \['quantity'\]"):
        event_from_dict({k: v for k, v in doc.items() if k != "quantity"}, "where")
    with pytest.raises(ValueError, match=r"where: unknown fields \['colour'\]"):
        event_from_dict({**doc, "colour": "red"}, "where")


def test_an_event_holds_members_not_words():
    with pytest.raises(TypeError, match="quantity must be a member of Quantity, got 'rx_power'"):
        dataclasses.replace(make_event(), quantity="rx_power")
    with pytest.raises(TypeError, match="severity must be a member of AlertSeverity"):
        dataclasses.replace(make_event(), severity="warning")


# -- poll error kinds -------------------------------------------------------------------


def test_poll_error_kinds_write_their_words():
    # The words in metrics labels and JSON since before the kinds were typed.
    assert {k.value for k in PollErrorKind} == {
        "", "timeout", "auth", "hostkey", "refused", "dropped", "transport", "protocol",
        "parse", "unsupported", "config", "internal",
    }
    ok = PollOutcome(DEVICE, T0, 0.1)
    assert ok.error_kind is PollErrorKind.NONE and not ok.error_kind
    failed = PollOutcome("qm-edge-5", T0, 0.1, error="qm-edge-5: host key unknown",
                         error_kind=PollErrorKind.HOSTKEY)
    expo = Exposition()
    expo.update(failed, None)
    errors = [
        s.labels
        for fam in text_string_to_metric_families(expo.body().decode())
        for s in fam.samples
        if s.name == "lightwarden_device_poll_errors_total"
    ]
    assert errors == [{"device": "qm-edge-5", "kind": "hostkey"}]
    view = _View({"qm-edge-5": DeviceView(failed, None)})
    doc = json.loads(StatusPage(view).api(None)[2])
    assert doc["devices"][0]["error_kind"] == "hostkey"

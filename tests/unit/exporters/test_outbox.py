"""The alert outbox: durable, ordered, idempotent per (key, sequence, destination)."""

from __future__ import annotations

import dataclasses
import json
import math
import sqlite3

import pytest
from support.alert_helpers import make_event

from lightwarden.collector.readings import Quantity
from lightwarden.exporters.alerts.outbox import Outbox, OutboxError, event_to_dict
from lightwarden.rules.findings import AlertKind, AlertSeverity, Condition, WindowSource


@pytest.fixture
def path(tmp_path):
    return tmp_path / "state" / "outbox.sqlite"


def test_put_pending_ack_in_order(path):
    box = Outbox(path)
    events = [make_event("open", 1), make_event("update", 2), make_event("resolve", 3)]
    for ev in events:
        box.put(ev, ["am", "hook"])
    got = box.pending("hook", 10)
    assert [it.event for it in got] == events
    assert box.backlog() == {"am": 3, "hook": 3}
    box.ack([got[0].id])
    assert [it.event.sequence for it in box.pending("hook", 10)] == [2, 3]
    # the other destination's copy is untouched
    assert [it.event.sequence for it in box.pending("am", 10)] == [1, 2, 3]
    assert [it.event.sequence for it in box.pending("am", 2)] == [1, 2]


def test_put_is_idempotent(path):
    box = Outbox(path)
    ev = make_event("open", 1)
    assert box.put(ev, ["am"]) == 1
    assert box.put(ev, ["am"]) == 0  # UNIQUE (key, sequence, destination)
    assert box.put(ev, ["am", "hook"]) == 1
    assert len(box.pending("am", 10)) == 1
    # once delivered, a replay of the same step is not queued again
    box.ack([it.id for it in box.pending("am", 10)])
    assert box.put(ev, ["am"]) == 0
    assert box.pending("am", 10) == []
    # a different key with the same sequence is a different event
    assert box.put(make_event("open", 1, key="other"), ["am"]) == 1


def test_survives_reopen_and_uses_wal(path):
    box = Outbox(path)
    box.put(make_event("open", 1), ["am"])
    box.put(make_event("update", 2), ["am"])
    box.save_state("lifecycle", {"k": {"seq": 2, "since": 1.5}})
    box.close()
    again = Outbox(path)
    assert [it.event.sequence for it in again.pending("am", 10)] == [1, 2]
    assert again.load_state("lifecycle") == {"k": {"seq": 2, "since": 1.5}}
    assert again.load_state("absent") is None
    mode = sqlite3.connect(path).execute("PRAGMA journal_mode").fetchone()[0]
    assert mode == "wal"


def test_nan_values_become_null(path):
    box = Outbox(path)
    box.put(make_event("open", 1, value=math.nan, margin_db=math.inf), ["am"])
    ev = box.pending("am", 1)[0].event
    assert ev.value is None and ev.margin_db is None


def test_bad_event_rejected_with_clear_error(path):
    # A kind outside AlertKind cannot be built into an event, so it never reaches a row.
    with pytest.raises(TypeError, match="kind must be a member of AlertKind, got 'opened'"):
        dataclasses.replace(make_event("open", 1), kind="opened")
    box = Outbox(path)
    with pytest.raises(ValueError, match="empty key"):
        box.put(make_event("open", 1, key=""), ["am"])
    with pytest.raises(ValueError, match="negative sequence"):
        box.put(make_event("open", -1), ["am"])
    assert box.backlog() == {}


def test_stored_event_reads_back_with_its_members(path):
    ev = make_event("stale", 4, condition=Condition.DARK, severity=AlertSeverity.CRITICAL,
                    quantity=Quantity.TX_POWER, window_source=WindowSource.SITE)
    box = Outbox(path)
    box.put(ev, ["hook"])
    (body,) = _bodies(path)
    # The row holds words, as it did before events were typed ...
    assert (body["kind"], body["severity"], body["quantity"], body["condition"],
            body["window_source"]) == ("stale", "critical", "tx_power", "dark", "site")
    # ... and reads back as members, equal to what went in.
    back = box.pending("hook", 1)[0].event
    assert back == ev
    assert (type(back.kind), type(back.severity), type(back.quantity), type(back.condition),
            type(back.window_source)) == (AlertKind, AlertSeverity, Quantity, Condition,
                                          WindowSource)


#: A row body in the form the outbox wrote before events were typed (sorted keys).
_UNTYPED_ROW = (
    '{"advice": "Add a fixed attenuator of 7 dB at the receiver (expected Rx -8.5 dBm).", '
    '"alertname": "OpticRxNearOverload", "at": 1800000000.0, "caution": "", '
    '"condition": "near_overload", "device": "hgl-core-1", "edge_name": "overload", '
    '"edge_value": -1.0, "ends_at": null, "key": "hgl-core-1|sfp7|1|rx_power", '
    '"kind": "open", "lane": 1, "margin_db": 0.5, "port": "sfp7", "quantity": "rx_power", '
    '"rate_per_day": null, "sequence": 1, "severity": "warning", "starts_at": 1800000000.0, '
    '"summary": "Rx power -1.5 dBm on sfp7 lane 1 is 0.5 dB below overload (-1.0 dBm, '
    'pmd-table)", "unit": "dBm", "value": -1.5, "window_source": "pmd-table"}'
)


def _insert_row(path, body: str, key: str = "hgl-core-1|sfp7|1|rx_power") -> None:
    db = sqlite3.connect(path)
    with db:
        db.execute("INSERT INTO outbox (destination, key, sequence, body, queued_at) "
                   "VALUES ('hook', ?, 1, ?, 0)", (key, body))
    db.close()


def _bodies(path) -> list[dict]:
    db = sqlite3.connect(path)
    rows = [json.loads(b) for (b,) in db.execute("SELECT body FROM outbox ORDER BY id")]
    db.close()
    return rows


def test_row_written_before_typed_events_still_delivers(path):
    box = Outbox(path)
    _insert_row(path, _UNTYPED_ROW)
    (item,) = box.pending("hook", 10)
    ev = item.event
    assert (ev.kind, ev.severity, ev.quantity, ev.condition, ev.window_source) == (
        AlertKind.OPEN, AlertSeverity.WARNING, Quantity.RX_POWER, Condition.NEAR_OVERLOAD,
        WindowSource.PMD_TABLE)
    # Written out again it is the same document, word for word, except the standard's
    # edges, once written "pmd-table" and now "standard".
    assert json.dumps(event_to_dict(ev), sort_keys=True) == _UNTYPED_ROW.replace(
        '"window_source": "pmd-table"', '"window_source": "standard"')


def test_unreadable_word_buries_the_row_naming_the_field(path):
    box = Outbox(path)
    _insert_row(path, _UNTYPED_ROW.replace('"rx_power"', '"rx_powr"'))
    assert box.pending("hook", 10) == []
    db = sqlite3.connect(path)
    (reason,) = db.execute("SELECT reason FROM dead_letter").fetchone()
    db.close()
    assert "quantity" in reason and "'rx_powr'" in reason and "rx_power" in reason


def test_bury_keeps_rejected_event(path):
    box = Outbox(path)
    box.put(make_event("open", 1), ["hook"])
    item = box.pending("hook", 1)[0]
    box.record_failure([item.id], "HTTP 503")
    assert box.pending("hook", 1)[0].attempts == 1
    box.bury([item.id], "HTTP 400: bad")
    assert box.pending("hook", 1) == []
    [(dest, ev, reason)] = box.dead_letters()
    assert dest == "hook" and ev.sequence == 1 and "400" in reason


def test_state_must_be_json(path):
    box = Outbox(path)
    with pytest.raises(ValueError, match="'x' is not JSON"):
        box.save_state("x", {"v": object()})


def test_unopenable_path_names_file(tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("")
    with pytest.raises(OutboxError, match=r"cannot open alert outbox .*file"):
        Outbox(blocker / "outbox.sqlite")

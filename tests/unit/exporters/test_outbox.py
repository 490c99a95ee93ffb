"""The alert outbox: durable, ordered, idempotent per (key, sequence, destination)."""

from __future__ import annotations

import math
import sqlite3

import pytest
from support.alert_helpers import make_event

from lightwarden.exporters.alerts.outbox import Outbox, OutboxError


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
    box = Outbox(path)
    with pytest.raises(ValueError, match="kind 'opened'"):
        box.put(make_event("opened", 1), ["am"])
    assert box.backlog() == {}


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

"""The demo's own alert push, end to end: `lightwarden demo --alertmanager URL --webhook URL`.

A real Alertmanager (cluster off) on loopback forwards to a stdlib webhook receiver in the
test (send_resolved: true); a second stdlib receiver takes the demo's own
`lightwarden.alert.v1` webhook events. One demo run serves every test in this module.

source: /work/shared/notes/prometheus.md (Alertmanager v2 section, measured with 0.25);
exporters/alerts/README.md (webhook schema, ordering guarantee).
"""

from __future__ import annotations

import itertools
import json
import re
import urllib.request
from collections import defaultdict

import pytest
from support.alert_helpers import Receiver
from support.demo import DemoProc
from support.lab_findings import LAB_FINDINGS, label_tuple
from support.procs import (
    ALERTMANAGER_CONFIG,
    LOOPBACK,
    alertmanager_argv,
    require_binary,
    start_on_free_port,
    wait_for,
)

from lightwarden.fixtures.lab.model import HOUR, Lab
from lightwarden.rules.assess import MarginTargets

pytestmark = [pytest.mark.external, pytest.mark.slow]

SPEED = 300.0  # lab hours 2.0 and 3.0 (dirty connector step, cleaning) at ~24 s and ~36 s
DURATION_S = 80.0
_OPENER = urllib.request.build_opener(urllib.request.ProxyHandler({}))


LAB = Lab.load()


def _dirty_connector_story() -> tuple[bool, str]:
    """Does the lab's dirty-connector story push qm-dist-b sfp9 under the margin target?

    Margins are measured to the standard's edge where the PMD is known (rules/README.md
    "Window precedence"): 10GBASE-LR minimum average receive power -14.4 dBm (IEEE 802.3
    cl.52, standards.md, verified). The worst step must bring Rx closer than the
    sensitivity margin target (3 dB, standards.md "Rules of thumb", common practice) for
    the whole time it is in place, without passing the edge.
    """
    port = LAB.devices["qm-dist-b"].port("sfp9")
    steps = sorted(port.link.steps_into[f"{port.name}@{port.device}"], key=lambda s: s.after_s)
    worst = max(range(len(steps)), key=lambda i: steps[i].db)
    start = steps[worst].after_s
    end = steps[worst + 1].after_s if worst + 1 < len(steps) else start + HOUR
    sensitivity = -14.4
    target = MarginTargets().sensitivity_db
    n = 60
    rx = [LAB.rx_dbm(port, 1, start + (end - start) * i / n) for i in range(n)]
    margin = max(rx) - sensitivity
    why = (f"dirty-connector story: with the {steps[worst].db:g} dB step Rx is at most "
           f"{max(rx):.2f} dBm, {margin:.2f} dB above the standard's sensitivity "
           f"{sensitivity:g} dBm; the near-sensitivity target is {target:g} dB, so no alert "
           "can open (lab.yaml story needs a larger step)")
    # 0.3 dB: room for the hysteresis band; 0.5 dB: never past the edge itself
    return min(rx) - sensitivity > 0.5 and margin < target - 0.3, why


DIRTY_REACHES_TARGET, DIRTY_WHY = _dirty_connector_story()


@pytest.fixture(scope="module")
def setup(tmp_path_factory):
    """Alertmanager + two receivers + the demo pushing to both; torn down in reverse."""
    tmp = tmp_path_factory.mktemp("am")
    binary = require_binary("prometheus-alertmanager")
    am_hook = Receiver()  # what Alertmanager notifies
    lw_hook = Receiver()  # the demo's own webhook events
    am_proc = demo = None
    try:
        cfg = tmp / "alertmanager.yml"
        cfg.write_text(ALERTMANAGER_CONFIG.format(group_wait="1s", url=am_hook.url))
        storage = tmp / "am-data"
        storage.mkdir()

        def argv(port: int) -> list[str]:
            return alertmanager_argv(binary, cfg, storage, port)

        am_proc, am_port = start_on_free_port(argv, tmp / "alertmanager.log", "/-/ready")
        am_url = f"http://{LOOPBACK}:{am_port}"
        demo = DemoProc(
            tmp / "demo", duration=DURATION_S, speed=SPEED, interval=2.0, hold=2.0,
            extra=["--alertmanager", am_url, "--webhook", lw_hook.url],
        )
        yield {"am": am_url, "am_proc": am_proc, "am_hook": am_hook, "lw_hook": lw_hook,
               "demo": demo}
    finally:
        if demo is not None:
            demo.stop()
        if am_proc is not None:
            am_proc.stop()
        am_hook.down()
        lw_hook.down()


def _am_alerts(base: str) -> list[dict]:
    with _OPENER.open(base + "/api/v2/alerts?active=true", timeout=5) as r:
        return json.loads(r.read())


def _notified(hook: Receiver, status: str, alertname: str, device: str, port: str) -> list:
    out = []
    for body in hook.bodies():
        for a in body.get("alerts", []):
            lb = a["labels"]
            if (a["status"] == status and lb.get("alertname") == alertname
                    and lb.get("device") == device and lb.get("port") == port):
                out.append(a)
    return out


def _fail_msg(setup, what: str) -> str:
    return (f"{what}\n--- demo log ---\n{setup['demo'].log_tail()}\n"
            f"--- alertmanager log ---\n{setup['am_proc'].log_tail()}")


def test_overloaded_alerts_reach_alertmanager_with_advice_and_caution(setup):
    base, hook = setup["am"], setup["am_hook"]
    hot = {("qm-core-a", "sfp31"), ("qm-core-b", "sfp31")}  # hot_receiver story, both ends

    def overloaded():
        got = [a for a in _am_alerts(base) if a["labels"]["alertname"] == "OpticRxOverloaded"]
        return got if {(a["labels"]["device"], a["labels"]["port"]) for a in got} >= hot \
            else None

    try:
        got = wait_for(overloaded, 60, "OpticRxOverloaded for both sfp31 ends", step=0.5)
    except AssertionError as exc:
        raise AssertionError(_fail_msg(setup, str(exc))) from None
    assert {(a["labels"]["device"], a["labels"]["port"]) for a in got} == hot
    for a in got:
        lb, ann = a["labels"], a["annotations"]
        assert lb["severity"] == "critical"
        assert lb["site"] == "quillmoor"  # the demo's static label
        assert lb["quantity"] == "rx_power" and lb["lane"] == "1"
        assert "instance" not in lb
        assert a["status"]["state"] == "active"
        advice = ann["advice"].lower()
        assert "pad" in advice or "attenuator" in advice, ann
        # The pad named must be a stocked step that brings Rx back inside the 10GBASE-ER
        # window with the margin targets: overload -1.0, sensitivity -15.8 dBm (source:
        # standards.md IEEE 802.3 cl.52 table, from memory); steps 1,3,5,7,10,15,20 dB and
        # 1 dB / 3 dB margins (standards.md "Rules of thumb", practice).
        m = re.search(r"(?:attenuator|pad)\D*?(\d+(?:\.\d+)?) dB\b", ann["advice"])
        assert m, ann["advice"]
        pad = float(m.group(1))
        assert pad in (1, 3, 5, 7, 10, 15, 20)
        rx = LAB.rx_dbm(LAB.devices[lb["device"]].port(lb["port"]), 1, LAB.epoch)
        assert -15.8 + 3.0 - 0.2 <= rx - pad <= -1.0 - 1.0 + 0.2, (rx, pad)  # 0.2: wobble
        caution = ann["caution"].lower()
        # Laser-safety caution (the project brief's required wording elements)
        for phrase in ("never look into a fibre end", "infrared", "video scope",
                       "disable the transmitter", "cap the port", "laser-safety"):
            assert phrase in caution, (phrase, ann["caution"])
    # Alertmanager passed them on to its receiver as firing notifications.
    for device, port in hot:
        wait_for(lambda d=device, p=port: _notified(hook, "firing", "OpticRxOverloaded", d, p),
                 30, f"a firing notification for {device} {port}", step=0.5)


def test_link_findings_reach_alertmanager_with_the_rule_labels(setup):
    """The lab's consistency stories as pushed alerts: one per finding, labelled exactly as
    the generated OpticLinkMismatch rule labels it (exporters/prometheus/README.md)."""
    base = setup["am"]

    def links():
        got = [a for a in _am_alerts(base)
               if a["labels"]["alertname"] == "OpticLinkMismatch"]
        return got if {label_tuple(a["labels"]) for a in got} >= LAB_FINDINGS else None

    try:
        got = wait_for(links, 60, "OpticLinkMismatch for the lab's stories", step=0.5)
    except AssertionError as exc:
        raise AssertionError(_fail_msg(setup, str(exc))) from None
    assert len(got) == len(LAB_FINDINGS)  # one alert per finding, nothing else
    for a in got:
        assert set(a["labels"]) == {"alertname", "severity", "device", "port", "far_device",
                                    "far_port", "kind", "site"}, a["labels"]
        assert "never look into a fibre end" in a["annotations"]["caution"].lower()
        assert a["annotations"]["summary"].startswith(
            f"{a['labels']['device']} {a['labels']['port']} / ")


@pytest.mark.xfail(not DIRTY_REACHES_TARGET, reason=DIRTY_WHY, run=False)
def test_dirty_connector_opens_then_resolves(setup):
    """dirty_connector story on qm-dist-b sfp9: +8.5 dB at lab hour 2, cleaned at hour 3."""
    hook = setup["am_hook"]
    args = ("OpticRxNearSensitivity", "qm-dist-b", "sfp9")
    try:
        firing = wait_for(lambda: _notified(hook, "firing", *args), 90,
                          "a firing notification for qm-dist-b sfp9", step=0.5)
        resolved = wait_for(lambda: _notified(hook, "resolved", *args), 90,
                            "a resolved notification for qm-dist-b sfp9", step=0.5)
    except AssertionError as exc:
        raise AssertionError(_fail_msg(setup, str(exc))) from None
    assert firing[0]["labels"]["lane"] == "1"
    assert resolved[0]["labels"] == firing[0]["labels"]
    # the resolve ends after it started: the story cleaned the connector an hour later
    assert resolved[-1]["endsAt"] > resolved[-1]["startsAt"]


def test_webhook_events_follow_the_schema_in_order(setup):
    hook = setup["lw_hook"]

    def keys_opened():
        opened = {
            (b["labels"]["device"], b["labels"]["port"], b["labels"]["alertname"])
            for b in hook.bodies() if b.get("event") == "open"
        }
        want = {("qm-core-a", "sfp31", "OpticRxOverloaded"),
                ("qm-core-b", "sfp31", "OpticRxOverloaded"),
                ("qm-core-a", "sfp20", "OpticLaserOff")}
        return opened >= want

    try:
        wait_for(keys_opened, 60, "open events for the overloaded optics and the laser off",
                 step=0.5)
    except AssertionError as exc:
        raise AssertionError(_fail_msg(setup, str(exc))) from None
    with hook._lock:
        requests = list(hook.requests)
    by_key: dict[str, list[dict]] = defaultdict(list)
    for headers, raw in requests:
        body = json.loads(raw)
        h = {k.lower(): v for k, v in headers.items()}
        assert body["schema"] == "lightwarden.alert.v1"
        assert h["content-type"].startswith("application/json")
        assert h["idempotency-key"] == body["idempotency_key"]
        assert h["x-lightwarden-timestamp"].isdigit()
        ev = body["alert"]
        assert body["idempotency_key"] == f"{ev['key']}:{ev['sequence']}"
        assert body["event"] == ev["kind"] in ("open", "update", "stale", "resolve")
        assert body["labels"]["site"] == "quillmoor"
        assert body["labels"]["device"] == ev["device"]
        assert (body["times"]["ends_at"] is None) == (ev["kind"] != "resolve")
        by_key[ev["key"]].append(ev)
    for key, events in by_key.items():
        seqs = [e["sequence"] for e in events]
        # Fresh state dir: every key starts at 1; each event takes the next number and the
        # webhook gets them one at a time in order (exporters/alerts/README.md "Ordered").
        assert seqs == list(range(1, len(seqs) + 1)), (key, seqs)
        assert events[0]["kind"] == "open", (key, events[0])
        for prev, nxt in itertools.pairwise(events):
            if prev["kind"] == "resolve":
                assert nxt["kind"] == "open", (key, prev, nxt)
            else:
                assert nxt["kind"] != "open", (key, prev, nxt)
            assert nxt["at"] >= prev["at"], (key, prev, nxt)

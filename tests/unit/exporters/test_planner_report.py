"""The planners' report on the lab's stories, its files, and its command's edges.

lab.yaml stories: laser_wear (qm-dist-a sfp5 transmits, qm-core-a sfp5 receives, Tx
-0.06 dB/day), hot_receiver (qm-core-a sfp31 / qm-core-b sfp31, an ER optic on 2 km: Rx
above overload), dark_port (qm-dist-b sfp20). SVG is checked with the standard
library's XML parser; the CSV with its csv reader.
"""

from __future__ import annotations

import csv
import json
import subprocess
import sys
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest
import yaml
from support.lab_history import WALL_NOW

from lightwarden.exporters.app.cli import main
from lightwarden.exporters.app.monitor import Monitor
from lightwarden.exporters.pages.report import build_report, render_report, report_json
from lightwarden.exporters.pages.report_html import write_report_dir


@pytest.fixture(scope="module")
def report(lab_monitor: Monitor):
    assert lab_monitor.history is not None
    return build_report(lab_monitor.history, lab_monitor.plant_with_history(),
                        lab_monitor.targets, WALL_NOW, days=25)


def test_what_is_wrong_now_comes_first_then_the_soonest_forecast(report):
    states = [o.now_state for o in report.lanes]
    wrong = [s for s in states if s]
    assert states[:len(wrong)] == wrong  # every lane wrong now is ahead of the rest
    by_port = {(o.device, o.port): o for o in report.lanes}
    assert by_port[("qm-dist-b", "sfp20")].now_state == "dark"
    assert by_port[("qm-core-a", "sfp31")].now_state == "overloaded"
    first_dated = next(o for o in report.lanes if not o.now_state)
    assert (first_dated.device, first_dated.port) == ("qm-core-a", "sfp5")
    assert first_dated.target_earliest <= first_dated.target_lost_at <= first_dated.target_latest


def test_the_laser_section_names_the_transmitting_optic_and_not_the_healthy_ones(report):
    assert [(x.device, x.port) for x in report.lasers] == [("qm-dist-a", "sfp5")]
    laser = report.lasers[0]
    assert laser.serial and laser.receiver == "qm-core-a sfp5"
    # 30 days of wear at 0.06 dB/day before the lab epoch (lab.yaml), seen from the
    # serial's first sighting 40 days back: about 1.8 dB
    assert laser.tx_drop_db == pytest.approx(1.8, abs=0.3)
    assert laser.tx_rate_db_per_day == pytest.approx(-0.06, abs=0.01)
    assert laser.receiver_target_lost_at is not None and laser.receiver_target_lost_at > WALL_NOW


def test_text_is_quiet_where_nothing_is_wrong_and_numbers_are_sensible(report):
    text = render_report(report)
    assert "no sign of wear" not in text and "-0.000" not in text
    assert "qm-dist-a sfp5 lane 1 (serial" in text
    assert "no light at the last poll" in text and "above overload" in text
    assert "history too short" not in text.split("Forecast to leave")[0]  # the dark port
    # spans: first + growth = now, as printed
    for s in report.spans:
        if None not in (s.first_db, s.growth_db, s.measured_db):
            assert s.first_db + s.growth_db == pytest.approx(s.measured_db, abs=1e-9)
    doc = report_json(report)
    json.dumps(doc, allow_nan=False)  # no NaN sneaks into the JSON


def test_html_has_a_chart_per_listed_item_and_the_csv_every_lane(report, lab_monitor,
                                                                 tmp_path: Path):
    paths = write_report_dir(report, lab_monitor.history, tmp_path / "out")
    page = paths[0].read_text()
    listed = [o for o in report.lanes if o.now_state or o.target_lost_at is not None]
    charts = page.count("<svg ")
    assert charts == len(listed) + 3  # one per listed receiver, plus three fleet charts
    for svg in page.split("<svg ")[1:]:
        ET.fromstring("<svg " + svg.split("</svg>")[0] + "</svg>")  # well-formed
    assert "qm-dist-a sfp5 lane 1" in page and "Laser safety" in page
    rows = list(csv.DictReader(paths[1].open()))
    assert len(rows) == len(report.lanes)
    assert rows[0]["now_state"] in {"dark", "overloaded", "below sensitivity"}


def _site(tmp: Path, history: Path) -> Path:
    site = tmp / "site.yaml"
    site.write_text(yaml.safe_dump({
        "devices": [{"name": "qm-a", "host": "127.0.0.1", "port": 9, "credentials": "c"}],
        "credentials": {"c": {"snmp_v2c": {"community": {"env": "UNUSED"}}}},
        "history": {"path": str(history)}}))
    return site


@pytest.mark.parametrize("days", ["-5", "0", "nan", "soon"])
def test_bad_days_exit_2_with_a_reason(tmp_path: Path, days: str,
                                       capsys: pytest.CaptureFixture[str]):
    site = _site(tmp_path, tmp_path / "h.sqlite")
    with pytest.raises(SystemExit) as exc:
        main(["report", "-c", str(site), "--days", days])
    assert exc.value.code == 2
    assert "days" in capsys.readouterr().err


def test_an_empty_store_says_why(tmp_path: Path, capsys: pytest.CaptureFixture[str]):
    from lightwarden.exporters.store.history import History

    History(tmp_path / "h.sqlite").close()  # a failed start leaves a store with nothing in it
    site = _site(tmp_path, tmp_path / "h.sqlite")
    assert main(["report", "-c", str(site)]) == 0
    assert "No receiver lanes in the history yet" in capsys.readouterr().out


def test_a_closed_pipe_ends_quietly(lab_monitor: Monitor, tmp_path: Path):
    history = lab_monitor.history
    assert history is not None
    site = _site(tmp_path, history.path)
    proc = subprocess.Popen([sys.executable, "-m", "lightwarden.exporters.app.cli", "report",
                             "-c", str(site), "--json"], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE)
    assert proc.stdout is not None and proc.stderr is not None
    proc.stdout.read(100)
    proc.stdout.close()  # as `| head -c 100` does
    err = proc.stderr.read().decode()
    assert proc.wait(timeout=60) == 0
    assert "Traceback" not in err and "BrokenPipe" not in err


def test_the_status_server_serves_the_report_with_charts(lab_monitor: Monitor):
    from lightwarden.exporters.pages.status import StatusPage

    page = StatusPage(lab_monitor)
    code, ctype, body = page.report_html(None)
    assert code == 200 and ctype.startswith("text/html")
    assert b"<svg " in body and b"qm-dist-a sfp5 lane 1" in body
    code, _, text = page.report_text(None)
    assert code == 200 and b"Lasers to replace (1)" in text


def test_a_terminal_gets_a_progress_bar_and_the_report_is_unchanged(
        lab_monitor: Monitor, tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
        capsys: pytest.CaptureFixture[str]):
    history = lab_monitor.history
    assert history is not None
    site = _site(tmp_path, history.path)
    assert main(["report", "-c", str(site), "--json"]) == 0
    plain = capsys.readouterr()
    assert plain.err == ""  # not a terminal: no bar
    monkeypatch.setattr(sys.stderr, "isatty", lambda: True)
    assert main(["report", "-c", str(site), "--json"]) == 0
    shown = capsys.readouterr()
    assert "reading history" in shown.err  # the bar went to stderr
    a, b = json.loads(shown.out), json.loads(plain.out)
    assert [(o["device"], o["port"]) for o in a["lanes"]] == [
        (o["device"], o["port"]) for o in b["lanes"]]

"""Generated Prometheus alerting rules: committed file is current, valid, and behaves.

source: /work/shared/notes/prometheus.md ("promtool": check rules, test rules; a failing
case exits 1 with an exp/got diff), measured with promtool 2.42.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest
import yaml
from support.procs import require_binary, run

from lightwarden.exporters.prometheus.alert_rules import RuleParams, main, render_rules

DEPLOY = Path(__file__).resolve().parents[2] / "deploy" / "prometheus"
RULES = DEPLOY / "lightwarden-alerts.yml"
TESTS = DEPLOY / "lightwarden-alerts.test.yml"


def test_committed_rules_match_generator():
    assert RULES.read_text(encoding="utf-8") == render_rules(), (
        "deploy/prometheus/lightwarden-alerts.yml is stale: regenerate with "
        "`lightwarden rules -o deploy/prometheus/lightwarden-alerts.yml`"
    )


def test_every_rule_has_severity_and_words():
    doc = yaml.safe_load(render_rules())
    rules = [r for g in doc["groups"] for r in g["rules"]]
    assert len({r["alert"] for r in rules}) == len(rules)
    for r in rules:
        if "labels" in r:
            assert r["labels"]["severity"] in {"warning", "critical"}, r["alert"]
        else:  # the link rule takes each finding's severity from its series
            assert "severity" in r["expr"].split("by (", 1)[1].split(")")[0], r["alert"]
        assert {"summary", "description", "advice"} <= set(r["annotations"]), r["alert"]
        handling = any(w in r["annotations"]["advice"] for w in ("connector", "pad", "optic"))
        if handling:  # advice that means touching fibre carries the laser caution
            assert "never look into a fibre end" in r["annotations"]["caution"], r["alert"]


@pytest.mark.external
def test_promtool_check_rules():
    promtool = require_binary("promtool")
    res = run([promtool, "check", "rules", str(RULES)])
    assert res.returncode == 0, res.stdout + res.stderr
    # one rule per alerting condition (rules/lifecycle.py ALERTNAMES), drift and run-out,
    # the three device/monitor rules, and the link-finding rule
    assert "SUCCESS: 20 rules found" in res.stdout


@pytest.mark.external
def test_promtool_unit_tests_pass():
    promtool = require_binary("promtool")
    res = run([promtool, "test", "rules", TESTS.name], cwd=DEPLOY)
    assert res.returncode == 0, res.stdout + res.stderr


@pytest.mark.external
def test_unit_tests_notice_a_changed_threshold(tmp_path):
    """The unit tests depend on the thresholds: a slower drift threshold must break them."""
    promtool = require_binary("promtool")
    shutil.copy(TESTS, tmp_path / TESTS.name)
    # 1.44 dB/day no longer exceeds 1.5 dB/day, so the drift case's expected alert vanishes
    (tmp_path / RULES.name).write_text(render_rules(RuleParams(drift_db_per_day=1.5)))
    res = run([promtool, "test", "rules", TESTS.name], cwd=tmp_path)
    assert res.returncode == 1
    assert "LightwardenRxFastDrift" in res.stdout + res.stderr


@pytest.mark.external
def test_cli_writes_valid_rules_with_custom_params(tmp_path):
    promtool = require_binary("promtool")
    out = tmp_path / "rules.yml"
    argv = ["-o", str(out), "--condition-for", "10m", "--drift-db-per-day", "2.5"]
    assert main(argv) == 0
    text = out.read_text()
    assert "for: 10m" in text and "< -2.5" in text
    res = run([promtool, "check", "rules", str(out)])
    assert res.returncode == 0, res.stdout + res.stderr


def test_cli_rejects_bad_duration_clearly(tmp_path, capsys):
    assert main(["-o", str(tmp_path / "x.yml"), "--drift-for", "6 hours"]) == 2
    err = capsys.readouterr().err
    assert "drift_for" in err and "'6 hours'" in err and "Traceback" not in err
    assert not (tmp_path / "x.yml").exists()


@pytest.mark.external
def test_example_prometheus_config_is_valid():
    promtool = require_binary("promtool")
    res = run([promtool, "check", "config", str(DEPLOY / "prometheus.yml")])
    assert res.returncode == 0, res.stdout + res.stderr


@pytest.mark.external
def test_example_alertmanager_config_is_valid():
    amtool = require_binary("amtool")
    cfg = DEPLOY.parent / "alertmanager" / "alertmanager.yml"
    res = run([amtool, "check-config", str(cfg)])
    assert res.returncode == 0, res.stdout + res.stderr

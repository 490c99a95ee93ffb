"""The Grafana dashboard in deploy/ queries only metrics we export, in valid PromQL.

PromQL validity is checked by Prometheus's own promtool: each panel query becomes a
recording rule in a scratch rules file (with the dashboard variables substituted), and
`promtool check rules` parses it.
"""

from __future__ import annotations

import json
import re
import subprocess
from pathlib import Path

import yaml
from support.procs import require_binary

from lightwarden.exporters.prometheus.drift_metrics import FAMILIES as DRIFT_FAMILIES
from lightwarden.exporters.prometheus.exposition import ALERT_OPEN, DEVICE_FAMILIES, TARGET_OVERLOAD

DASHBOARD = Path(__file__).resolve().parents[2] / "deploy" / "grafana" / \
    "lightwarden-dashboard.json"
EXPORTED = {f.name for f in (*DEVICE_FAMILIES, ALERT_OPEN, TARGET_OVERLOAD, *DRIFT_FAMILIES)}


def _queries() -> list[str]:
    dash = json.loads(DASHBOARD.read_text())
    out = [t["expr"] for p in dash["panels"] for t in p["targets"]]
    out += [v["query"] for v in dash["templating"]["list"] if v["type"] == "query"]
    return out


def _metric_names(expr: str) -> set[str]:
    return set(re.findall(r"\blightwarden_[a-z_]+", expr))


def test_dashboard_uses_only_exported_metrics():
    used = set().union(*(_metric_names(q) for q in _queries()))
    assert used, "no lightwarden metric in the dashboard"
    assert used <= EXPORTED, used - EXPORTED


def test_dashboard_queries_are_valid_promql(tmp_path: Path):
    promtool = require_binary("promtool")
    exprs = [q for q in _queries() if not q.startswith("label_values(")]
    # label_values(metric{...}, label) is Grafana's; its selector must still parse.
    exprs += [re.sub(r"^label_values\((.*), *\w+\)$", r"\1", q)
              for q in _queries() if q.startswith("label_values(")]
    rules = [{"record": f"dashboard:query_{i}",
              "expr": q.replace("$device", ".*").replace("$port", ".*")}
             for i, q in enumerate(exprs)]
    path = tmp_path / "dashboard-rules.yml"
    path.write_text(yaml.safe_dump({"groups": [{"name": "dashboard", "rules": rules}]}))
    res = subprocess.run([promtool, "check", "rules", str(path)], capture_output=True,
                         text=True, timeout=60)
    assert res.returncode == 0, res.stdout + res.stderr
    assert f"{len(rules)} rules found" in res.stdout

"""The site config: what it accepts, what it refuses, and what the service makes of it."""

from __future__ import annotations

from pathlib import Path

import pytest

from lightwarden.collector.readings import Quantity
from lightwarden.exporters.app.config import ConfigError, load_config, parse_config
from lightwarden.exporters.app.wiring import build_overrides, lifecycle_config
from lightwarden.rules.assess import MarginTargets

REPO = Path(__file__).resolve().parents[3]
BASE = """\
credentials:
  ro: {snmp_v2c: {community: {env: LW_T_COMMUNITY}}}
devices:
  - {name: a, host: 127.0.0.1, credentials: ro}
"""


def test_example_config_validates_and_maps_holds_per_quantity_and_lane():
    cfg = load_config(REPO / "deploy" / "site.example.yaml")
    lc = lifecycle_config(cfg, MarginTargets())
    assert lc.policy(Quantity.TEMPERATURE, 0).open_hold_s == 600
    assert lc.policy(Quantity.RX_POWER, 1).open_hold_s == 0
    overrides = build_overrides(cfg)
    assert {o.part_number for o in overrides} >= {"TK-10GER-40"}


def test_lane_hold_beats_quantity_hold():
    cfg = parse_config(BASE + """\
alerting:
  holds:
    - {quantity: rx_power, resolve_hold_s: 60}
    - {quantity: rx_power, lane: 3, resolve_hold_s: 900}
""")
    lc = lifecycle_config(cfg, MarginTargets())
    assert lc.policy(Quantity.RX_POWER, 1).resolve_hold_s == 60
    assert lc.policy(Quantity.RX_POWER, 3).resolve_hold_s == 900
    assert lc.policy(Quantity.TX_POWER, 3).resolve_hold_s == 0


@pytest.mark.parametrize(
    ("snippet", "message"),
    [
        ("alerting:\n  webhooks: [{url: 'http://127.0.0.1:1/', secret: hunter2hunter2}]\n",
         "alerting.webhooks[0].secret: inline secrets are not allowed"),
        ("alerting:\n  holds: [{quantity: rx_power, lane: 99}]\n",
         "alerting.holds[0].lane: Input should be less than or equal to 16"),
        ("margins: {sensitivity_db: -1}\n",
         "margins.sensitivity_db: Input should be greater than or equal to 0"),
        ("overrides: [{port: 'a sfp1', part_number: X, rx_sensitivity_dbm: -10}]\n",
         "give exactly one of 'port'"),
        ("overrides: [{port: 'zz sfp1', rx_sensitivity_dbm: -10}]\n",
         "overrides[0].port: no device named 'zz'"),
        ("plant: [{a: 'a sfp1', b: 'nowhere', km: 1}]\n",
         "plant[0].b: 'nowhere' is not \"DEVICE PORT\""),
        ("plant: [{a: 'a sfp1', b: 'zz sfp1', km: 1}, {a: 'zz sfp2', b: 'a sfp2', km: 1}]\n",
         "plant[0].b: no device named 'zz' (and 1 more reference)"),
        ("poll: {interval_s: 0}\n", "poll.interval_s: Input should be greater than 0"),
    ],
)
def test_bad_values_are_named_with_line_and_key(snippet: str, message: str):
    with pytest.raises(ConfigError) as err:
        parse_config(BASE + snippet, "site.yaml")
    text = str(err.value)
    assert message in text, text
    assert text.startswith("site.yaml:")
    assert "hunter2" not in text


def test_secret_from_file_is_read_relative_to_the_config(tmp_path: Path):
    (tmp_path / "secrets").mkdir()
    (tmp_path / "secrets" / "c").write_text("lab-community\n")
    cfg = parse_config(BASE.replace("{env: LW_T_COMMUNITY}", "{file: secrets/c}"))
    ref = cfg.credentials["ro"].snmp_v2c.community  # type: ignore[union-attr]
    assert ref.read(tmp_path) == "lab-community"
    with pytest.raises(ConfigError) as err:
        ref.read(tmp_path / "elsewhere")
    assert "cannot read secret file" in str(err.value)

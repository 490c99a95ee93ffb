"""Site PMD rows from the config reach the catalogue with the optional table columns."""

from __future__ import annotations

import pytest

from lightwarden.exporters.app.config import ConfigError, parse_config
from lightwarden.exporters.app.wiring import build_catalogue

BASE = """\
credentials:
  ro: {snmp_v2c: {community: {env: LW_T_COMMUNITY}}}
devices:
  - {name: a, host: 127.0.0.1, credentials: ro}
pmd_additions:
"""
ROW = ("  - {name: QM-850, wavelength_min_nm: 840, wavelength_max_nm: 860, reach_m: 250,"
       " tx_min_dbm: -8, tx_max_dbm: 0, rx_overload_dbm: 0, rx_min_avg_dbm: -11,"
       " source: Quillmoor sheet")


def test_site_row_with_fibre_reach_and_oma():
    cfg = parse_config(BASE + ROW + ", fibre: mmf, reach_om3_m: 200, reach_om4_m: 250,"
                       " rx_sens_oma_dbm: -12, er_min_db: 3.0, oma_clause: Quillmoor spec 4}\n")
    spec = build_catalogue(cfg).lookup("QM-850", "OM3")
    assert spec is not None and spec.fibre == "mmf"
    assert (spec.reach_for("OM3"), spec.reach_for("OM4")) == (200, 250)
    # derived average at ER 3.0 dB: -12 + 10 log10(2.995/1.990) = -10.225 dBm (computed)
    assert spec.rx_sens_avg_from_oma_dbm == pytest.approx(-10.225, abs=0.001)
    assert spec.source == "Quillmoor sheet"


def test_site_row_without_the_optional_columns_still_works():
    spec = build_catalogue(parse_config(BASE + ROW + "}\n"))["QM-850"]
    assert (spec.fibre, spec.er_min_db, spec.rx_min_avg_dbm) == ("", None, -11)


@pytest.mark.parametrize(
    ("extra", "message"),
    [
        (", fibre: copper}", "pmd_additions[0].fibre"),
        (", er_min_db: 0}", "pmd_additions[0].er_min_db"),
        (", reach_om3_m: -1}", "pmd_additions[0].reach_om3_m"),
    ],
)
def test_bad_optional_columns_are_named(extra, message):
    with pytest.raises(ConfigError) as err:
        parse_config(BASE + ROW + extra + "\n", "site.yaml")
    assert message in str(err.value) and str(err.value).startswith("site.yaml:")


def test_one_pad_for_both_directions_is_refused_with_the_way_out():
    from lightwarden.exporters.app.config import ConfigError, parse_config

    text = """
devices: [{name: qm-a, host: 127.0.0.1, credentials: c},
          {name: qm-b, host: 127.0.0.2, credentials: c}]
credentials: {c: {snmp_v2c: {community: {env: X}}}}
plant:
  - {a: qm-a sfp1, b: qm-b sfp1, km: 1.0, pad_db: 5}
"""
    with pytest.raises(ConfigError, match=r"pad_a_db .*pad_b_db"):
        parse_config(text, "site.yaml")
    ok = parse_config(text.replace("pad_db: 5", "pad_b_db: 5"), "site.yaml")
    assert (ok.plant[0].pad_a_db, ok.plant[0].pad_b_db) == (0.0, 5.0)

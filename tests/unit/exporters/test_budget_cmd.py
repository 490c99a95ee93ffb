"""`lightwarden budget`: the planning command, its JSON and its errors.

Sources: ITU-T G.652 Appendix I loss sum and standards.md's worked example (6.1 dB);
IEEE 802.3 cl.52 10GBASE-LR budget 6.2 dB (computed from the rows, verified) and
10GBASE-ER window (from memory); planning coefficients (standards.md, practice).
"""

from __future__ import annotations

import json

import pytest

from lightwarden.exporters.app.cli import main


def run(capsys, *argv: str) -> tuple[int, str, str]:
    code = main(["budget", *argv])
    out = capsys.readouterr()
    return code, out.out, out.err


def test_json_holds_both_directions(capsys):
    code, out, _ = run(capsys, "--a", "10GBASE-LR", "--b", "10GBASE-LR", "--length-km", "10",
                       "--splices", "2", "--connector-db", "0.75", "--splice-db", "0.3",
                       "--json")
    assert code == 0
    doc = json.loads(out)
    assert doc["engineered_loss_db"] == pytest.approx(6.1)
    assert [(d["from"], d["to"]) for d in doc["directions"]] == [("a", "b"), ("b", "a")]
    for d in doc["directions"]:
        assert d["power_budget_db"] == pytest.approx(6.2)
        assert d["rx_expected_dbm"] == {"min": pytest.approx(-14.3), "max": pytest.approx(-5.6)}
        assert d["verdict"] == "short" and d["pad_db"] is None
        assert d["margin_to_sensitivity_db"] == pytest.approx(0.1)


def test_a_pad_is_advised_with_the_laser_caution(capsys):
    code, out, _ = run(capsys, "--a", "10GBASE-ER", "--b", "10GBASE-ER", "--length-km", "2")
    assert code == 0
    assert "5 dB pad at b's receiver" in out and "5 dB pad at a's receiver" in out
    assert "never look into a fibre end" in out


def test_a_pad_already_fitted_counts_in_its_own_direction(capsys):
    _, out, _ = run(capsys, "--a", "10GBASE-ER", "--b", "10GBASE-ER", "--length-km", "2",
                    "--pad-b", "5", "--json")
    ab, ba = json.loads(out)["directions"]
    assert (ab["verdict"], ab["pad_db"], ba["verdict"], ba["pad_db"]) == ("ok", None, "pad", 5.0)


def test_a_link_that_cannot_close_exits_1(capsys):
    code, out, _ = run(capsys, "--a", "10GBASE-SR", "--b", "10GBASE-SR", "--length-km", "5",
                       "--fibre", "OM3", "--json")
    assert code == 1
    doc = json.loads(out)
    assert doc["verdict"] == "fails"
    assert any("beyond" in n and "reach" in n for n in doc["notes"])


@pytest.mark.parametrize(("argv", "named"), [
    (["--a", "10GBASE-QQ", "--b", "10GBASE-LR", "--length-km", "1"], "--a"),
    (["--a", "10GBASE-LR", "--b", "10GBASE-LR", "--length-km", "-1"], "--length-km"),
    (["--a", "10GBASE-LR", "--b", "10GBASE-LR", "--length-km", "1", "--connectors", "-1"],
     "--connectors"),
    (["--a", "10GBASE-LR", "--b", "10GBASE-LR", "--length-km", "1", "--fibre", "XX"],
     "fibre"),
    (["--a", "10GBASE-LR", "--b", "10GBASE-LR", "--length-km", "1", "--stock", "3,x"],
     "--stock"),
])
def test_bad_input_exits_2_naming_the_option(capsys, argv, named):
    code, _, err = run(capsys, *argv)
    assert code == 2 and named in err and "Traceback" not in err


def test_the_api_and_the_page_give_the_same_answer():
    from lightwarden.exporters.pages.budget import budget_api, budget_page
    from lightwarden.exporters.pages.http import HttpRequest

    q = {"a": ["10GBASE-ER"], "b": ["10GBASE-ER"], "length_km": ["2"]}
    code, ctype, body = budget_api(HttpRequest("GET", "/api/budget", q, {}))
    assert code == 200 and ctype == "application/json"
    doc = json.loads(body)
    assert [d["pad_db"] for d in doc["directions"]] == [5.0, 5.0]
    code, _, page = budget_page(HttpRequest("GET", "/budget", q, {}))
    assert code == 200 and b"<b>pad</b>" in page and b"never look into a fibre end" in page
    bad = {"a": ["10GBASE-ER"], "b": ["10GBASE-ER"], "length_km": ["-3"]}
    code, _, body = budget_api(HttpRequest("GET", "/api/budget", bad, {}))
    assert code == 400 and b"length-km" in body
    code, _, body = budget_api(HttpRequest("GET", "/api/budget", {"zz": ["1"]}, {}))
    assert code == 400 and b"unknown parameter" in body

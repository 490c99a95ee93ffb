"""No command-line output loses a device: the parser reports bad rows, never raises.

Inputs are the lab's own QMOS tables (fixtures/lab/ssh_cli.py) with lines and cells
replaced by hypothesis-generated text: lane numbers past the int16 range, non-ASCII
digits (superscripts, other scripts), garbage, truncation. The example count follows
``LIGHTWARDEN_HYPOTHESIS_PROFILE`` as in test_eeprom_fuzz.py (``fuzz`` for a long run):

    LIGHTWARDEN_HYPOTHESIS_PROFILE=fuzz .venv/bin/pytest tests/unit/collector/test_cli_fuzz.py -q
"""

from __future__ import annotations

import os

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from lightwarden.collector.readings import BAD_LANE, MAX_LANE, ReadingStatus
from lightwarden.collector.ssh.cli_parse import parse_outputs
from lightwarden.collector.ssh.platforms.platform import load_platform
from lightwarden.fixtures.lab.model import Lab
from lightwarden.fixtures.lab.ssh_cli import CliFaults, render_levels, render_limits, render_modules

_N = {"dev": 150, "ci": 1500, "fuzz": 200_000}[
    os.environ.get("LIGHTWARDEN_HYPOTHESIS_PROFILE") or ("ci" if os.environ.get("CI") else "dev")]
FUZZ = settings(max_examples=_N, deadline=None, suppress_health_check=[HealthCheck.too_slow])

PLATFORM = load_platform("qmos")
LAB = Lab.load()
DEVICE = "qm-dist-b"
_SAMPLES = LAB.sample(DEVICE, LAB.epoch)
LEVELS = "\n".join(render_levels(LAB.devices[DEVICE], _SAMPLES, CliFaults()))
LIMITS = "\n".join(render_limits(LAB.devices[DEVICE], _SAMPLES))
MODULES = "\n".join(render_modules(_SAMPLES))
CMD = {"levels": "optics levels", "limits": "optics limits", "modules": "optics modules"}

#: digits str.isdigit() accepts and int() refuses, or int() reads though no device prints
ODD_DIGITS = st.sampled_from(["²", "³", "¹", "⁴", "①", "١٢", "٣", "߂", "𝟗", "७"])
CELL = st.one_of(
    st.integers(min_value=-(2**40), max_value=2**40).map(str),
    ODD_DIGITS,
    st.text(max_size=12),
    st.sampled_from(["", "-inf", "inf", "nan", "N/A", "--", "1e999", "-0", "0x10"]),
)


def _cells(line: str) -> list[str]:
    return [c.strip() for c in line.split("|")]


def parse(levels: str = LEVELS, limits: str = LIMITS, modules: str = MODULES):
    return parse_outputs(DEVICE, PLATFORM, {CMD["levels"]: levels, CMD["limits"]: limits,
                                            CMD["modules"]: modules}, 1.0)


def _checked(result) -> None:
    b = result.batch
    assert b.lane.dtype == np.int16
    good = b.status == int(ReadingStatus.OK)
    assert ((b.lane[good] >= 0) & (b.lane[good] <= MAX_LANE)).all()
    assert ((b.lane == BAD_LANE) | ((b.lane >= 0) & (b.lane <= MAX_LANE))).all()
    assert np.isfinite(b.value[good]).all()
    for p in result.problems:
        assert isinstance(p, str) and p


def test_the_lab_output_parses_cleanly():
    result = parse()
    assert result.problems == []
    assert len(result.batch.optics) == sum(1 for s in _SAMPLES if s.optic is not None)


@pytest.mark.parametrize("lane", ["32768", "99999", "70000", "0", "33", "²", "١", "𝟗"])
def test_an_impossible_lane_costs_its_row_only(lane):
    lines = LEVELS.splitlines()
    i = next(k for k, ln in enumerate(lines) if _cells(ln)[:2] == ["sfp1", "1"])
    cells = _cells(lines[i])
    cells[1] = lane
    lines[i] = " | ".join(cells)
    result = parse("\n".join(lines))
    _checked(result)
    assert any("sfp1" in p for p in result.problems), result.problems
    ports = {o.port for o in result.batch.optics}
    assert "sfp2" in ports  # the other optics are all still there


def test_the_batch_builder_keeps_an_impossible_lane_as_an_invalid_row():
    from lightwarden.collector.readings import BatchBuilder, OpticIdentity, Quantity

    b = BatchBuilder(DEVICE)
    o = b.add_optic(OpticIdentity(DEVICE, "sfp1"))
    b.add(o, 1, Quantity.RX_POWER, -3.0)
    b.add(o, 99_999, Quantity.RX_POWER, -3.0)
    batch = b.build(1.0)
    assert batch.lane.tolist() == [1, BAD_LANE]
    assert batch.status.tolist() == [int(ReadingStatus.OK), int(ReadingStatus.INVALID)]
    assert "lane 99999 out of range" in batch.notes[1]


@FUZZ
@given(data=st.data())
def test_any_cell_replaced_never_raises(data):
    lines = LEVELS.splitlines()
    rows = [k for k, ln in enumerate(lines) if ln.startswith("sfp")]
    k = data.draw(st.sampled_from(rows))
    cells = _cells(lines[k])
    j = data.draw(st.integers(min_value=0, max_value=len(cells) - 1))
    cells[j] = data.draw(CELL).replace("\n", " ").replace("\r", " ")
    lines[k] = " | ".join(cells)
    _checked(parse("\n".join(lines)))


@FUZZ
@given(which=st.sampled_from(["levels", "limits", "modules"]), data=st.data())
def test_any_line_replaced_or_cut_never_raises(which, data):
    text = {"levels": LEVELS, "limits": LIMITS, "modules": MODULES}[which]
    lines = text.splitlines()
    k = data.draw(st.integers(min_value=0, max_value=len(lines) - 1))
    junk = data.draw(st.one_of(st.text(max_size=80), ODD_DIGITS))
    assume("\n" not in junk and "\r" not in junk)
    cut = data.draw(st.booleans())
    lines = lines[:k] if cut else [*lines[:k], junk, *lines[k + 1:]]
    _checked(parse(**{which: "\n".join(lines)}))


@FUZZ
@given(text=st.text(max_size=400))
def test_arbitrary_text_as_every_table_never_raises(text):
    _checked(parse(text, text, text))

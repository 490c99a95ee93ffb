"""No input crashes the decoders; the decode command fails cleanly on bad files.

Example counts come from a Hypothesis profile chosen by the environment:
``LIGHTWARDEN_HYPOTHESIS_PROFILE`` (``dev``, ``ci`` or ``fuzz``); with ``CI`` set the
default is ``ci`` (10 000 examples per test), otherwise ``dev``. A long run:

    LIGHTWARDEN_HYPOTHESIS_PROFILE=fuzz .venv/bin/pytest tests/unit/collector/test_eeprom_fuzz.py -q
"""

from __future__ import annotations

import contextlib
import json
import os
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from lightwarden.collector.eeprom import (
    HexDumpError,
    ModuleMap,
    decode,
    format_hexdump,
    load,
    parse_hexdump,
    to_json,
)
from lightwarden.collector.eeprom.command import decode_command
from lightwarden.fixtures.lab.encode import encode_cmis, encode_sff8472, encode_sff8636

DATA = Path(__file__).parent / "data" / "eeprom"

_COMMON = {"deadline": None, "suppress_health_check": [HealthCheck.too_slow]}
settings.register_profile("lightwarden-dev", max_examples=300, **_COMMON)
settings.register_profile("lightwarden-ci", max_examples=10_000, **_COMMON)
settings.register_profile("lightwarden-fuzz", max_examples=1_000_000, **_COMMON)
_PROFILE = os.environ.get("LIGHTWARDEN_HYPOTHESIS_PROFILE") or (
    "ci" if os.environ.get("CI") else "dev"
)
FUZZ = settings.get_profile(f"lightwarden-{_PROFILE}")

VALID = {
    "sff8472": encode_sff8472(),
    "sff8472_ext": encode_sff8472(calibration="external"),
    "sff8636": encode_sff8636(),
    "cmis": encode_cmis(),
}


def _sound(m: ModuleMap) -> None:
    """The decoder returned normally and its result serialises."""
    assert isinstance(m, ModuleMap)
    assert not any(p.startswith("internal decoder error") for p in m.problems), m.problems
    json.dumps(to_json(m), allow_nan=False)


@FUZZ
@given(st.binary(max_size=1100))
def test_arbitrary_bytes(data):
    _sound(decode(data))


@FUZZ
@given(
    ident=st.sampled_from([0x03, 0x0C, 0x0D, 0x11, 0x18, 0x19, 0x1E]),
    body=st.binary(max_size=1000),
)
def test_arbitrary_bytes_behind_known_identifiers(ident, body):
    m = decode(bytes([ident]) + body)
    _sound(m)
    assert m.spec in ("SFF-8472", "SFF-8636", "CMIS")


@FUZZ
@given(
    kind=st.sampled_from(sorted(VALID)),
    flips=st.lists(st.tuples(st.integers(0, 1023), st.integers(0, 7)), min_size=1, max_size=8),
    cut=st.one_of(st.none(), st.integers(0, 1023)),
)
def test_bit_flips_of_valid_maps(kind, flips, cut):
    data = bytearray(VALID[kind])
    for pos, bit in flips:
        data[pos % len(data)] ^= 1 << bit
    if cut is not None:
        del data[cut:]
    _sound(decode(bytes(data)))


@pytest.mark.parametrize("kind", sorted(VALID))
def test_single_bit_flip_in_checked_identity_is_caught(kind):
    # A flip in a checksummed identity byte must surface as a named problem.
    data = bytearray(VALID[kind])
    pos = 20 if kind.startswith("sff8472") else 150
    data[pos] ^= 0x01
    m = decode(bytes(data))
    assert any(p.startswith("bad checksum") for p in m.problems)


@FUZZ
@given(st.text(max_size=400))
def test_parse_hexdump_raises_only_its_own_error(text):
    with contextlib.suppress(HexDumpError):
        parse_hexdump(text)


@pytest.mark.parametrize("kind", sorted(VALID))
def test_hexdump_round_trip(kind):
    data = VALID[kind]
    assert parse_hexdump(format_hexdump(data)) == data


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("03 04 GZ\n", "line 1: 'GZ' is not a hex byte"),
        ("[page A0h]\n03\n[page lower]\n11\n", "mixes A0h/A2h pages"),
        ("[page 07h]\n00\n", "unknown page '07h'"),
        ("0010: 03\n", "offset 0010 does not follow"),
        ("# only a comment\n", "no bytes found"),
        ("[page lower]\n11\n[page 00h]\n11\n", "only the last page in a dump may be short"),
    ],
)
def test_hexdump_errors_name_the_problem(text, message):
    with pytest.raises(HexDumpError, match=message):
        parse_hexdump(text)


def test_command_clean_problem_and_unreadable(tmp_path):
    code, text = decode_command(DATA / "sff8472_internal.hex", as_json=False)
    assert code == 0
    assert "10GBASE-LR" in text and "no light" not in text
    bad = tmp_path / "bad.bin"
    bad.write_bytes(encode_sff8472(bad_checksum="CC_DMI"))
    code, text = decode_command(bad, as_json=True)
    doc = json.loads(text)
    assert code == 1
    assert doc["checksums"]["CC_DMI"]["ok"] is False
    for key in (
        "identifier", "form_factor", "pmd", "wavelength_nm", "rx_power_type", "calibration",
        "temperature_c", "supply_v", "lanes", "thresholds", "flags", "checksums", "problems",
    ):
        assert key in doc
    assert set(doc["thresholds"]) == {"rx_power", "tx_power", "bias", "temperature", "supply"}
    assert set(doc["lanes"][0]) >= {"lane", "rx_power_dbm", "tx_power_dbm", "bias_ma"}


@pytest.mark.parametrize(
    ("content", "message"),
    [
        (None, "no such file"),
        (b"", "file is empty"),
        (b"hello there\n", "not a memory map: line 1: 'hello' is not a hex byte"),
    ],
)
def test_command_unreadable_input(tmp_path, content, message):
    path = tmp_path / "optic.map"
    if content is not None:
        path.write_bytes(content)
    code, text = decode_command(path, as_json=False)
    assert code == 2
    assert str(path) in text and message in text
    assert "Traceback" not in text


def test_load_binary_and_text_agree(tmp_path):
    data = VALID["cmis"]
    (tmp_path / "a.bin").write_bytes(data)
    (tmp_path / "a.hex").write_text(format_hexdump(data))
    assert load(tmp_path / "a.bin") == load(tmp_path / "a.hex") == data

"""`lightwarden decode` exit codes: 0 clean, 1 decoded with problems, 2 unusable input."""

from __future__ import annotations

from pathlib import Path

from lightwarden.collector.eeprom.command import (
    EXIT_CLEAN,
    EXIT_PROBLEMS,
    EXIT_UNREADABLE,
    decode_command,
)
from lightwarden.fixtures.lab.encode import encode_sff8472


def _write(tmp_path: Path, data: bytes) -> Path:
    path = tmp_path / "map.bin"
    path.write_bytes(data)
    return path


def test_clean_map_exits_0(tmp_path):
    assert decode_command(_write(tmp_path, encode_sff8472()))[0] == EXIT_CLEAN


def test_bad_check_byte_exits_1(tmp_path):
    code, text = decode_command(_write(tmp_path, encode_sff8472(bad_checksum="CC_BASE")))
    assert code == EXIT_PROBLEMS and "CC_BASE" in text


def test_no_known_layout_exits_2(tmp_path):
    # identifier 0xEE is no SFF-8024 code any decoder takes: nothing here is a map
    code, _ = decode_command(_write(tmp_path, bytes([0xEE]) * 256))
    assert code == EXIT_UNREADABLE


def test_missing_file_exits_2(tmp_path):
    assert decode_command(tmp_path / "absent.bin")[0] == EXIT_UNREADABLE

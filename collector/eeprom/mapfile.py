"""Reading a memory map file: raw binary or our hex dump text, told apart by content."""

from __future__ import annotations

from pathlib import Path

from .hexdump import HexDumpError, parse_hexdump

#: Bytes a hex dump text may contain: tab, LF, CR and printable ASCII.
_TEXT_BYTES = bytes([9, 10, 13, *range(0x20, 0x7F)])


class MapFileError(Exception):
    """A map file could not be read; the message names the file and what is wrong."""


def looks_like_text(data: bytes) -> bool:
    # Every real map starts with an SFF-8024 identifier below 0x20, so a binary map
    # always holds a byte outside printable ASCII.
    return not data.translate(None, _TEXT_BYTES)


def load(path: str | Path) -> bytes:
    """Bytes of the map in ``path``; hex dump text is parsed. Raises MapFileError."""
    p = Path(path)
    try:
        data = p.read_bytes()
    except FileNotFoundError:
        raise MapFileError(f"{p}: no such file") from None
    except IsADirectoryError:
        raise MapFileError(f"{p}: is a directory, not a map file") from None
    except OSError as exc:
        raise MapFileError(f"{p}: cannot read ({exc.strerror or exc})") from None
    if not data:
        raise MapFileError(f"{p}: file is empty")
    if not looks_like_text(data):
        return data
    try:
        parsed = parse_hexdump(data.decode("ascii"))
    except HexDumpError as exc:
        raise MapFileError(f"{p}: not a memory map: {exc}") from None
    return parsed

"""Our hex dump text format for module memory maps (described in README.md).

    # comment
    [page A0h]
    0000: 03 04 07 00 ...
    03 04 07 ...          (the offset is optional)

Pages are assembled in the binary layout order; a file may stop after the last page it
holds, and pages missing between present ones become zeros.
"""

from __future__ import annotations

import re

#: Section name -> (layout family, position in that layout).
SFF8472_PAGES = ("a0h", "a2h")
PAGED_PAGES = ("lower", "00h", "01h", "02h", "03h", "10h", "11h")
_PAGE_SIZE = {"a0h": 256, "a2h": 256}  # every paged page is 128

_SECTION = re.compile(r"^\[\s*page\s+([0-9a-z]+)\s*\]$", re.IGNORECASE)
_OFFSET = re.compile(r"^([0-9a-fA-F]{1,6}):$")
_BYTE = re.compile(r"^[0-9a-fA-F]{2}$")


class HexDumpError(ValueError):
    """The text is not a hex dump in our format; the message names the line and why."""


def _page_size(name: str) -> int:
    return _PAGE_SIZE.get(name, 128)


def _display(name: str) -> str:
    return name.upper()[:-1] + "h" if name.startswith("a") else name


def parse_hexdump(text: str) -> bytes:
    """Parse our hex dump text into the binary layout. Raises HexDumpError."""
    sections: dict[str | None, bytearray] = {}
    order: list[str | None] = []
    current: str | None = None
    buf: bytearray | None = None
    for lineno, raw_line in enumerate(text.splitlines(), start=1):
        line = raw_line.split("#", 1)[0].strip()
        if not line:
            continue
        match = _SECTION.match(line)
        if match:
            name = match.group(1).lower()
            if name in ("a0", "a2") or re.fullmatch(r"[0-9a-f]{2}", name):
                name += "h"
            if name not in SFF8472_PAGES and name not in PAGED_PAGES:
                raise HexDumpError(
                    f"line {lineno}: unknown page '{match.group(1)}' (expected A0h, A2h, "
                    "lower, 00h, 01h, 02h, 03h, 10h or 11h)"
                )
            if name in sections:
                raise HexDumpError(f"line {lineno}: page {_display(name)} appears twice")
            if sections.get(None):
                raise HexDumpError(f"line {lineno}: bytes before the first [page] header")
            current = name
            buf = sections[name] = bytearray()
            order.append(name)
            continue
        if line.startswith("["):
            raise HexDumpError(f"line {lineno}: '{line}' is not a [page NAME] header")
        if buf is None:
            buf = sections[None] = bytearray()
            order.append(None)
        tokens = line.split()
        first = _OFFSET.match(tokens[0])
        if first:
            offset = int(first.group(1), 16)
            # Upper pages may be written with their 80h-FFh addresses.
            if current in PAGED_PAGES and current != "lower" and offset >= 0x80:
                offset -= 0x80
            if offset != len(buf):
                where = f"page {_display(current)}" if current else "the dump"
                raise HexDumpError(
                    f"line {lineno}: offset {first.group(1)} does not follow the previous "
                    f"data in {where} (next byte is at 0x{len(buf):02X})"
                )
            tokens = tokens[1:]
        for token in tokens:
            if not _BYTE.match(token):
                raise HexDumpError(f"line {lineno}: '{token}' is not a hex byte (two hex digits)")
        buf.extend(bytes.fromhex("".join(tokens)))
        if current is not None and len(buf) > _page_size(current):
            raise HexDumpError(
                f"line {lineno}: page {_display(current)} holds more than "
                f"{_page_size(current)} bytes"
            )
    if not order:
        raise HexDumpError("no bytes found")
    if order == [None]:
        return bytes(sections[None])
    return _assemble(sections)


def _assemble(sections: dict[str | None, bytearray]) -> bytes:
    names = [n for n in sections if n is not None]
    families = {n in SFF8472_PAGES for n in names}
    if len(families) > 1:
        raise HexDumpError("the dump mixes A0h/A2h pages with lower/00h.. pages")
    layout = SFF8472_PAGES if families == {True} else PAGED_PAGES
    last = max(layout.index(n) for n in names)
    out = bytearray()
    for name in layout[: last + 1]:
        size = _page_size(name)
        page = sections.get(name)
        if page is None:
            out.extend(bytes(size))  # a page the module lacks reads as zeros
            continue
        if len(page) < size and name != layout[last]:
            raise HexDumpError(
                f"page {_display(name)} holds {len(page)} of {size} bytes; only the last "
                "page in a dump may be short"
            )
        out.extend(page)
    return bytes(out)


def format_hexdump(data: bytes, *, layout: str | None = None, note: str = "") -> str:
    """Write bytes in our hex dump format, 16 bytes a line, one section per page.

    ``layout`` is "sff8472" or "paged"; by default it follows byte 0 (0x03 -> SFF-8472).
    """
    if layout is None:
        layout = "sff8472" if data[:1] == b"\x03" else "paged"
    names = SFF8472_PAGES if layout == "sff8472" else PAGED_PAGES
    lines = [f"# {line}" for line in note.splitlines()]
    pos = 0
    for name in names:
        size = _page_size(name)
        if pos >= len(data):
            break
        page = data[pos : pos + size]
        lines.append(f"[page {_display(name)}]")
        base = 0x80 if name in PAGED_PAGES and name != "lower" else 0
        for i in range(0, len(page), 16):
            chunk = page[i : i + 16]
            lines.append(f"{base + i:04X}: " + " ".join(f"{b:02X}" for b in chunk))
        pos += size
    return "\n".join(lines) + "\n"

"""Writes the hand-placed test vectors in this folder (run once; output is committed).

Bytes are placed by offset from standards.md, not by the project's encoder, so the
decoder tests that read these files check the decoder against the sheet. Run:
    .venv/bin/python tests/unit/collector/data/eeprom/build_vectors.py
"""

from __future__ import annotations

import struct
from pathlib import Path

from lightwarden.collector.eeprom.hexdump import format_hexdump

HERE = Path(__file__).parent


def cc(buf: bytearray, start: int, end: int) -> int:
    return sum(buf[start:end]) & 0xFF


def text(buf: bytearray, at: int, n: int, s: str) -> None:
    buf[at : at + n] = s.encode().ljust(n, b" ")


def u16(buf: bytearray, at: int, *values: int) -> None:
    struct.pack_into(f">{len(values)}H", buf, at, *values)


def sff8472(external: bool) -> bytes:
    a0, a2 = bytearray(256), bytearray(256)
    a0[0] = 0x03
    a0[3] = 0x20  # 10GBASE-LR
    a0[12] = 103  # 10.3 GBd
    a0[14], a0[15] = 10, 100
    text(a0, 20, 16, "QUILLMOOR LAB")
    text(a0, 40, 16, "HG-SFP-LR-01")
    text(a0, 56, 4, "A")
    u16(a0, 60, 1310)
    a0[63] = cc(a0, 0, 63)
    text(a0, 68, 16, "HGL0001")
    a0[92] = 0x40 | 0x08 | (0x10 if external else 0x20)
    a0[95] = cc(a0, 64, 95)
    u16(a2, 0, 0x4B00, 0xFB00, 0x4600, 0x0000)  # temperature 75 / -5 / 70 / 0 C
    u16(a2, 32, 0x1F40, 0x0001, 0x2710, 0x0C35)  # Rx power (worked decodes)
    if external:
        struct.pack_into(">5f", a2, 56, 0.0, 0.0, 1e-5, 0.9, 5.0)
        u16(a2, 76, 0x0200, 0x0000)  # Tx_I slope 2.0, offset 0
        u16(a2, 80, 0x0180, 0xFF38)  # Tx_PWR slope 1.5, offset -200
        u16(a2, 84, 0x0100, 0x0000)  # T slope 1.0
        u16(a2, 88, 0x0100, 0x0000)  # V slope 1.0
        u16(a2, 96, 0x1A80, 0x80E8, 5000, 3000, 4000)
    else:
        u16(a2, 96, 0x1A80, 0x80E8, 0x1770, 0x2710, 0x1F40)
    a2[95] = cc(a2, 0, 95)
    a2[110] = 0x02  # RX_LOS
    a2[113] = 0x40  # Rx power low alarm
    return bytes(a0 + a2)


def checksum_example() -> bytes:
    a0 = bytearray(256)
    a0[0:3] = b"\x03\x04\x07"
    a0[63] = 0x0E
    return bytes(a0)


def sff8636() -> bytes:
    m = bytearray(640)
    m[0] = 0x11
    m[3] = 0x02  # Rx LOS lane 2
    m[4] = 0x08  # Tx fault lane 4
    m[9] = 0x04  # lane 2 Rx power low alarm (bits 3-0 of byte 9: HA LA HW LW)
    u16(m, 22, 0xF600)  # -10.0 C
    u16(m, 26, 0x80E8)
    u16(m, 34, 0x1F40, 0x0000, 0x0001, 0xFFFF)
    u16(m, 42, 0x1770, 0x1770, 0x1770, 0x1770)
    u16(m, 50, 0x2710, 0x0C35, 0x2710, 0x2710)
    m[128] = 0x11
    m[131] = 0x80
    m[140] = 0xFF
    m[142] = 10
    text(m, 148, 16, "QUILLMOOR LAB")
    text(m, 168, 16, "HG-Q28-LR4-01")
    text(m, 184, 2, "B1")
    u16(m, 186, 1310 * 20)
    m[191] = cc(m, 128, 191)
    m[192] = 0x03  # 100GBASE-LR4
    text(m, 196, 16, "HGL0002")
    m[220] = 0x0C  # Rx power average, Tx power measured
    m[222] = 103
    m[223] = cc(m, 192, 223)
    p3 = 512 - 128
    u16(m, p3 + 128, 0x4B00, 0xFB00, 0x4600, 0x0000)
    u16(m, p3 + 176, 0x1F40, 0x0001, 0x2710, 0x0C35)
    u16(m, p3 + 184, 0x1770, 0x0000, 0x1388, 0x0000)  # bias 12 / - / 10 / - mA
    return bytes(m)


def cmis() -> bytes:
    m = bytearray(896)

    def at(page: int, offset: int) -> int:  # page index in our layout, 128-255 address
        return page * 128 + offset - 128

    m[0] = 0x18
    m[3] = 3 << 1  # ready
    m[9] = 0x01  # temperature high alarm
    u16(m, 14, 0xD800)  # -40.0 C
    u16(m, 16, 0x80E8)
    m[85], m[86], m[87], m[88] = 0x02, 0x00, 0x1C, 0x44  # SMF, 400GBASE-DR4, 4 lanes
    m[at(1, 128)] = 0x18
    text(m, at(1, 129), 16, "QUILLMOOR LAB")
    text(m, at(1, 148), 16, "HG-DD-DR4-01")
    text(m, at(1, 164), 2, "01")
    text(m, at(1, 166), 16, "HGL0003")
    m[at(1, 222)] = cc(m, at(1, 128), at(1, 222))
    m[at(2, 132)] = 5  # 5 x 0.1 km
    u16(m, at(2, 138), 1311 * 20)
    m[at(2, 151)] = 0x10
    m[at(2, 160)] = 0x0F  # bias, Tx, Rx monitors; bias multiplier x2
    m[at(2, 255)] = cc(m, at(2, 130), at(2, 255))
    u16(m, at(3, 176), 0xFFFF, 0x0001, 0x2710, 0x0C35)  # Tx power thresholds
    u16(m, at(3, 184), 0x1770, 0x0000, 0x1388, 0x0000)  # bias (x2): 24 / - / 20 / - mA
    u16(m, at(3, 192), 0x1F40, 0x0001, 0x2710, 0x0C35)
    m[at(3, 255)] = cc(m, at(3, 128), at(3, 255))
    u16(m, at(6, 154), 0x2710, 0x2710, 0x0C35, 0x2710, 0, 0, 0, 0)
    u16(m, at(6, 170), 0x1770, 0x1770, 0x1770, 0x1770, 0, 0, 0, 0)
    u16(m, at(6, 186), 0x1F40, 0x0000, 0x0C35, 0x0001, 0, 0, 0, 0)
    m[at(6, 147)] = 0x02  # Rx LOS lane 2
    m[at(6, 150)] = 0x02  # Rx power low alarm lane 2
    return bytes(m)


def main() -> None:
    files = {
        "sff8472_internal.hex": (sff8472(False), "SFF-8472 internal calibration; worked decodes"),
        "sff8472_external.hex": (sff8472(True), "SFF-8472 external calibration example"),
        "sff8472_checksum.hex": (checksum_example(), "03 04 07 + 60 x 00: CC_BASE 0x0E"),
        "sff8636_lr4.hex": (sff8636(), "SFF-8636 QSFP28 100GBASE-LR4"),
        "cmis_dr4.hex": (cmis(), "CMIS QSFP-DD 400GBASE-DR4"),
    }
    for name, (data, note) in files.items():
        body = format_hexdump(data, note=f"{note}\nbuilt by build_vectors.py")
        if name.startswith("sff8636"):
            # Leave pages 01h and 02h out: the reader must zero-fill them.
            body = _drop_pages(body, ("01h", "02h"))
        (HERE / name).write_text(body)


def _drop_pages(text: str, pages: tuple[str, ...]) -> str:
    out, skip = [], False
    for line in text.splitlines():
        if line.startswith("[page "):
            skip = line[6:-1] in pages
        if not skip:
            out.append(line)
    return "\n".join(out) + "\n"


if __name__ == "__main__":
    main()

"""Code tables from SFF-8024 and the compliance bytes, shared by decoder and encoder.

Each table says where its values come from. "verified" rows come from
standards.md or a public restatement of the standard; the rest are from memory.
"""

from __future__ import annotations

#: SFF-8024 identifier (byte 0). 0x00-0x11 and 0x18/0x19/0x1E: standards.md and a public
#: restatement of SFF-8024 (verified); 0x12-0x17 and 0x1A-0x1D from memory.
IDENTIFIERS: dict[int, str] = {
    0x00: "unknown or unspecified",
    0x01: "GBIC",
    0x02: "module soldered to motherboard",
    0x03: "SFP/SFP+/SFP28",
    0x04: "300 pin XBI",
    0x05: "XENPAK",
    0x06: "XFP",
    0x07: "XFF",
    0x08: "XFP-E",
    0x09: "XPAK",
    0x0A: "X2",
    0x0B: "DWDM-SFP/SFP+",
    0x0C: "QSFP",
    0x0D: "QSFP+",
    0x0E: "CXP",
    0x0F: "Shielded Mini Multilane HD 4X",
    0x10: "Shielded Mini Multilane HD 8X",
    0x11: "QSFP28",
    0x12: "CXP2",
    0x13: "CDFP (style 1/2)",
    0x14: "Shielded Mini Multilane HD 4X fanout",
    0x15: "Shielded Mini Multilane HD 8X fanout",
    0x16: "CDFP (style 3)",
    0x17: "microQSFP",
    0x18: "QSFP-DD",
    0x19: "OSFP",
    0x1A: "SFP-DD",
    0x1B: "DSFP",
    0x1C: "x4 MiniLink/OcuLink",
    0x1D: "x8 MiniLink",
    0x1E: "QSFP+/QSFP28 with CMIS",
}

SFF8472_IDS = frozenset({0x03})
SFF8636_IDS = frozenset({0x0C, 0x0D, 0x11})
CMIS_IDS = frozenset({0x18, 0x19, 0x1E})

#: Form factor names we report for the paged layouts (SFP is refined by rate).
FORM_FACTORS: dict[int, str] = {
    0x0C: "QSFP",
    0x0D: "QSFP+",
    0x11: "QSFP28",
    0x18: "QSFP-DD",
    0x19: "OSFP",
    0x1E: "QSFP",
}

#: SFF-8472 A0h byte 3 (10G Ethernet), bit -> PMD. source: standards.md (verified).
SFF8472_BYTE3: tuple[tuple[int, str], ...] = (
    (7, "10GBASE-ER"),
    (6, "10GBASE-LRM"),
    (5, "10GBASE-LR"),
    (4, "10GBASE-SR"),
)
#: SFF-8472 A0h byte 6 (Ethernet), bit -> PMD. source: standards.md (verified);
#: the 1000BASE-BX10 / 1000BASE-PX / 100BASE-LX10 spellings are ours (from memory).
SFF8472_BYTE6: tuple[tuple[int, str], ...] = (
    (1, "1000BASE-LX"),
    (0, "1000BASE-SX"),
    (6, "1000BASE-BX10"),
    (7, "1000BASE-PX"),
    (4, "100BASE-LX10"),
    (5, "100BASE-FX"),
    (3, "1000BASE-T"),
    (2, "1000BASE-CX"),
)
#: SFF-8636 byte 131, bit -> PMD. source: standards.md (b5, b4, b2, b1 verified);
#: b6 and b3 from a public restatement of SFF-8636 rev 2.7 (verified).
SFF8636_BYTE131: tuple[tuple[int, str], ...] = (
    (5, "10GBASE-LR"),
    (4, "10GBASE-SR"),
    (6, "10GBASE-LRM"),
    (2, "40GBASE-SR4"),
    (1, "40GBASE-LR4"),
    (3, "40GBASE-CR4"),
)
SFF8636_EXTENDED_BIT = 7

#: SFF-8024 extended compliance (SFF-8472 byte 36, SFF-8636 byte 192):
#: code -> (name for a 4-lane module, name for a 1-lane module).
#: 0x02-0x04: standards.md (verified). 0x05-0x07, 0x10-0x12, 0x17: public restatement of
#: SFF-8636 rev 2.7 (verified). 0x25-0x27: from memory.
EXTENDED_COMPLIANCE: dict[int, tuple[str, str]] = {
    0x02: ("100GBASE-SR4", "25GBASE-SR"),
    0x03: ("100GBASE-LR4", "25GBASE-LR"),
    0x04: ("100GBASE-ER4", "25GBASE-ER"),
    0x05: ("100GBASE-SR10", "100GBASE-SR10"),
    0x06: ("100G CWDM4", "100G CWDM4"),
    0x07: ("100G PSM4", "100G PSM4"),
    0x10: ("40GBASE-ER4", "40GBASE-ER4"),
    0x11: ("4x10GBASE-SR", "4x10GBASE-SR"),
    0x12: ("40G PSM4", "40G PSM4"),
    0x17: ("100G CLR4", "100G CLR4"),
    0x25: ("100GBASE-DR", "100GBASE-DR"),
    0x26: ("100GBASE-FR1", "100GBASE-FR1"),
    0x27: ("100GBASE-LR1", "100GBASE-LR1"),
}

#: CMIS module media type (lower page byte 85). 1/2 verified (public restatement);
#: 3-5 from memory.
CMIS_MEDIA_TYPES: dict[int, str] = {
    0x01: "mmf",
    0x02: "smf",
    0x03: "passive_copper",
    0x04: "active_cable",
    0x05: "base_t",
}

#: SFF-8024 media interface codes used in CMIS application descriptors.
#: SMF 0x17 (200GBASE-DR4) and 0x1C (400GBASE-DR4) verified against a public
#: restatement; every other entry is from memory.
CMIS_SMF_MEDIA: dict[int, str] = {
    0x01: "10GBASE-LW",
    0x02: "10GBASE-EW",
    0x04: "10GBASE-LR",
    0x05: "10GBASE-ER",
    0x07: "25GBASE-LR",
    0x08: "25GBASE-ER",
    0x09: "40GBASE-LR4",
    0x0A: "40GBASE-FR",
    0x0B: "50GBASE-FR",
    0x0C: "50GBASE-LR",
    0x0D: "100GBASE-LR4",
    0x0E: "100GBASE-ER4",
    0x14: "100GBASE-DR",
    0x15: "100GBASE-FR1",
    0x16: "100GBASE-LR1",
    0x17: "200GBASE-DR4",
    0x18: "200GBASE-FR4",
    0x19: "200GBASE-LR4",
    0x1A: "400GBASE-FR8",
    0x1B: "400GBASE-LR8",
    0x1C: "400GBASE-DR4",
    0x1D: "400GBASE-FR4",
}
#: MMF media interface codes, all from memory.
CMIS_MMF_MEDIA: dict[int, str] = {
    0x01: "10GBASE-SW",
    0x02: "10GBASE-SR",
    0x03: "25GBASE-SR",
    0x04: "40GBASE-SR4",
    0x07: "50GBASE-SR",
    0x08: "100GBASE-SR10",
    0x09: "100GBASE-SR4",
    0x0C: "100GBASE-SR2",
    0x0E: "200GBASE-SR4",
    0x0F: "400GBASE-SR16",
    0x10: "400GBASE-SR8",
    0x11: "400GBASE-SR4",
}

#: CMIS module state, lower page byte 3 bits 3-1. source: standards.md (verified).
CMIS_MODULE_STATES: dict[int, str] = {
    1: "low_power",
    2: "power_up",
    3: "ready",
    4: "power_down",
    5: "fault",
}


def identifier_name(code: int) -> str:
    return IDENTIFIERS.get(code, f"unknown (0x{code:02X})")

"""The consistency findings the lab's stories must give (fixtures/lab/lab.yaml), and no more.

(A end, port, B end, B port, kind, severity). Kinds and severities are ours
(rules/consistency.py); what they rest on: 1471 and 1491 nm are adjacent ITU-T G.694.2
channels; 1310/1570 nm is none of the common BiDi pairs (practice); a 10GBASE-LR pair is
single-mode (IEEE 802.3 cl.52) on a span recorded as OM4; a 10GBASE-ER part faces a
10GBASE-LR one. The matched BiDi pair (sfp38) and LX over OM4 with mode-conditioning
cords (sfp42) give none. The record_swapped story's two records are contradicted by the
ports' LLDP neighbours.
"""

LAB_FINDINGS = {
    ("qm-core-b", "sfp15", "qm-dist-b", "sfp15", "pmd-mismatch", "warning"),
    ("qm-core-a", "sfp37", "qm-core-b", "sfp37", "bidi-not-complementary", "warning"),
    ("qm-core-a", "sfp39", "qm-core-b", "sfp39", "cwdm-channel-mismatch", "critical"),
    ("qm-dist-a", "sfp41", "qm-dist-b", "sfp41", "fibre-type-mismatch", "warning"),
    # record_swapped: patched straight, recorded crossed; LLDP (IEEE 802.1AB) on the SNMP
    # devices sees the real far ends, so both crossed records are contradicted
    ("qm-core-a", "sfp10", "qm-dist-a", "sfp11", "patching-differs", "warning"),
    ("qm-core-a", "sfp11", "qm-dist-a", "sfp10", "patching-differs", "warning"),
}

#: The labels each finding's alert carries, pushed or from the generated rule.
LINK_LABELS = ("device", "port", "far_device", "far_port", "kind", "severity")


def label_tuple(labels: dict[str, str]) -> tuple[str, ...]:
    return tuple(labels.get(k, "") for k in LINK_LABELS)

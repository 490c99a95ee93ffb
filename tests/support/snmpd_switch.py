"""A large static dataset for net-snmp snmpd: a fictional Quillmoor 48-port switch.

Every port holds a QSFP28 100GBASE-LR4 with 14 sensors (Rx/Tx power and bias per lane,
temperature, supply), laid out per the SNMP mapping contract (chassis -> port ->
transceiver -> sensors, entAliasMapping to ifIndex). Entity indexes run past 127 and
16383 so OIDs carry multi-byte sub-identifiers. Values are seeded, so every run and both
poll paths see the same numbers.
"""

from __future__ import annotations

import random

_ENT = "1.3.6.1.2.1.47.1.1.1.1"
_SENSOR = "1.3.6.1.2.1.99.1.1.1"

# (name phrase, RFC 3433 type, scale, precision, units display, value range)
_KINDS = (
    ("Rx Power", 1, 9, 2, "dBm", (-1600, 300)),  # other(1) + "dBm", dBm x 100
    ("Tx Power", 1, 9, 2, "dBm", (-500, 400)),
    ("Bias", 5, 7, 0, "", (20000, 70000)),  # amperes(5), micro(7): uA
)


def switch_dataset(ports: int = 48, seed: int = 12) -> str:
    """snmpd ``override`` lines for ``ports`` ports (IF-MIB, ENTITY-MIB, ENTITY-SENSOR-MIB)."""
    rng = random.Random(seed)
    lines = [f"override {_ENT}.2.1 octet_str \"Quillmoor lab switch\"",
             f"override {_ENT}.4.1 integer 0", f"override {_ENT}.5.1 integer 3",
             f"override {_ENT}.7.1 octet_str \"chassis\"",
             "override 1.3.6.1.2.1.47.1.4.1.0 timeticks 4200"]  # fmt: skip
    for p in range(1, ports + 1):
        name = f"qsfp{p}"
        port_ent, module_ent = 100 + p, 20000 + p
        lines += [
            f"override 1.3.6.1.2.1.2.2.1.2.{p} octet_str \"Quillmoor port {p}\"",
            f"override 1.3.6.1.2.1.2.2.1.7.{p} integer 1",
            f"override 1.3.6.1.2.1.2.2.1.8.{p} integer {1 if p % 7 else 2}",
            f"override 1.3.6.1.2.1.31.1.1.1.1.{p} octet_str \"{name}\"",
            f"override 1.3.6.1.2.1.31.1.1.1.18.{p} octet_str \"to qm-peer-{p:02d}\"",
            f"override 1.3.6.1.2.1.47.1.3.2.1.2.{port_ent}.0 object_id .1.3.6.1.2.1.2.2.1.1.{p}",
        ]
        entities = [(port_ent, 1, 10, "port", name, ""),
                    (module_ent, port_ent, 9, "QSFP28 100GBASE-LR4", f"{name} transceiver",
                     f"QMW100LR4{p:04d}")]  # fmt: skip
        sensors = []
        for k, (phrase, kind, scale, precision, units, (low, high)) in enumerate(
            [(ph, t, s, pr, u, r) for ph, t, s, pr, u, r in _KINDS for _ in range(4)]
        ):
            lane = k % 4 + 1
            sensors.append((f"{name} {phrase} Lane {lane}", kind, scale, precision, units,
                            rng.randint(low, high)))  # fmt: skip
        sensors.append((f"{name} Temperature", 8, 9, 1, "", rng.randint(250, 650)))
        sensors.append((f"{name} Supply Voltage", 4, 8, 0, "", rng.randint(3200, 3400)))
        for s, (label, kind, scale, precision, units, value) in enumerate(sensors):
            ent = 40000 + p * 20 + s
            entities.append((ent, module_ent, 8, "sensor", label, ""))
            lines += [
                f"override {_SENSOR}.1.{ent} integer {kind}",
                f"override {_SENSOR}.2.{ent} integer {scale}",
                f"override {_SENSOR}.3.{ent} integer {precision}",
                f"override {_SENSOR}.4.{ent} integer {value}",
                f"override {_SENSOR}.5.{ent} integer 1",
                f"override {_SENSOR}.6.{ent} octet_str \"{units}\"",
            ]
        for ent, parent, cls, descr, label, serial in entities:
            lines += [
                f"override {_ENT}.2.{ent} octet_str \"{descr}\"",
                f"override {_ENT}.4.{ent} integer {parent}",
                f"override {_ENT}.5.{ent} integer {cls}",
                f"override {_ENT}.7.{ent} octet_str \"{label}\"",
                f"override {_ENT}.11.{ent} octet_str \"{serial}\"",
                f"override {_ENT}.13.{ent} octet_str \"{'QMW-Q28-LR4' if cls == 9 else ''}\"",
            ]
    return "\n".join(lines) + "\n"

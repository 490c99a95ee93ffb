"""Who is at the other end of each port, from the IEEE 802.1AB LLDP-MIB.

lldpRemTable is indexed by (lldpRemTimeMark, lldpRemLocalPortNum, lldpRemIndex); the
local port number is the agent's own, mapped to a port through lldpLocPortTable (its
port id, or description), never assumed to be the ifIndex. A port id of subtype
interfaceName(5) or local(7) is the port's name; for other subtypes (a MAC address,
say) the port description is the better name.
"""

from __future__ import annotations

from collections.abc import Mapping

Oid = tuple[int, ...]

_LOC = "1.0.8802.1.1.2.1.3.7.1"  # lldpLocPortEntry
_REM = "1.0.8802.1.1.2.1.4.1.1"  # lldpRemEntry
LOC_PORT_ID_SUBTYPE, LOC_PORT_ID, LOC_PORT_DESC = (f"{_LOC}.2", f"{_LOC}.3", f"{_LOC}.4")
REM_PORT_ID_SUBTYPE, REM_PORT_ID, REM_PORT_DESC, REM_SYS_NAME = (
    f"{_REM}.6", f"{_REM}.7", f"{_REM}.8", f"{_REM}.9")
LOC_COLUMNS = (LOC_PORT_ID_SUBTYPE, LOC_PORT_ID, LOC_PORT_DESC)
REM_COLUMNS = (REM_PORT_ID_SUBTYPE, REM_PORT_ID, REM_PORT_DESC, REM_SYS_NAME)

_NAME_SUBTYPES = (5, 7)  # interfaceName, local


def _text(v: object) -> str:
    if isinstance(v, bytes):
        return v.decode("utf-8", "replace").strip()
    return v.strip() if isinstance(v, str) else ""


def _port_name(subtype: object, port_id: object, descr: object) -> str:
    name = _text(port_id) if subtype in _NAME_SUBTYPES else ""
    return name or _text(descr) or _text(port_id)


def neighbours(loc: Mapping[str, Mapping[Oid, object]],
               rem: Mapping[str, Mapping[Oid, object]],
               port_names: set[str]) -> dict[str, tuple[str, str]]:
    """{our port name: (remote system name, remote port name)} for every neighbour seen.

    A local port whose LLDP name is not one of ``port_names`` (the ifNames) is matched by
    its description, else left out; a port with several neighbours keeps the first.
    """
    local: dict[int, str] = {}
    folded = {p.casefold(): p for p in port_names}
    for idx, port_id in loc.get(LOC_PORT_ID, {}).items():
        if len(idx) != 1:
            continue
        sub = loc.get(LOC_PORT_ID_SUBTYPE, {}).get(idx)
        descr = loc.get(LOC_PORT_DESC, {}).get(idx)
        for candidate in (_port_name(sub, port_id, descr), _text(descr), _text(port_id)):
            found = folded.get(candidate.casefold())
            if found is not None:
                local[idx[0]] = found
                break
    out: dict[str, tuple[str, str]] = {}
    for idx, sys_name in sorted(rem.get(REM_SYS_NAME, {}).items()):
        if len(idx) != 3 or idx[1] not in local:
            continue
        port = local[idx[1]]
        far_port = _port_name(rem.get(REM_PORT_ID_SUBTYPE, {}).get(idx),
                              rem.get(REM_PORT_ID, {}).get(idx),
                              rem.get(REM_PORT_DESC, {}).get(idx))
        name = _text(sys_name)
        if name and far_port and port not in out:
            out[port] = (name, far_port)
    return out

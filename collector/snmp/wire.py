"""SNMPv2c messages on the wire: BER encoding of GET/GETBULK requests, decoding of responses.

The steady poll's hot path. pysnmp decodes every value through pyasn1 (a CHOICE inside a
CHOICE per value); here a response is walked once, TLV by TLV, and its varbinds land in
three parallel columns: the OID's BER content octets (kept as bytes), the value's BER tag,
and the value as plain Python. Only the subset of BER that SNMP uses is accepted
(RFC 3416 PDUs inside the RFC 1901 v2c message, definite lengths, X.690 section 8 encodings);
anything else raises :class:`WireError` naming the byte offset and what was expected.

Why OIDs stay bytes: with the canonical encoding X.690 section 8.19.2 requires (no
leading 0x80 in a sub-identifier, which the decoder refuses), a byte prefix of an OID's
content octets that ends on a sub-identifier boundary (a byte below 0x80) is an OID prefix,
so a walk can test "still inside this column" without building tuples, and send the last
OID back as it came. Byte order is *not* OID order once a sub-identifier needs two or
more bytes (256 is 82 00, 16384 is 81 80 00), so order is compared on decoded indexes.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass

# Universal and SNMP application tags (X.690; RFC 2578 section 7.1; RFC 3416 section 3).
INTEGER = 0x02
OCTET_STRING = 0x04
NULL = 0x05
OBJECT_IDENTIFIER = 0x06
SEQUENCE = 0x30
IP_ADDRESS = 0x40
COUNTER32 = 0x41
GAUGE32 = 0x42
TIMETICKS = 0x43
OPAQUE = 0x44
COUNTER64 = 0x46
NO_SUCH_OBJECT = 0x80
NO_SUCH_INSTANCE = 0x81
END_OF_MIB_VIEW = 0x82

GET_REQUEST = 0xA0
GET_NEXT_REQUEST = 0xA1
RESPONSE = 0xA2
GET_BULK_REQUEST = 0xA5
REPORT = 0xA8

VERSION_2C = 1  # RFC 1901: version field 1 means SNMPv2c

# RFC 2578 section 7.1: the unsigned application types and their upper bounds (exclusive).
_UNSIGNED_TAGS = {COUNTER32: 2**32, GAUGE32: 2**32, TIMETICKS: 2**32, COUNTER64: 2**64}
_EMPTY_TAGS = frozenset((NULL, NO_SUCH_OBJECT, NO_SUCH_INSTANCE, END_OF_MIB_VIEW))

#: RFC 3416 error-status names, for messages.
ERROR_STATUS = (
    "noError", "tooBig", "noSuchName", "badValue", "readOnly", "genErr", "noAccess",
    "wrongType", "wrongLength", "wrongEncoding", "wrongValue", "noCreation",
    "inconsistentValue", "resourceUnavailable", "commitFailed", "undoFailed",
    "authorizationError", "notWritable", "inconsistentName",
)  # fmt: skip


class WireError(ValueError):
    """A datagram that is not a well-formed SNMPv2c message; says where and why."""


# --- OIDs ------------------------------------------------------------------------------


def oid_bytes(oid: str | Sequence[int]) -> bytes:
    """BER content octets of an OID given as dotted text or a tuple of arcs."""
    arcs = [int(p) for p in oid.strip(".").split(".")] if isinstance(oid, str) else list(oid)
    if len(arcs) < 2 or arcs[0] > 2 or (arcs[0] < 2 and arcs[1] > 39) or min(arcs) < 0:
        raise ValueError(f"not an encodable OID: {oid!r}")
    out = bytearray()
    for arc in [40 * arcs[0] + arcs[1], *arcs[2:]]:
        if arc < 0x80:
            out.append(arc)
            continue
        chunk = [arc & 0x7F]
        arc >>= 7
        while arc:
            chunk.append(0x80 | (arc & 0x7F))
            arc >>= 7
        out.extend(reversed(chunk))
    return bytes(out)


def oid_arcs(content: bytes) -> tuple[int, ...]:
    """Arcs of BER OID content octets (the inverse of :func:`oid_bytes`)."""
    arcs = sub_ids(content)
    if not arcs:
        raise WireError("empty OBJECT IDENTIFIER")
    first = arcs[0]
    head = (0, first) if first < 40 else (1, first - 40) if first < 80 else (2, first - 80)
    return (*head, *arcs[1:])


def sub_ids(content: bytes) -> tuple[int, ...]:
    """Sub-identifiers of OID content octets without splitting the first two arcs.

    Used for table index suffixes, which start on a sub-identifier boundary.
    """
    if content and content[-1] < 0x80 and max(content) < 0x80:
        return tuple(content)  # the common case: every sub-identifier is one byte
    out: list[int] = []
    value = 0
    fresh = True
    for byte in content:
        if fresh and byte == 0x80:
            raise WireError("OBJECT IDENTIFIER sub-identifier with a leading 0x80 byte")
        value = (value << 7) | (byte & 0x7F)
        fresh = not byte & 0x80
        if fresh:
            out.append(value)
            value = 0
    if not fresh:
        raise WireError("OBJECT IDENTIFIER ends inside a sub-identifier")
    return tuple(out)


def oid_text(content: bytes) -> str:
    return ".".join(map(str, oid_arcs(content)))


# --- encoding --------------------------------------------------------------------------


def _length(n: int) -> bytes:
    if n < 0x80:
        return bytes((n,))
    body = n.to_bytes((n.bit_length() + 7) // 8, "big")
    return bytes((0x80 | len(body),)) + body


def tlv(tag: int, content: bytes) -> bytes:
    return bytes((tag,)) + _length(len(content)) + content


def integer(value: int, tag: int = INTEGER) -> bytes:
    """Minimal two's-complement INTEGER (X.690 section 8.3)."""
    size = (value + (value < 0)).bit_length() // 8 + 1
    return tlv(tag, value.to_bytes(size, "big", signed=True))


_NULL_VALUE = b"\x05\x00"


def varbind_list(oids: Iterable[bytes]) -> bytes:
    """The VarBindList of a read request: each OID paired with NULL."""
    return tlv(SEQUENCE, b"".join(tlv(SEQUENCE, tlv(OBJECT_IDENTIFIER, o) + _NULL_VALUE)
                                  for o in oids))  # fmt: skip


@dataclass(slots=True, frozen=True)
class RequestTemplate:
    """A device's message header, built once; each request adds an id and its varbinds."""

    head: bytes  # version and community TLVs

    @classmethod
    def v2c(cls, community: str | bytes) -> RequestTemplate:
        raw = community.encode() if isinstance(community, str) else community
        return cls(integer(VERSION_2C) + tlv(OCTET_STRING, raw))

    def get(self, request_id: int, varbinds: bytes) -> bytes:
        """A GetRequest; ``varbinds`` from :func:`varbind_list` (prebuilt per poll)."""
        pdu = integer(request_id) + b"\x02\x01\x00\x02\x01\x00" + varbinds
        return tlv(SEQUENCE, self.head + tlv(GET_REQUEST, pdu))

    def get_bulk(
        self, request_id: int, varbinds: bytes, max_repetitions: int, non_repeaters: int = 0
    ) -> bytes:
        pdu = integer(request_id) + integer(non_repeaters) + integer(max_repetitions) + varbinds
        return tlv(SEQUENCE, self.head + tlv(GET_BULK_REQUEST, pdu))


# --- decoding --------------------------------------------------------------------------


@dataclass(slots=True)
class Response:
    """A decoded Response-PDU: its header and its varbinds as three parallel columns."""

    request_id: int
    error_status: int
    error_index: int
    oids: list[bytes]  # BER content octets of each varbind's name
    tags: list[int]  # BER tag of each value (INTEGER, OCTET_STRING, END_OF_MIB_VIEW, ...)
    values: list[object]  # int, bytes, OID content bytes (tag OBJECT_IDENTIFIER), or None
    community: bytes = b""

    @property
    def error_name(self) -> str:
        s = self.error_status
        return ERROR_STATUS[s] if 0 <= s < len(ERROR_STATUS) else f"error-status {s}"


def _header(
    data: bytes, pos: int, end: int, what: str, whole: bool = True
) -> tuple[int, int, int]:
    """(tag, content start, content end) of the TLV at ``pos``, checked against ``end``.

    ``whole=False`` lets the content run past ``end`` (a truncated datagram's outer TLVs).
    """
    if pos + 2 > end:
        raise WireError(f"truncated at byte {pos}: {what} missing")
    tag = data[pos]
    n = data[pos + 1]
    pos += 2
    if n & 0x80:
        count = n & 0x7F
        if count == 0:
            raise WireError(f"indefinite length at byte {pos - 1} ({what}); SNMP forbids it")
        if count > 4 or pos + count > end:
            raise WireError(f"bad length field at byte {pos - 1} ({what})")
        n = int.from_bytes(data[pos : pos + count], "big")
        pos += count
    if pos + n > end:
        if whole:
            raise WireError(
                f"truncated at byte {pos}: {what} claims {n} bytes, {end - pos} left")
        return tag, pos, end
    return tag, pos, pos + n


def _expect(data: bytes, pos: int, end: int, tag: int, what: str) -> tuple[int, int]:
    got, start, stop = _header(data, pos, end, what)
    if got != tag:
        raise WireError(f"byte {pos}: expected {what} (tag 0x{tag:02x}), found tag 0x{got:02x}")
    return start, stop


def _int_at(data: bytes, pos: int, end: int, what: str) -> tuple[int, int]:
    start, stop = _expect(data, pos, end, INTEGER, what)
    if start == stop:
        raise WireError(f"byte {pos}: empty INTEGER ({what})")
    return int.from_bytes(data[start:stop], "big", signed=True), stop


def peek_request_id(data: bytes) -> int:
    """The request-id of a v2c message, reading no further than needed (for dispatch).

    Tolerates a message cut short after its request-id, so that the request it answers
    gets a clear decoding error instead of a timeout.
    """
    size = len(data)
    tag, start, _ = _header(data, 0, size, "message SEQUENCE", whole=False)
    if tag != SEQUENCE:
        raise WireError("not an SNMP message")
    _, pos = _int_at(data, start, size, "version")
    _, _, pos = _header(data, pos, size, "community")
    _, pdu_start, _ = _header(data, pos, size, "PDU", whole=False)
    request_id, _ = _int_at(data, pdu_start, size, "request-id")
    return request_id


def decode_response(data: bytes) -> Response:
    """Decode one SNMPv2c Response-PDU datagram; raises :class:`WireError` if malformed."""
    size = len(data)
    start, end = _expect(data, 0, size, SEQUENCE, "message SEQUENCE")
    if end != size:
        raise WireError(f"{size - end} bytes after the end of the message")
    version, pos = _int_at(data, start, end, "version")
    if version != VERSION_2C:
        raise WireError(f"message version {version}, expected {VERSION_2C} (SNMPv2c)")
    c_start, pos = _expect(data, pos, end, OCTET_STRING, "community")
    community = data[c_start:pos]
    pdu_tag, pos, pdu_end = _header(data, pos, end, "PDU")
    if pdu_tag != RESPONSE:
        raise WireError(f"PDU tag 0x{pdu_tag:02x}, expected a Response-PDU (0xa2)")
    if pdu_end != end:
        raise WireError("bytes after the PDU inside the message")
    request_id, pos = _int_at(data, pos, pdu_end, "request-id")
    error_status, pos = _int_at(data, pos, pdu_end, "error-status")
    error_index, pos = _int_at(data, pos, pdu_end, "error-index")
    # RFC 3416 section 3: request-id is Integer32, error-status 0..18, error-index
    # 0..max-bindings; a value outside is a broken or foreign datagram.
    if not -0x80000000 <= request_id <= 0x7FFFFFFF:
        raise WireError(f"request-id {request_id} outside Integer32")
    if not 0 <= error_status < len(ERROR_STATUS):
        raise WireError(f"error-status {error_status} is not defined by RFC 3416")
    if not 0 <= error_index <= 0x7FFFFFFF:
        raise WireError(f"error-index {error_index} out of range")
    pos, vbl_end = _expect(data, pos, pdu_end, SEQUENCE, "varbind list")
    if vbl_end != pdu_end:
        raise WireError("bytes after the varbind list inside the PDU")
    oids: list[bytes] = []
    tags: list[int] = []
    values: list[object] = []
    while pos < vbl_end:
        # Inlined TLV walk: this loop runs once per varbind and dominates a poll's CPU.
        if data[pos] != SEQUENCE:
            raise WireError(f"byte {pos}: expected a varbind SEQUENCE, found 0x{data[pos]:02x}")
        vb_start, vb_end = _expect(data, pos, vbl_end, SEQUENCE, "varbind")
        o_start, o_end = _expect(data, vb_start, vb_end, OBJECT_IDENTIFIER, "varbind name")
        if o_start == o_end or data[o_end - 1] & 0x80:
            raise WireError(f"byte {vb_start}: varbind name is not a complete OID")
        name = data[o_start:o_end]
        if 0x80 in name:
            sub_ids(name)  # refuses a non-minimal sub-identifier (X.690 8.19.2)
        tag, v_start, v_end = _header(data, o_end, vb_end, "varbind value")
        if v_end != vb_end:
            raise WireError(f"byte {v_end}: bytes after the value inside a varbind")
        if tag == INTEGER:
            if v_start == v_end:
                raise WireError(f"byte {o_end}: empty INTEGER value")
            number = int.from_bytes(data[v_start:v_end], "big", signed=True)
            if not -0x80000000 <= number <= 0x7FFFFFFF:
                raise WireError(f"byte {o_end}: INTEGER value outside Integer32")
            value: object = number
        elif tag in _UNSIGNED_TAGS:
            if v_start == v_end:
                raise WireError(f"byte {o_end}: empty INTEGER value")
            number = int.from_bytes(data[v_start:v_end], "big", signed=True)
            if not 0 <= number < _UNSIGNED_TAGS[tag]:
                raise WireError(f"byte {o_end}: value out of range for tag 0x{tag:02x}")
            value = number
        elif tag in (OCTET_STRING, OPAQUE):
            value = data[v_start:v_end]
        elif tag == IP_ADDRESS:
            value = data[v_start:v_end]
            if v_end - v_start != 4:
                raise WireError(f"byte {o_end}: IpAddress of {v_end - v_start} bytes, not 4")
        elif tag in _EMPTY_TAGS:
            if v_start != v_end:
                raise WireError(f"byte {o_end}: tag 0x{tag:02x} must have no content")
            value = None
        elif tag == OBJECT_IDENTIFIER:
            value = data[v_start:v_end]
            if not value or data[v_end - 1] & 0x80:
                raise WireError(f"byte {o_end}: OBJECT IDENTIFIER value is not complete")
            if 0x80 in value:
                sub_ids(value)
        else:
            raise WireError(f"byte {o_end}: value tag 0x{tag:02x} is not an SNMP type")
        oids.append(name)
        tags.append(tag)
        values.append(value)
        pos = vb_end
    return Response(request_id, error_status, error_index, oids, tags, values, community)

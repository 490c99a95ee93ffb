"""Our SNMPv2c BER codec (collector/snmp/wire.py) against pyasn1/pysnmp as the reference.

Reference: pyasn1's BER encoder/decoder with pysnmp's RFC 1905/3416 message and PDU
definitions (a general-purpose library, independent of our code). Encodings follow
ITU-T X.690 (BER) sections 8.1 (TLV, definite lengths), 8.3 (INTEGER, minimal two's
complement) and 8.19 (OBJECT IDENTIFIER, first two arcs as 40*X+Y, base-128 sub-ids).
"""

from __future__ import annotations

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from pyasn1.codec.ber import decoder, encoder
from pyasn1.type import univ
from pysnmp.proto import api, rfc1905

from lightwarden.collector.snmp import wire

V2C = api.PROTOCOL_MODULES[api.SNMP_VERSION_2C]

sub_id = st.integers(0, 2**32 - 1)  # RFC 2578 section 3.5: sub-identifiers are 32-bit
arcs = st.one_of(
    st.tuples(st.integers(0, 1), st.integers(0, 39)),
    st.tuples(st.just(2), st.integers(0, 2000)),
).flatmap(lambda head: st.lists(sub_id, max_size=12).map(lambda rest: (*head, *rest)))

# (pysnmp value, our tag, our plain value)
values = st.one_of(
    st.integers(-(2**31), 2**31 - 1).map(lambda v: (V2C.Integer(v), wire.INTEGER, v)),
    st.binary(max_size=300).map(lambda b: (V2C.OctetString(b), wire.OCTET_STRING, b)),
    arcs.map(lambda a: (V2C.ObjectIdentifier(a), wire.OBJECT_IDENTIFIER, wire.oid_bytes(a))),
    st.binary(min_size=4, max_size=4).map(lambda b: (V2C.IpAddress(b), wire.IP_ADDRESS, b)),
    st.integers(0, 2**32 - 1).map(lambda v: (V2C.Counter32(v), wire.COUNTER32, v)),
    st.integers(0, 2**32 - 1).map(lambda v: (V2C.Gauge32(v), wire.GAUGE32, v)),
    st.integers(0, 2**32 - 1).map(lambda v: (V2C.TimeTicks(v), wire.TIMETICKS, v)),
    st.integers(0, 2**64 - 1).map(lambda v: (V2C.Counter64(v), wire.COUNTER64, v)),
    st.just((V2C.Null(""), wire.NULL, None)),
    st.just((rfc1905.noSuchObject, wire.NO_SUCH_OBJECT, None)),
    st.just((rfc1905.noSuchInstance, wire.NO_SUCH_INSTANCE, None)),
    st.just((rfc1905.endOfMibView, wire.END_OF_MIB_VIEW, None)),
)
varbinds = st.lists(st.tuples(arcs, values), max_size=40)


def reference_response(community: bytes, request_id: int, status: int, index: int,
                       binds: list) -> bytes:  # fmt: skip
    pdu = V2C.ResponsePDU()
    V2C.apiPDU.set_defaults(pdu)
    V2C.apiPDU.set_request_id(pdu, request_id)
    V2C.apiPDU.set_error_status(pdu, status)
    V2C.apiPDU.set_error_index(pdu, index)
    V2C.apiPDU.set_varbinds(pdu, [(oid, value) for oid, (value, _, _) in binds])
    message = V2C.Message()
    V2C.apiMessage.set_defaults(message)
    V2C.apiMessage.set_community(message, community)
    V2C.apiMessage.set_pdu(message, pdu)
    return bytes(encoder.encode(message))


@settings(max_examples=300, suppress_health_check=[HealthCheck.too_slow])
@given(
    community=st.binary(max_size=40),
    request_id=st.integers(-(2**31), 2**31 - 1),
    status=st.integers(0, 18),
    index=st.integers(0, 40),
    binds=varbinds,
)
def test_response_decodes_as_pyasn1_encoded_it(community, request_id, status, index, binds):
    data = reference_response(community, request_id, status, index, binds)
    got = wire.decode_response(data)
    assert (got.community, got.request_id, got.error_status, got.error_index) == (
        community, request_id, status, index)  # fmt: skip
    assert got.oids == [wire.oid_bytes(oid) for oid, _ in binds]
    assert got.tags == [tag for _, (_, tag, _) in binds]
    assert got.values == [plain for _, (_, _, plain) in binds]
    assert [wire.oid_arcs(o) for o in got.oids] == [tuple(oid) for oid, _ in binds]
    assert wire.peek_request_id(data) == request_id


@settings(max_examples=200)
@given(
    community=st.binary(max_size=40),
    request_id=st.integers(0, 2**31 - 1),
    reps=st.integers(0, 2**31 - 1),
    non_repeaters=st.integers(0, 10),
    oids=st.lists(arcs, min_size=1, max_size=20),
)
def test_requests_decode_in_pyasn1(community, request_id, reps, non_repeaters, oids):
    template = wire.RequestTemplate.v2c(community)
    vbl = wire.varbind_list(wire.oid_bytes(o) for o in oids)
    bulk, rest = decoder.decode(template.get_bulk(request_id, vbl, reps, non_repeaters),
                                asn1Spec=V2C.Message())  # fmt: skip
    assert rest == b""
    assert int(bulk["version"]) == 1 and bytes(V2C.apiMessage.get_community(bulk)) == community
    pdu = V2C.apiMessage.get_pdu(bulk)
    assert pdu.tagSet == V2C.GetBulkRequestPDU.tagSet
    assert int(V2C.apiBulkPDU.get_request_id(pdu)) == request_id
    assert int(V2C.apiBulkPDU.get_max_repetitions(pdu)) == reps
    assert int(V2C.apiBulkPDU.get_non_repeaters(pdu)) == non_repeaters
    assert [tuple(o) for o, _ in V2C.apiBulkPDU.get_varbinds(pdu)] == [tuple(o) for o in oids]
    get, _ = decoder.decode(template.get(request_id, vbl), asn1Spec=V2C.Message())
    pdu = V2C.apiMessage.get_pdu(get)
    assert pdu.tagSet == V2C.GetRequestPDU.tagSet
    assert int(V2C.apiPDU.get_request_id(pdu)) == request_id
    assert [tuple(o) for o, _ in V2C.apiPDU.get_varbinds(pdu)] == [tuple(o) for o in oids]


@given(st.integers(-(2**70), 2**70))
def test_integer_encoding_is_pyasn1s(value):
    ours = wire.integer(value)
    assert int(decoder.decode(ours, asn1Spec=univ.Integer())[0]) == value
    if value < 0 and (-value) & (-value - 1) == 0 and (-value).bit_length() % 8 == 0:
        # -2^(8k-1): pyasn1 0.6 adds a leading FF byte (FF 80 for -128), which X.690
        # 8.3.2 forbids (the first nine bits must not all be ones); ours is minimal.
        assert ours[2:] == b"\x80" + bytes((-value).bit_length() // 8 - 1)
    else:
        assert ours == encoder.encode(univ.Integer(value))


def test_integer_worked_examples():
    # X.690 8.3: minimal two's complement, worked by hand.
    assert wire.integer(0) == bytes.fromhex("020100")
    assert wire.integer(127) == bytes.fromhex("02017f")
    assert wire.integer(128) == bytes.fromhex("02020080")
    assert wire.integer(-128) == bytes.fromhex("020180")
    assert wire.integer(-129) == bytes.fromhex("0202ff7f")


@given(arcs)
def test_oid_encoding_is_pyasn1s(oid):
    assert wire.tlv(wire.OBJECT_IDENTIFIER, wire.oid_bytes(oid)) == encoder.encode(
        univ.ObjectIdentifier(oid))  # fmt: skip
    assert wire.oid_arcs(wire.oid_bytes(oid)) == oid


@given(arcs, arcs)
def test_byte_prefix_of_encoded_oids_is_oid_prefix(a, b):
    # The walk prefix-tests OIDs as bytes ("still in this column"); this is why that is
    # sound. (Byte *order* is not OID order: 256 is 82 00, 16384 is 81 80 00, so the walk
    # compares decoded indexes.)
    ea, eb = wire.oid_bytes(a), wire.oid_bytes(b)
    if a[:2] == b[:2]:
        assert eb.startswith(ea) == (b[: len(a)] == a)
    assert wire.oid_bytes((2, 0, 0, 256)) > wire.oid_bytes((2, 0, 0, 16384))


def test_worked_example_oids():
    # X.690 section 8.19.5 example style, worked by hand: 1.3.6.1.2.1.1.3.0 (sysUpTime.0)
    # is 2B 06 01 02 01 01 03 00; 2^32-1 as a sub-identifier is 8F FF FF FF 7F.
    assert wire.oid_bytes("1.3.6.1.2.1.1.3.0") == bytes.fromhex("2b06010201010300")
    assert wire.oid_bytes((1, 3, 4294967295)) == bytes.fromhex("2b8fffffff7f")


SAMPLE = reference_response(b"quillmoor-ro", 4711, 0, 0, [
    ((1, 3, 6, 1, 2, 1, 99, 1, 1, 1, 4, 1001), (V2C.Integer(-412), wire.INTEGER, -412)),
    ((1, 3, 6, 1, 2, 1, 2, 2, 1, 2, 3), (V2C.OctetString(b"qm-e1"), wire.OCTET_STRING, b"qm-e1")),
    ((1, 3, 6, 1, 2, 1, 99, 1, 1, 1, 5, 1001), (rfc1905.endOfMibView, wire.END_OF_MIB_VIEW, None)),
])  # fmt: skip


def test_every_truncation_is_a_clear_error():
    for cut in range(len(SAMPLE)):
        with pytest.raises(wire.WireError):
            wire.decode_response(SAMPLE[:cut])


def test_trailing_bytes_and_wrong_pdus_are_refused():
    with pytest.raises(wire.WireError, match="after the end"):
        wire.decode_response(SAMPLE + b"\x00")
    request = wire.RequestTemplate.v2c("x").get(1, wire.varbind_list([b"\x2b\x06"]))
    with pytest.raises(wire.WireError, match="Response-PDU"):
        wire.decode_response(request)
    v1 = bytearray(SAMPLE)
    v1[v1.index(b"\x02\x01\x01") + 2] = 0  # version 0 is SNMPv1
    with pytest.raises(wire.WireError, match="version 0"):
        wire.decode_response(bytes(v1))


def hand_response(name: bytes, value: bytes) -> bytes:
    vb = wire.tlv(wire.SEQUENCE, wire.tlv(wire.OBJECT_IDENTIFIER, name) + value)
    pdu = wire.integer(7) + wire.integer(0) + wire.integer(0) + wire.tlv(wire.SEQUENCE, vb)
    return wire.tlv(wire.SEQUENCE, wire.integer(1) + wire.tlv(wire.OCTET_STRING, b"c")
                    + wire.tlv(wire.RESPONSE, pdu))  # fmt: skip


def test_hand_built_response_matches_pyasn1():
    data = hand_response(wire.oid_bytes("1.3.6.1.2.1.1.3.0"), wire.integer(123, wire.TIMETICKS))
    assert data == reference_response(b"c", 7, 0, 0, [
        ((1, 3, 6, 1, 2, 1, 1, 3, 0), (V2C.TimeTicks(123), wire.TIMETICKS, 123))])  # fmt: skip


def test_non_minimal_sub_identifier_is_refused():
    # X.690 8.19.2: a sub-identifier's first octet is never 0x80; pyasn1 refuses it too.
    bad = bytes.fromhex("2b800601")
    with pytest.raises(Exception):  # noqa: B017 - pyasn1 raises its own error type
        decoder.decode(wire.tlv(wire.OBJECT_IDENTIFIER, bad), asn1Spec=univ.ObjectIdentifier())
    with pytest.raises(wire.WireError, match="0x80"):
        wire.decode_response(hand_response(bad, b"\x05\x00"))
    with pytest.raises(wire.WireError, match="0x80"):
        wire.decode_response(hand_response(b"\x2b\x06", wire.tlv(wire.OBJECT_IDENTIFIER, bad)))


def test_bad_values_are_refused_with_their_place():
    oid = wire.oid_bytes("1.3.6.1")
    cases = {
        b"\x02\x00": "empty INTEGER",
        b"\x05\x01\x00": "no content",
        b"\x47\x01\x00": "not an SNMP type",
        b"\x04\x80": "indefinite length",
        b"\x04\x85\x00\x00\x00\x00\x01": "bad length",
    }
    for value, message in cases.items():
        with pytest.raises(wire.WireError, match=message):
            wire.decode_response(hand_response(oid, value))
    with pytest.raises(wire.WireError, match="not a complete OID"):
        wire.decode_response(hand_response(b"\x2b\x86", b"\x05\x00"))


@settings(max_examples=500)
@given(st.data())
def test_mutated_datagrams_give_a_wire_error_or_what_pyasn1_reads(data):
    # Flip bytes anywhere: our decoder must either refuse with WireError or agree with
    # the reference decoder; never another exception, never a hang.
    raw = bytearray(SAMPLE)
    for _ in range(data.draw(st.integers(1, 3))):
        raw[data.draw(st.integers(0, len(raw) - 1))] = data.draw(st.integers(0, 255))
    try:
        got = wire.decode_response(bytes(raw))
    except wire.WireError:
        return
    ref, rest = decoder.decode(bytes(raw), asn1Spec=V2C.Message())
    assert rest == b""
    pdu = V2C.apiMessage.get_pdu(ref)
    assert int(V2C.apiPDU.get_request_id(pdu)) == got.request_id
    ref_binds = V2C.apiPDU.get_varbinds(pdu)
    assert [tuple(o) for o, _ in ref_binds] == [wire.oid_arcs(o) for o in got.oids]
    for (_, value), tag, mine in zip(ref_binds, got.tags, got.values, strict=True):
        if tag in (wire.INTEGER, wire.COUNTER32, wire.GAUGE32, wire.TIMETICKS):
            assert int(value) == mine
        elif tag == wire.OCTET_STRING:
            assert bytes(value) == mine

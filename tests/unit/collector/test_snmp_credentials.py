"""SnmpCredentials: validation, secret-free repr and messages, engine sharing keys."""

from __future__ import annotations

import pytest

from lightwarden.collector.snmp import CredentialsError, SnmpCredentials

AUTH, PRIV = "hgl-auth-secret-1", "hgl-priv-secret-1"


def test_secrets_stay_out_of_repr_describe_and_engine_key():
    v3 = SnmpCredentials.v3("hgl-poller", AUTH, PRIV, "SHA-256", "AES-256", context="edge")
    v2 = SnmpCredentials.v2c("hgl-community-secret")
    for text in (repr(v3), str(v3), v3.describe(), v3.engine_key, repr(v2), v2.describe()):
        assert AUTH not in text and PRIV not in text and "hgl-community-secret" not in text
    assert "hgl-poller" in v3.describe() and v2.describe() == "v2c"


def test_engine_key_one_per_v3_credential_set():
    a = SnmpCredentials.v3("hgl-poller", AUTH, PRIV)
    assert a.engine_key == SnmpCredentials.v3("hgl-poller", AUTH, PRIV).engine_key
    assert a.engine_key != SnmpCredentials.v3("hgl-poller", AUTH + "x", PRIV).engine_key
    assert a.engine_key != SnmpCredentials.v3("hgl-other", AUTH, PRIV).engine_key
    assert a.engine_key != SnmpCredentials.v3("hgl-poller", AUTH, PRIV, "SHA-512").engine_key
    # all v2c communities share one engine: community strings are per request, not per engine
    assert SnmpCredentials.v2c("a").engine_key == SnmpCredentials.v2c("b").engine_key


@pytest.mark.parametrize("auth", ["SHA", "sha-224", "SHA256", "SHA_384", "SHA-512"])
@pytest.mark.parametrize("priv", ["AES-128", "aes192", "AES-256", "AES-256-C", "AES"])
def test_accepted_protocol_spellings(auth, priv):
    SnmpCredentials.v3("hgl-poller", AUTH, PRIV, auth, priv).auth_data()


@pytest.mark.parametrize(
    ("kwargs", "words"),
    [
        ({"auth_protocol": "MD5"}, "auth protocol 'MD5'"),
        ({"priv_protocol": "DES"}, "privacy protocol 'DES'"),
        ({"auth_key": "short"}, "at least 8"),  # RFC 3414 section 11.2
        ({"user": ""}, "user name"),
    ],
)
def test_bad_v3_settings_name_the_problem_not_the_secret(kwargs, words):
    args = {"user": "hgl-poller", "auth_key": AUTH, "priv_key": PRIV, **kwargs}
    with pytest.raises(CredentialsError) as info:
        SnmpCredentials.v3(**args)
    assert words in str(info.value)
    assert AUTH not in str(info.value) and PRIV not in str(info.value)


def test_v2c_needs_a_community_and_versions_are_checked():
    with pytest.raises(CredentialsError, match="community"):
        SnmpCredentials.v2c("")
    with pytest.raises(CredentialsError, match="version"):
        SnmpCredentials(version="1", community="x")

"""The SNMP source against a real net-snmp snmpd serving fixtures/snmpd/dataset.conf.

Cross-check: net-snmp's own CLI (snmpbulkwalk, C, independent of pysnmp) reads the same
agent; its raw numbers, converted with the RFC 3433 formula written out in support/snmp_check.py
(source: standards.md, verified from the MIB text) and the textbook dBm definition, must
agree with what the collector reports.
"""

from __future__ import annotations

import asyncio

import pytest
from support import snmp_check as _snmp_check
from support.snmpd import SnmpdAgent, start_snmpd

from lightwarden.collector.readings import PollOutcome, Quantity, ReadingStatus
from lightwarden.collector.snmp import EnginePool, SnmpCredentials, SnmpSource

pytestmark = pytest.mark.external

# IEEE 802.3 PMD names (trade terms); "100GBASE-LR" is a decoy shorter than the real one
PMD_NAMES = ("10GBASE-LR", "10GBASE-SR", "100GBASE-LR4", "100GBASE-LR", "100GBASE-SR4")

# Extra v3 users: (user, net-snmp auth, net-snmp priv, our auth name, our priv name)
EXTRA_USERS = [
    ("hgl-sha256-aes256", "SHA-256", "AES256", "SHA-256", "AES-256"),
    ("hgl-sha512-aes192", "SHA-512", "AES192", "SHA-512", "AES-192"),
    ("hgl-sha1-aes256", "SHA", "AES256", "SHA", "AES-256"),  # needs Blumenthal key extension
    ("hgl-sha1-aes256c", "SHA", "AES256C", "SHA", "AES-256-C"),  # needs Reeder key extension
    ("hgl-sha224-aes128", "SHA-224", "AES", "SHA-224", "AES-128"),
    ("hgl-sha384-aes128", "SHA-384", "AES", "SHA-384", "AES-128"),
]
EXTRA_AUTH, EXTRA_PRIV = "hgl-extra-auth-key", "hgl-extra-priv-key"


@pytest.fixture(scope="module")
def agent(tmp_path_factory):
    extra = "".join(
        f'createUser {user} {auth} "{EXTRA_AUTH}" {priv} "{EXTRA_PRIV}"\nrouser {user} priv\n'
        for user, auth, priv, _, _ in EXTRA_USERS
    )
    snmpd = start_snmpd(tmp_path_factory.mktemp("snmpd"), extra)
    yield snmpd
    snmpd.stop()


def cli_walk(agent: SnmpdAgent, oid: str, v3: bool = False) -> dict[str, tuple[str, str]]:
    return _snmp_check.cli_walk(agent.address, agent.v3_args() if v3 else agent.v2c_args(), oid)


def expected_from_cli(agent: SnmpdAgent, v3: bool = False) -> dict[_snmp_check.Key, tuple]:
    return _snmp_check.expected_readings(agent.address, agent.v3_args() if v3 else agent.v2c_args())


def poll_once(agent: SnmpdAgent, credentials: SnmpCredentials, polls: int = 1) -> list[PollOutcome]:
    async def main():
        pool = EnginePool()
        source = SnmpSource("hgl-edge-02", "127.0.0.1", credentials, port=agent.port,
                            timeout=2.0, retries=1, engines=pool, pmd_names=PMD_NAMES)  # fmt: skip
        try:
            return [await source.poll(1_800_000_000.0 + i) for i in range(polls)], source
        finally:
            pool.close()

    outcomes, source = asyncio.run(main())
    assert source.discoveries == 1  # later polls reused the cached discovery
    return outcomes


rows_by_key = _snmp_check.collector_rows
assert_agrees = _snmp_check.assert_agrees


@pytest.mark.parametrize("version", ["v2c", "v3-authPriv-SHA-AES"])
def test_collector_agrees_with_net_snmp_cli(agent, version):
    v3 = version != "v2c"
    credentials = (
        SnmpCredentials.v3(agent.v3user, agent.authkey, agent.privkey, "SHA", "AES-128")
        if v3
        else SnmpCredentials.v2c(agent.community)
    )
    expected = expected_from_cli(agent, v3=v3)
    assert len(expected) == 19  # 5 sensors on sfp1 + 14 on sfp2; the fan is not an optic
    first, second = poll_once(agent, credentials, polls=2)
    assert_agrees(first, expected)
    assert_agrees(second, expected)
    assert first.batch.taken_at == 1_800_000_000.0


@pytest.mark.parametrize(
    ("user", "auth", "priv"), [(u, a, p) for u, _, _, a, p in EXTRA_USERS], ids=lambda x: x
)
def test_v3_protocol_combinations(agent, user, auth, priv):
    # snmpd's createUser with the net-snmp names above; the collector's names must match them
    (outcome,) = poll_once(agent, SnmpCredentials.v3(user, EXTRA_AUTH, EXTRA_PRIV, auth, priv))
    assert len(outcome.batch) == 19


def test_spot_values_from_the_dataset(agent):
    # Dataset numbers chosen from standards.md conversions (computed): 151.4 uW = -8.20 dBm,
    # 0.5 mW = -3.010 dBm; contract encoding (b) -1440 = -14.40 dBm
    (outcome,) = poll_once(agent, SnmpCredentials.v2c(agent.community))
    rows = rows_by_key(outcome)
    assert rows[("sfp1", Quantity.RX_POWER, 1)][1] == pytest.approx(-8.20, abs=0.005)
    assert rows[("sfp1", Quantity.TX_POWER, 1)][1] == pytest.approx(-3.010, abs=0.0005)
    assert rows[("sfp2", Quantity.RX_POWER, 4)][1] == pytest.approx(-14.40)
    assert rows[("sfp2", Quantity.RX_POWER, 3)][0] is ReadingStatus.NO_LIGHT
    assert rows[("sfp2", Quantity.TX_POWER, 4)][0] is ReadingStatus.INVALID
    assert rows[("sfp2", Quantity.BIAS, 4)][0] is ReadingStatus.UNAVAILABLE


def test_optic_identities(agent):
    (outcome,) = poll_once(agent, SnmpCredentials.v2c(agent.community))
    sfp, qsfp = outcome.batch.optics
    cli = {oid: text for oid, (_, text) in cli_walk(agent, "1.3.6.1.2.1.31.1.1.1").items()}
    assert (sfp.port, sfp.if_index) == (cli["1.3.6.1.2.1.31.1.1.1.1.1"], 1)
    assert sfp.alias == cli["1.3.6.1.2.1.31.1.1.1.18.1"]
    assert (sfp.form_factor, sfp.pmd, sfp.pmd_source) == ("SFP+", "10GBASE-LR", "entity")
    assert (sfp.part_number, sfp.serial) == ("HGW-SFP10-LR", "HGW10LR00017")
    assert (sfp.oper_up, sfp.admin_up, sfp.lanes) == (True, True, 1)
    assert (qsfp.port, qsfp.if_index, qsfp.form_factor) == ("sfp2", 2, "QSFP28")
    assert qsfp.pmd == "100GBASE-LR4"  # longest known name wins over "100GBASE-LR"
    assert (qsfp.oper_up, qsfp.admin_up, qsfp.lanes) == (False, True, 4)
    assert {o.device for o in outcome.batch.optics} == {"hgl-edge-02"}


def test_v3_wrong_key_is_auth_error_without_secrets(agent):
    wrong = "not-the-" + agent.authkey
    credentials = SnmpCredentials.v3(agent.v3user, wrong, agent.privkey)
    (outcome,) = _poll_failing(agent, credentials)
    assert not outcome.ok and outcome.error_kind == "auth"
    assert outcome.error.startswith("hgl-edge-02:")
    for secret in (wrong, agent.authkey, agent.privkey, agent.community):
        assert secret not in outcome.error
        assert secret not in repr(credentials)


def test_v3_unknown_user_is_auth_error(agent):
    credentials = SnmpCredentials.v3("hgl-nobody", agent.authkey, agent.privkey)
    (outcome,) = _poll_failing(agent, credentials)
    assert outcome.error_kind == "auth" and "Unknown USM user" in outcome.error


def _poll_failing(agent: SnmpdAgent, credentials: SnmpCredentials) -> list[PollOutcome]:
    async def main():
        pool = EnginePool()
        source = SnmpSource("hgl-edge-02", "127.0.0.1", credentials, port=agent.port,
                            timeout=1.0, retries=0, engines=pool)  # fmt: skip
        try:
            return [await source.poll(0.0)]
        finally:
            pool.close()

    return asyncio.run(main())


def test_engines_one_per_v3_credential_set(agent):
    async def main():
        pool = EnginePool()
        a = SnmpCredentials.v3(agent.v3user, agent.authkey, agent.privkey)
        b = SnmpCredentials.v3(agent.v3user, agent.authkey, agent.privkey)
        c = SnmpCredentials.v3(agent.v3user, agent.authkey + "-2", agent.privkey)
        v2c = [SnmpCredentials.v2c(agent.community), SnmpCredentials.v2c("other-community")]
        sources = [
            SnmpSource(f"hgl-{i}", "127.0.0.1", creds, port=agent.port, engines=pool)
            for i, creds in enumerate([a, b, c, *v2c])
        ]
        outcomes = await asyncio.gather(*(s.poll(0.0) for s in sources[:2]))
        engines = len(pool)
        pool.close()
        return outcomes, engines

    outcomes, engines = asyncio.run(main())
    assert all(o.ok for o in outcomes)
    assert engines == 3  # a and b share; c has its own; both communities share the v2c engine

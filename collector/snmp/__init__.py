"""SNMP source: credentials, agent sessions, device discovery and polling."""

from lightwarden.collector.snmp.credentials import CredentialsError, SnmpCredentials
from lightwarden.collector.snmp.session import EnginePool, SnmpError, SnmpSession
from lightwarden.collector.snmp.source import SnmpSource

__all__ = [
    "CredentialsError",
    "EnginePool",
    "SnmpCredentials",
    "SnmpError",
    "SnmpSession",
    "SnmpSource",
]

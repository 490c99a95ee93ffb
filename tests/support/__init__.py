"""Helpers the tests share: real peers (snmpd, Prometheus, Alertmanager, the demo),
sample assessments and events."""

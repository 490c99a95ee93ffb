"""Plain words at the command line: version, help for every option, the environment
variables named, an unknown host and a refused connection said as such, plurals."""

from __future__ import annotations

import argparse
import socket
import subprocess
import sys
from pathlib import Path

import pytest
from pysnmp.error import PySnmpError

from lightwarden.collector.snmp.session import reach_problem
from lightwarden.exporters.app.cli import ENVIRONMENT, build_parser

REPO_README = Path(__file__).resolve().parents[3] / "README.md"


def _actions(p: argparse.ArgumentParser, prefix: str = ""):
    for a in p._actions:
        if isinstance(a, argparse._SubParsersAction):
            for name, sub in a.choices.items():
                yield from _actions(sub, f"{prefix}{name} ")
        elif not isinstance(a, argparse._HelpAction):
            yield prefix, a


def test_every_option_has_help_text():
    missing = [f"{where}{a.option_strings or a.dest}" for where, a in _actions(build_parser())
               if not a.help]
    assert missing == []


def test_version():
    res = subprocess.run([sys.executable, "-m", "lightwarden.exporters.app.cli", "--version"],
                         capture_output=True, text=True, timeout=30)
    assert res.returncode == 0 and res.stdout.startswith("lightwarden 0.")


def test_every_environment_variable_is_documented():
    readme = REPO_README.read_text()
    help_text = build_parser().format_help()
    for name in ENVIRONMENT:
        assert name in readme, name
        assert name in help_text, name


def _pysnmp_style(exc: BaseException) -> PySnmpError:
    """Wrap as pysnmp's transport does: raised inside the except block."""
    try:
        raise exc
    except BaseException:
        try:
            raise PySnmpError(f"Bad IPv4/UDP transport address qm-nowhere@161: {exc}")
        except PySnmpError as wrapped:
            return wrapped


@pytest.mark.parametrize(("exc", "words"), [
    (socket.gaierror(socket.EAI_NONAME, "Name or service not known"),
     "host name 'qm-nowhere' not found (Name or service not known)"),
    (ConnectionRefusedError(111, "Connection refused"), "Connection refused"),
])
def test_transport_problems_in_plain_words(exc, words):
    text = reach_problem("qm-nowhere", _pysnmp_style(exc))
    assert text == words
    assert "PySnmpError" not in text


def test_one_try_is_one_try():
    from pysnmp.proto import errind

    from lightwarden.collector.snmp.credentials import SnmpCredentials
    from lightwarden.collector.snmp.session import SnmpSession

    sess = SnmpSession.__new__(SnmpSession)
    sess.host, sess.port, sess.retries, sess.timeout = "127.0.0.1", 161, 0, 1.0
    sess.credentials = SnmpCredentials.v2c("lab")
    err = sess._fail(errind.RequestTimedOut(), "sysUpTime")
    assert "1 try of 1 s" in str(err)
    sess.retries = 2
    assert "3 tries of 1 s" in str(sess._fail(errind.RequestTimedOut(), "sysUpTime"))

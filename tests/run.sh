#!/usr/bin/env bash
# Install everything the test suite needs on a fresh machine, then run it.
# As root on Debian it installs the real peers the tests talk to (net-snmp's agent and
# tools, Prometheus with promtool, Alertmanager); elsewhere it expects them present.
set -euo pipefail
cd "$(dirname "$0")/.."

debian_packages=(snmp snmpd prometheus prometheus-alertmanager)
binaries=(snmpget snmpbulkwalk snmpd promtool prometheus prometheus-alertmanager)

missing=()
for b in "${binaries[@]}"; do
  command -v "$b" >/dev/null 2>&1 || [ -x "/usr/sbin/$b" ] || [ -x "/usr/bin/$b" ] || missing+=("$b")
done
if [ "${#missing[@]}" -gt 0 ]; then
  if [ "$(id -u)" = 0 ] && command -v apt-get >/dev/null 2>&1; then
    echo "== installing Debian packages: ${debian_packages[*]}"
    apt-get update -qq
    # policy-rc.d keeps package scripts from starting system services we do not use.
    printf '#!/bin/sh\nexit 101\n' > /usr/sbin/policy-rc.d && chmod +x /usr/sbin/policy-rc.d
    DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends \
      "${debian_packages[@]}" >/dev/null
    rm -f /usr/sbin/policy-rc.d
  else
    echo "missing test binaries: ${missing[*]} (install: ${debian_packages[*]})" >&2
  fi
fi

python3 -m venv .venv
.venv/bin/python -m pip install -q --upgrade pip >/dev/null 2>&1 || true
.venv/bin/python -m pip install -q -e '.[test]'
echo "== ruff"
.venv/bin/ruff check .
echo "== mypy"
.venv/bin/python tests/typecheck.py
echo "== import contracts"
.venv/bin/lint-imports
echo "== pytest"
exec .venv/bin/python -m pytest "$@"

"""Coverage-guided fuzzing (atheris, libFuzzer) of the parsers that read outside input:
the CLI table parser, the site config loader, the module memory-map decoders.

Not part of the test run (hypothesis covers these in CI, tests/unit/*/test_*_fuzz.py);
a longer run, documented with its last figures in README.md:

    .venv/bin/pip install atheris
    .venv/bin/python tests/fuzz/atheris_fuzz.py cli -max_total_time=300
    .venv/bin/python tests/fuzz/atheris_fuzz.py config -max_total_time=300
    .venv/bin/python tests/fuzz/atheris_fuzz.py eeprom -max_total_time=300

Any exception other than the documented error of each target is a finding: libFuzzer
stops, prints it and writes the input as crash-* in the working directory.
"""

from __future__ import annotations

import contextlib
import sys

import atheris

with atheris.instrument_imports():
    from lightwarden.collector.eeprom import HexDumpError, decode, parse_hexdump
    from lightwarden.collector.ssh.cli_parse import parse_outputs
    from lightwarden.collector.ssh.platforms.platform import load_platform
    from lightwarden.exporters.app.config import ConfigError, parse_config

from lightwarden.fixtures.lab.model import Lab
from lightwarden.fixtures.lab.ssh_cli import CliFaults, render_levels, render_limits, render_modules

PLATFORM = load_platform("qmos")
_LAB = Lab.load()
_DEV = "qm-dist-b"
_S = _LAB.sample(_DEV, _LAB.epoch)
#: seeds the mutations start from: the lab's real tables
TABLES = {
    "optics levels": "\n".join(render_levels(_LAB.devices[_DEV], _S, CliFaults())),
    "optics limits": "\n".join(render_limits(_LAB.devices[_DEV], _S)),
    "optics modules": "\n".join(render_modules(_S)),
}


def fuzz_cli(data: bytes) -> None:
    fdp = atheris.FuzzedDataProvider(data)
    which = fdp.PickValueInList(list(TABLES))
    lines = TABLES[which].splitlines()
    k = fdp.ConsumeIntInRange(0, len(lines) - 1)
    lines[k] = fdp.ConsumeUnicodeNoSurrogates(120)
    outputs = dict(TABLES)
    outputs[which] = "\n".join(lines)
    parse_outputs(_DEV, PLATFORM, outputs, 1.0)  # must never raise


def fuzz_config(data: bytes) -> None:
    text = atheris.FuzzedDataProvider(data).ConsumeUnicodeNoSurrogates(4096)
    with contextlib.suppress(ConfigError):
        parse_config(text, "fuzz.yaml")


def fuzz_eeprom(data: bytes) -> None:
    if len(data) % 2:
        with contextlib.suppress(HexDumpError):
            parse_hexdump(data.decode("latin-1"))
    else:
        decode(data)  # reports problems in its result, never raises


TARGETS = {"cli": fuzz_cli, "config": fuzz_config, "eeprom": fuzz_eeprom}

if __name__ == "__main__":
    if len(sys.argv) < 2 or sys.argv[1] not in TARGETS:
        sys.exit(f"usage: {sys.argv[0]} {{{','.join(TARGETS)}}} [libFuzzer options]")
    target = TARGETS[sys.argv.pop(1)]
    atheris.Setup(sys.argv, target)
    atheris.Fuzz()

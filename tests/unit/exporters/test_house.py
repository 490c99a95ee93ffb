"""The house keeps its plan: the lab stays off the runtime path, every source in the
registry is a member of the device union, and the monitor reports on itself."""

from __future__ import annotations

import subprocess
import sys
import typing
from pathlib import Path

import pytest
from prometheus_client.parser import text_string_to_metric_families

from lightwarden.collector.readings import BatchBuilder, OpticIdentity, PollOutcome, Quantity
from lightwarden.exporters.app import config as site_config
from lightwarden.exporters.app.config import ConfigError, parse_config
from lightwarden.exporters.app.sources import SOURCES
from lightwarden.exporters.app.wiring import build_monitor

REPO = Path(__file__).resolve().parents[3]
MAP = REPO / "fixtures" / "lab" / "maps" / "qm-core-a_sfp1.hex"


def _modules_after(code: str) -> set[str]:
    listing = "import sys\nprint('\\n'.join(m for m in sys.modules if m.startswith('lightwarden')))"
    out = subprocess.run([sys.executable, "-c", code + "\n" + listing],
                         capture_output=True, text=True, timeout=120, check=True)
    return set(out.stdout.split())


def test_decode_never_loads_the_lab():
    loaded = _modules_after(
        "import contextlib, io\nfrom lightwarden.exporters.app.cli import main\n"
        f"with contextlib.redirect_stdout(io.StringIO()):\n    main(['decode', {str(MAP)!r}])")
    assert "lightwarden.exporters.app.cli" in loaded
    assert not {m for m in loaded if m.startswith("lightwarden.fixtures")}, loaded


def test_check_never_loads_the_lab(tmp_path: Path):
    # A device on a loopback port nobody answers: the check fails fast, without the lab.
    cfg = tmp_path / "site.yaml"
    cfg.write_text("credentials:\n  ro: {snmp_v2c: {community: {env: LW_T_HOUSE}}}\n"
                   "poll: {timeout_s: 0.2, retries: 0}\n"
                   "devices:\n  - {name: nobody, host: 127.0.0.1, port: 9, credentials: ro}\n")
    loaded = _modules_after(
        "import contextlib, io, os\nos.environ['LW_T_HOUSE'] = 'x'\n"
        "from lightwarden.exporters.app.cli import main\n"
        "quiet = io.StringIO()\n"
        "with contextlib.redirect_stdout(quiet), contextlib.redirect_stderr(quiet):\n"
        f"    assert main(['check', '-c', {str(cfg)!r}]) == 2")
    assert "lightwarden.collector.snmp.source" in loaded
    assert not {m for m in loaded if m.startswith("lightwarden.fixtures")}, loaded


def test_every_registered_source_is_a_member_of_the_device_union():
    union = typing.get_args(site_config.Device)[0]
    tags = {typing.get_args(member)[1].tag for member in typing.get_args(union)}
    models = {typing.get_args(member)[0] for member in typing.get_args(union)}
    assert tags == set(SOURCES)
    assert models == {k.device_model for k in SOURCES.values()}


def test_an_entry_without_protocol_is_snmp_and_an_unknown_one_is_named():
    base = "credentials:\n  ro: {snmp_v2c: {community: {env: X}}}\ndevices:\n"
    cfg = parse_config(base + "  - {name: a, host: h, credentials: ro}\n")
    assert cfg.devices[0].protocol == "snmp"
    with pytest.raises(ConfigError) as err:
        parse_config(base + "  - {name: a, host: h, credentials: ro, protocol: telnet}\n",
                     "site.yaml")
    assert str(err.value) == "site.yaml:4: devices[0]: protocol must be one of: snmp, ssh"
    with pytest.raises(ConfigError) as err:
        parse_config(base + "  - {name: a, host: h, credentials: ro, read_maps: true}\n",
                     "site.yaml")
    assert "site.yaml:4: devices[0].read_maps: unknown key" in str(err.value)


def test_the_monitor_reports_its_own_polls_and_scrapes():
    cfg = parse_config("site: t\n")
    monitor = build_monitor(cfg, alerts=False)
    b = BatchBuilder("sw")
    o = b.add_optic(OpticIdentity(device="sw", port="p1", pmd="10GBASE-LR"))
    b.add(o, 1, Quantity.RX_POWER, -5.0)
    monitor.handle(PollOutcome("sw", 1000.0, 0.3, b.build(1000.0)))
    monitor.handle(PollOutcome("sw", 1060.0, 2.0, None, error="timed out", error_kind="timeout"))
    monitor.exposition.body()  # the first scrape's cost shows in the next one
    families = {f.name: f for f in text_string_to_metric_families(
        monitor.exposition.body().decode())}
    polls = {(s.labels.get("outcome"), s.name): s.value
             for s in families["lightwarden_self_poll_seconds"].samples}
    assert polls[("ok", "lightwarden_self_poll_seconds_count")] == 1
    assert polls[("failed", "lightwarden_self_poll_seconds_count")] == 1
    assert polls[("failed", "lightwarden_self_poll_seconds_sum")] == pytest.approx(2.0)
    scrapes = {s.name: s.value for s in families["lightwarden_self_scrape_seconds"].samples}
    assert scrapes["lightwarden_self_scrape_seconds_count"] >= 1
    assert "process_cpu_seconds" in families  # the client library's process collector
    assert "lightwarden_device_up" in families  # the cached device text is still there


@pytest.mark.parametrize("folder", ["snmp", "ssh"])
def test_each_source_folder_carries_a_sample_entry_that_validates(folder: str):
    cfg = site_config.load_config(REPO / "collector" / folder / "sample.yaml")
    assert [d.protocol for d in cfg.devices] == [folder]
    assert cfg.devices[0].name.startswith("qm-")  # the fictional lab's names

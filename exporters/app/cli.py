"""The `lightwarden` command.

Exit status everywhere: 0 fine, 1 findings (an optic outside its targets, a decode with
problems), 2 usage, config or collection error. Errors are one or more plain lines on
stderr naming what and where; no tracebacks unless LIGHTWARDEN_DEBUG is set.
"""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import json
import logging
import math
import os
import sys
import tempfile
import time
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import TYPE_CHECKING, Any

from lightwarden.exporters.app.config import ConfigError, SiteConfig, load_config

if TYPE_CHECKING:
    from lightwarden.exporters.app.monitor import Monitor

log = logging.getLogger("lightwarden")

EXIT_OK, EXIT_FINDINGS, EXIT_ERROR = 0, 1, 2


class UsageError(Exception):
    pass


class LabError(Exception):
    """The simulated lab could not start (a port in use or out of range)."""


# -- helpers ------------------------------------------------------------------------------


def _setup_logging(verbose: int) -> None:
    level = logging.WARNING if verbose == 0 else logging.INFO if verbose == 1 else logging.DEBUG
    logging.basicConfig(level=level, format="%(asctime)s %(levelname)s %(name)s: %(message)s")
    # pysnmp and netmiko are chatty at INFO; their messages never carry our secrets, but
    # keep them quiet unless asked for twice.
    for noisy in ("pysnmp", "paramiko", "netmiko", "asyncssh", "apscheduler"):
        logging.getLogger(noisy).setLevel(logging.WARNING if verbose < 2 else logging.INFO)
    # A poll still running when its next turn comes is skipped by design (no overlap);
    # the scheduler's warning for each would drown the log of a busy site.
    if verbose < 2:
        logging.getLogger("apscheduler.scheduler").setLevel(logging.ERROR)


def _load(path: str) -> tuple[SiteConfig, Path]:
    cfg = load_config(path)
    return cfg, Path(path).resolve().parent


def _state_dir(args: argparse.Namespace, cfg: SiteConfig | None, base: Path) -> Path:
    """The state directory (exporters/app/statedir.py); not created here."""
    from lightwarden.exporters.app.statedir import resolve_state_dir

    return resolve_state_dir(getattr(args, "state_dir", None),
                             cfg.state_dir if cfg is not None else None, config_dir=base)


# -- check --------------------------------------------------------------------------------


def run_check(monitor: Monitor, as_json: bool) -> int:
    from lightwarden.exporters.pages.rows import failed_device_row, optic_rows, worst_first
    from lightwarden.exporters.pages.table import render_check_table
    from lightwarden.rules.findings import Severity

    views = asyncio.run(_poll_and_close(monitor))
    rows, failures = [], []
    for v in views:
        if v.assessment is None:
            failures.append(failed_device_row(v.outcome))
        else:
            rows.extend(optic_rows(v.assessment, monitor.targets, v.contexts, v.links))
    worst_first(rows, monitor.targets)
    links = monitor.link_issues()
    for v in views:
        if v.outcome.health == "partial":
            print(f"warning: {v.outcome.device}: partial poll: {v.outcome.reason}",
                  file=sys.stderr)
    if as_json:
        from lightwarden.exporters.pages.status import finding_json

        # Each row carries the consistency findings of its port (a span's: at both ends).
        of_port: dict[tuple[str, str], list[dict[str, object]]] = {}
        for lf in links:
            for end in {(lf.device, lf.port), (lf.far_device, lf.far_port)}:
                of_port.setdefault(end, []).append(finding_json(lf))
        doc: Any = [r.as_json() | {"findings": of_port.get((r.device, r.port), [])}
                    for r in rows]
        print(json.dumps(doc, indent=2))
        for f in failures:
            print(f"error: {f['device']}: {f['error']}", file=sys.stderr)
    else:
        print(render_check_table(rows, failures, links))
    if failures:
        return EXIT_ERROR
    bad = any(r.severity >= Severity.WARNING for r in rows) or any(
        lf.severity >= Severity.WARNING for lf in links)
    return EXIT_FINDINGS if bad else EXIT_OK


async def _poll_and_close(monitor: Monitor) -> list[Any]:
    try:
        return await monitor.poll_all()
    finally:
        monitor.close()


def _adhoc_config(args: argparse.Namespace) -> SiteConfig:
    from lightwarden.exporters.app.config import parse_config

    target = args.target
    host, _, port = target.rpartition(":") if target.count(":") == 1 else (target, "", "")
    if not host:
        host, port = target, ""
    try:
        port_n = int(port) if port else 161
    except ValueError:
        raise UsageError(f"{target!r}: port must be a number") from None
    if args.v3_user:
        cred: dict[str, Any] = {"snmp_v3": {
            "user": args.v3_user, "auth_protocol": args.auth_protocol,
            "auth_key": {"env": args.auth_key_env}, "priv_protocol": args.priv_protocol,
            "priv_key": {"env": args.priv_key_env}}}
    elif args.community_env:
        cred = {"snmp_v2c": {"community": {"env": args.community_env}}}
    elif args.community:
        # The community given on the command line travels through the environment of
        # this process only, so the config machinery never holds it inline.
        os.environ["LIGHTWARDEN_ADHOC_COMMUNITY"] = args.community
        cred = {"snmp_v2c": {"community": {"env": "LIGHTWARDEN_ADHOC_COMMUNITY"}}}
    else:
        raise UsageError("give --community, --community-env or --v3-user")
    import yaml

    data = {"site": "adhoc", "credentials": {"adhoc": cred},
            "poll": {"timeout_s": args.timeout, "retries": args.retries},
            "devices": [{"name": host, "host": host, "port": port_n, "credentials": "adhoc",
                         **({"eeprom_oid": args.eeprom_oid} if args.eeprom_oid else {})}]}
    return parse_config(yaml.safe_dump(data), "(command line)")


def cmd_bench_poll(args: argparse.Namespace) -> int:
    from lightwarden.collector.snmp.source import SnmpSource
    from lightwarden.exporters.app.bench import BenchError, run_bench_poll
    from lightwarden.exporters.app.wiring import build_monitor

    monitor = build_monitor(_adhoc_config(args), base_dir=Path.cwd(), alerts=False)
    (source,) = monitor.build_sources()
    if not isinstance(source, SnmpSource):
        monitor.close()
        raise UsageError("bench poll reads SNMP devices only")
    try:
        print(run_bench_poll(source, args.cycles, args.json, monitor.close))
    except BenchError as exc:
        raise UsageError(str(exc)) from None
    return EXIT_OK


def cmd_check(args: argparse.Namespace) -> int:
    from lightwarden.exporters.app.wiring import preflight

    if args.walk:
        return _check_walk(args)
    if args.config and args.target:
        raise UsageError("give either -c SITE.yaml or HOST[:PORT], not both")
    if args.config:
        cfg, base = _load(args.config)
    elif args.target:
        cfg, base = _adhoc_config(args), Path.cwd()
    else:
        raise UsageError("give -c SITE.yaml or HOST[:PORT]")
    monitor = preflight(cfg, base_dir=base, state_dir=_state_dir(args, cfg, base),
                        alerts=False)
    return run_check(monitor, args.json)


def _check_walk(args: argparse.Namespace) -> int:
    """Judge a saved walk as if the device had been polled (collector/snmp/capture.py)."""
    from lightwarden.collector.snmp.capture import CaptureError, CaptureSession, load_capture
    from lightwarden.collector.snmp.credentials import SnmpCredentials
    from lightwarden.collector.snmp.source import SnmpSource
    from lightwarden.exporters.app.wiring import build_monitor

    if args.target:
        raise UsageError("give either --walk FILE or HOST[:PORT], not both")
    try:
        values = load_capture(args.walk)
    except CaptureError as exc:
        raise UsageError(str(exc)) from None
    sys_name = values.get((1, 3, 6, 1, 2, 1, 1, 5, 0))
    name = (sys_name.decode("utf-8", "replace").strip() if isinstance(sys_name, bytes)
            else "") or Path(args.walk).stem
    if args.config:
        cfg, base = _load(args.config)
    else:
        from lightwarden.exporters.app.config import parse_config

        cfg, base = parse_config("site: capture\ndevices: []\n", "(capture)"), Path.cwd()
    monitor = build_monitor(cfg, base_dir=base, alerts=False)
    monitor.sources = [SnmpSource(
        name, "capture", SnmpCredentials.v2c("capture"), session=CaptureSession(
            values, f"capture {args.walk}"),
        pmd_names=tuple(s.name for s in monitor.catalogue), eeprom_oid=args.eeprom_oid)]
    return run_check(monitor, args.json)


def cmd_validate(args: argparse.Namespace) -> int:
    from lightwarden.exporters.app.wiring import my_devices, preflight

    cfg, base = _load(args.config)
    # Exactly what `run` checks before it polls (`check` the same, without alerting).
    preflight(cfg, base_dir=base, state_dir=_state_dir(args, cfg, base)).close()
    mine = len(my_devices(cfg))
    shard = (f", {mine} in shard {cfg.shard.index} of {cfg.shard.count}"
             if cfg.shard.count > 1 else "")
    print(f"{args.config}: ok ({_n(len(cfg.devices), 'device')}{shard}, "
          f"{_n(len(cfg.overrides), 'override')}, {_n(len(cfg.plant), 'span')})")
    return EXIT_OK


def _n(count: int, word: str) -> str:
    """'1 device', '2 devices'."""
    return f"{count} {word if count == 1 else word + 's'}"


# -- run / demo ---------------------------------------------------------------------------


def cmd_run(args: argparse.Namespace) -> int:
    from lightwarden.exporters.app.runtime import Service
    from lightwarden.exporters.app.wiring import as_instance, preflight

    cfg, base = _load(args.config)

    def instance(c: SiteConfig) -> SiteConfig:
        # The command line's shard and port win over the file's, at start and on reload.
        if args.shard_index is not None:
            return as_instance(c, args.shard_index, args.listen_port)
        if args.listen_port is not None:
            return c.model_copy(update={"listen": c.listen.model_copy(
                update={"port": args.listen_port})})  # fmt: skip
        return c

    cfg = instance(cfg)
    monitor = preflight(cfg, base_dir=base, state_dir=_state_dir(args, cfg, base))
    # The listening socket first: a start that fails (port in use) leaves no files.
    service = Service(monitor, cfg, base, config_path=args.config, transform=instance)
    monitor.open_history()
    shard = f" (shard {cfg.shard.index} of {cfg.shard.count})" if cfg.shard.count > 1 else ""
    print(f"lightwarden: {_n(len(monitor.sources), 'device')} of {len(cfg.devices)}{shard}; "
          f"metrics at {service.url}/metrics", flush=True)
    service.serve()
    return EXIT_OK


def cmd_demo(args: argparse.Namespace) -> int:
    with contextlib.ExitStack() as scope:
        if args.state_dir:
            state = Path(args.state_dir).expanduser().resolve()
        else:
            # Nothing of a demo is worth keeping: its state goes with it.
            state = Path(scope.enter_context(
                tempfile.TemporaryDirectory(prefix="lightwarden-demo-")))
        return _demo(args, state)


def _demo(args: argparse.Namespace, state: Path) -> int:
    import yaml

    from lightwarden.exporters.app.config import parse_config
    from lightwarden.exporters.app.runtime import Service
    from lightwarden.exporters.app.wiring import build_monitor
    from lightwarden.fixtures.lab.model import LAB_ENV
    from lightwarden.fixtures.lab.server import LabServers, lab_site_config

    os.environ.update(LAB_ENV)
    # Each demo starts afresh: a new lab has no past alerts or readings of its own.
    for name in ("outbox.sqlite", "history.sqlite"):
        for suffix in ("", "-wal", "-shm"):
            (state / (name + suffix)).unlink(missing_ok=True)
    print(f"lightwarden demo: starting the Quillmoor lab (state in {state}) ...", flush=True)
    lab = LabServers(speed=args.speed, base_port=0)
    endpoints = _start_lab(lab)
    try:
        data = lab_site_config(endpoints, interval_s=args.interval, lab=lab.lab)
        data["state_dir"] = str(state)
        data["history"] = {"path": "history.sqlite", "sample_every_s": args.interval}
        data["listen"] = {"host": "127.0.0.1", "port": args.port}
        # Short holds so the scripted stories show within minutes of wall time.
        data["conditions"] = {"hold_s": args.hold, "clear_hold_s": 2 * args.hold,
                              "hysteresis_db": 0.5}
        alerting: dict[str, Any] = {"resolve_hold_s": 0.0,
                                    "outbox_path": "outbox.sqlite",
                                    "labels": {"site": "quillmoor"}}
        if args.alertmanager:
            alerting["alertmanager"] = [{"url": args.alertmanager}]
        if args.webhook:
            alerting["webhooks"] = [{"url": args.webhook}]
        data["alerting"] = alerting
        cfg = parse_config(yaml.safe_dump(data), "(demo)")
        monitor = build_monitor(cfg, base_dir=state, state_dir=state)
        monitor.build_sources()
        history = monitor.open_history()
        if history is not None and args.backfill_days > 0:
            from lightwarden.fixtures.lab.backfill import backfill

            print(f"  writing {args.backfill_days:g} days of lab history for the report ...",
                  flush=True)
            backfill(lab.lab, lambda b: history.record(b, force=True), lab.clock.now(),
                     time.time(), days=args.backfill_days)
        service = Service(monitor, cfg, state)
        n_optics = len(lab.lab.optic_ports())
        print(f"lightwarden demo: Quillmoor lab, {len(lab.lab.devices)} switches, "
              f"{n_optics} optics, lab clock x{args.speed:g}", flush=True)
        for name, port in endpoints.snmp.items():
            print(f"  lab {name}: snmp udp://127.0.0.1:{port}  "
                  f"ssh 127.0.0.1:{endpoints.ssh[name]}", flush=True)
        print(f"  metrics: {service.url}/metrics", flush=True)
        print(f"  status:  {service.url}/", flush=True)
        if args.alertmanager:
            print(f"  alerts to: {args.alertmanager}", flush=True)
        if args.webhook:
            print("  alert events to the webhook given", flush=True)
        service.serve(args.duration)
    finally:
        lab.stop()
    return EXIT_OK


def _start_lab(lab: Any) -> Any:
    from lightwarden.fixtures.lab.snmp_agent import LabAgentError

    try:
        return lab.start()
    except (LabAgentError, OSError) as exc:
        raise LabError(f"the lab could not start: {exc}") from None


def cmd_lab(args: argparse.Namespace) -> int:
    from lightwarden.exporters.app.runtime import Stop
    from lightwarden.exporters.app.statedir import ensure_state_dir
    from lightwarden.fixtures.lab.server import LabServers

    if args.known_hosts:
        known = Path(args.known_hosts).expanduser()
        known.parent.mkdir(parents=True, exist_ok=True)
    else:
        # Into the state directory, where a site config's relative known_hosts points.
        known = ensure_state_dir(_state_dir(args, None, Path.cwd())) / "lab_known_hosts"
    lab = LabServers(speed=args.speed, base_port=args.port, known_hosts_path=known)
    endpoints = _start_lab(lab)
    print(f"lightwarden lab: {len(endpoints.snmp)} switches, lab clock x{args.speed:g}",
          flush=True)
    for name, port in endpoints.snmp.items():
        print(f"  {name}: snmp udp 127.0.0.1:{port}, ssh tcp 127.0.0.1:{endpoints.ssh[name]}",
              flush=True)
    print(f"  ssh host keys written to {known}", flush=True)
    stop = Stop()
    stop.install()
    try:
        deadline = None if args.duration is None else time.monotonic() + args.duration
        while not stop.event.wait(0.2):
            if deadline is not None and time.monotonic() >= deadline:
                break
    finally:
        lab.stop()
    return EXIT_OK


def cmd_report(args: argparse.Namespace) -> int:
    from lightwarden.exporters.app.wiring import build_monitor, history_path
    from lightwarden.exporters.pages.report import build_report, render_report, report_json

    cfg, base = _load(args.config)
    state = _state_dir(args, cfg, base)
    monitor = build_monitor(cfg, base_dir=base, state_dir=state, alerts=False)
    path = history_path(cfg, state)
    if not path.exists():
        raise ConfigError(f"history.path {path}: no history yet (run `lightwarden run` first)")
    history = monitor.open_history()
    assert history is not None
    try:
        with _progress_bar("reading history") as progress:
            report = build_report(history, monitor.plant_with_history(), monitor.targets,
                                  time.time(), days=args.days, progress=progress)
        if args.output:
            from lightwarden.exporters.pages.report_html import write_report_dir

            try:
                written = write_report_dir(report, history, Path(args.output),
                                           (monitor.targets.overload_db,
                                            monitor.targets.sensitivity_db))
            except OSError as exc:
                raise ConfigError(f"report -o {args.output}: {exc.strerror or exc}") from None
            print(f"wrote {', '.join(str(p) for p in written)}", file=sys.stderr)
    finally:
        monitor.close()
    text = json.dumps(report_json(report), indent=2) if args.json else render_report(report)
    try:
        sys.stdout.write(text + "\n")
        sys.stdout.flush()
    except BrokenPipeError:
        # the reader (head, less) has gone: stop quietly, and keep the interpreter's own
        # flush at exit from raising again on the closed pipe
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    return EXIT_OK


@contextlib.contextmanager
def _progress_bar(what: str) -> Iterator[Callable[[int, int], None] | None]:
    """A transient progress bar on a terminal's stderr (rich); nothing when not a terminal."""
    if not sys.stderr.isatty():
        yield None
        return
    from rich.console import Console
    from rich.progress import Progress

    with Progress(console=Console(stderr=True), transient=True) as bar:
        task = bar.add_task(what, total=None)

        def step(done: int, total: int) -> None:
            bar.update(task, completed=done, total=total)

        yield step


def _days(text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number of days") from None
    if not (math.isfinite(v) and v > 0):
        raise argparse.ArgumentTypeError(f"{text!r}: days must be a positive number")
    return v


def cmd_history_check(args: argparse.Namespace) -> int:
    """The history file's full integrity check (PRAGMA integrity_check) and row counts."""
    from lightwarden.exporters.app.wiring import history_path
    from lightwarden.exporters.store.history import History, HistoryError

    cfg, base = _load(args.config)
    path = history_path(cfg, _state_dir(args, cfg, base))
    if not path.exists():
        raise ConfigError(f"history.path {path}: no such file")
    try:
        history = History(path)
    except HistoryError as exc:
        print(f"lightwarden: {exc}", file=sys.stderr)
        return EXIT_FINDINGS
    try:
        problems = history.check()
        counts = history.counts()
    finally:
        history.close()
    if problems:
        print(f"{path}: integrity_check found:", *problems[:20], sep="\n  ", file=sys.stderr)
        return EXIT_FINDINGS
    print(f"{path}: ok; " + ", ".join(f"{k} {v}" for k, v in counts.items()))
    return EXIT_OK


def cmd_decode(args: argparse.Namespace) -> int:
    from lightwarden.collector.eeprom.command import decode_command

    code, text = decode_command(args.file, args.json)
    stream = sys.stderr if code == EXIT_ERROR else sys.stdout
    print(text, file=stream)
    return code


def cmd_rules(args: argparse.Namespace) -> int:
    from lightwarden.exporters.prometheus.alert_rules import run

    return run(args)


# -- parser -------------------------------------------------------------------------------


def _port(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a port number") from None
    if not 0 <= value <= 65535:
        raise argparse.ArgumentTypeError(f"{value} is not a port (0..65535)")
    return value



def _target_args(p: argparse.ArgumentParser) -> None:
    """Credentials and timing for one ad hoc SNMP device (check HOST, bench poll HOST)."""
    p.add_argument("--community", help="SNMP v2c community (visible to other local users; "
                   "prefer --community-env)")
    p.add_argument("--community-env", metavar="VAR", help="read the community from VAR")
    p.add_argument("--v3-user", metavar="USER", help="SNMPv3 user (authPriv)")
    p.add_argument("--auth-protocol", default="SHA-256",
                   choices=["SHA", "SHA-224", "SHA-256", "SHA-384", "SHA-512"],
                   help="SNMPv3 authentication protocol (default SHA-256)")
    p.add_argument("--priv-protocol", default="AES-128", choices=["AES-128", "AES-192", "AES-256"],
                   help="SNMPv3 privacy protocol (default AES-128)")
    p.add_argument("--auth-key-env", default="LIGHTWARDEN_SNMP_AUTH_KEY", metavar="VAR",
                   help="read the SNMPv3 authentication key from VAR "
                        "(default LIGHTWARDEN_SNMP_AUTH_KEY)")
    p.add_argument("--priv-key-env", default="LIGHTWARDEN_SNMP_PRIV_KEY", metavar="VAR",
                   help="read the SNMPv3 privacy key from VAR (default LIGHTWARDEN_SNMP_PRIV_KEY)")
    p.add_argument("--eeprom-oid", metavar="OID",
                   help="also read each module's memory map from this column (OID of a "
                        "table indexed by ifIndex), as a configured device's eeprom_oid does")
    p.add_argument("--timeout", type=float, default=2.0, help="seconds per SNMP request")
    p.add_argument("--retries", type=int, default=1,
                   help="SNMP retries after the first try (default 1)")


_CONFIG_HELP = "the site config (YAML; deploy/site.example.yaml is an annotated example)"

#: environment variables lightwarden itself reads (README "Environment")
ENVIRONMENT = {
    "STATE_DIRECTORY": "the state directory, when neither --state-dir nor state_dir is set "
                       "(systemd's StateDirectory= sets it)",
    "XDG_STATE_HOME": "the per-user state base (default ~/.local/state)",
    "LIGHTWARDEN_SNMP_AUTH_KEY": "`check HOST --v3-user`: the SNMPv3 authentication key "
                                 "(another variable with --auth-key-env)",
    "LIGHTWARDEN_SNMP_PRIV_KEY": "`check HOST --v3-user`: the SNMPv3 privacy key "
                                 "(another variable with --priv-key-env)",
    "LIGHTWARDEN_DEBUG": "set to 1: show the traceback of an unexpected error",
}


def _version() -> str:
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("lightwarden")
    except PackageNotFoundError:
        return "(not installed)"


def _state_option(p: argparse.ArgumentParser) -> None:
    p.add_argument("--state-dir", metavar="DIR",
                   help="where history, alert outbox and saved state live (default: the "
                        "config's state_dir, else $STATE_DIRECTORY, else "
                        "$XDG_STATE_HOME/lightwarden or ~/.local/state/lightwarden)")


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="lightwarden",
        description="Optical diagnostics monitor: windows, margins, conditions, alerts.",
        epilog="environment: " + "; ".join(f"{k}: {v}" for k, v in ENVIRONMENT.items()),
    )
    p.add_argument("-v", "--verbose", action="count", default=0, help="more logging (-vv)")
    p.add_argument("--version", action="version", version=f"lightwarden {_version()}",
                   help="print the version and exit")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")

    d = sub.add_parser("demo", help="run the simulated lab and the monitor in one process")
    d.add_argument("--duration", type=float, default=None, metavar="SECONDS",
                   help="stop after this many seconds (default: until Ctrl-C)")
    d.add_argument("--speed", type=float, default=60.0, metavar="N",
                   help="lab clock runs N times real time (default 60: a lab hour a minute)")
    d.add_argument("--port", type=_port, default=9817, help="metrics/status port (0: any)")
    d.add_argument("--interval", type=float, default=5.0, help="poll interval, seconds")
    d.add_argument("--hold", type=float, default=10.0,
                   help="condition hold time, seconds (demo default is short)")
    d.add_argument("--alertmanager", metavar="URL", help="send alerts to this Alertmanager")
    d.add_argument("--webhook", metavar="URL", help="send alert events to this webhook")
    d.add_argument("--state-dir", default=None, metavar="DIR",
                   help="keep the demo's outbox and history here (default: a temporary "
                        "directory, removed when the demo ends)")
    d.add_argument("--backfill-days", type=float, default=60.0, metavar="DAYS",
                   help="give the demo this many days of lab history first, so the "
                        "planners' report has something to say (0: none)")
    d.set_defaults(func=cmd_demo)

    r = sub.add_parser("run", help="the monitor daemon")
    r.add_argument("-c", "--config", required=True, metavar="SITE.yaml", help=_CONFIG_HELP)
    _state_option(r)
    r.add_argument("--shard-index", type=int, metavar="N",
                   help="run as shard instance N of shard.count (overrides shard.index; "
                        "listens on listen.port + N unless --listen-port is given)")
    r.add_argument("--listen-port", type=int, metavar="PORT",
                   help="listen on PORT (overrides listen.port)")
    r.set_defaults(func=cmd_run)

    c = sub.add_parser("check", help="poll every device once and print each optic")
    c.add_argument("-c", "--config", metavar="SITE.yaml", help=_CONFIG_HELP)
    c.add_argument("target", nargs="?", metavar="HOST[:PORT]", help="one SNMP device, ad hoc")
    c.add_argument("--json", action="store_true", help="print a JSON array")
    _target_args(c)
    c.add_argument("--walk", metavar="FILE",
                   help="judge a saved snmpwalk -On / snmpbulkwalk -On capture instead of "
                        "polling (with -c, the site's windows, overrides and plant apply)")
    _state_option(c)
    c.set_defaults(func=cmd_check)

    b = sub.add_parser("bench", help="measure what polling costs this process")
    bsub = b.add_subparsers(dest="bench_command", required=True)
    bp = bsub.add_parser("poll", help="discover one SNMP device, then poll it N times")
    bp.add_argument("target", metavar="HOST[:PORT]", help="the SNMP device to measure")
    _target_args(bp)
    bp.add_argument("--cycles", type=int, default=10, metavar="N", help="steady polls")
    bp.add_argument("--json", action="store_true", help="print JSON")
    bp.set_defaults(func=cmd_bench_poll)

    v = sub.add_parser("validate", help="check a site config without polling")
    v.add_argument("-c", "--config", required=True, metavar="SITE.yaml", help=_CONFIG_HELP)
    _state_option(v)
    v.set_defaults(func=cmd_validate)

    lab = sub.add_parser("lab", help="serve only the simulated lab (SNMP and SSH)")
    lab.add_argument("--port", type=_port, default=16161,
                     help="first port: device i answers SNMP (UDP) and SSH (TCP) on PORT+i")
    lab.add_argument("--speed", type=float, default=1.0, help="lab clock speed-up")
    lab.add_argument("--duration", type=float, default=None, metavar="SECONDS",
                     help="stop after this many seconds (default: until Ctrl-C)")
    lab.add_argument("--known-hosts", default=None, metavar="FILE",
                     help="where to write the lab's SSH host keys (default: "
                          "lab_known_hosts in the state directory)")
    _state_option(lab)
    lab.set_defaults(func=cmd_lab)

    rep = sub.add_parser("report", help="planners' report: ageing links, forecasts, span loss")
    rep.add_argument("-c", "--config", required=True, metavar="SITE.yaml", help=_CONFIG_HELP)
    rep.add_argument("--days", type=_days, default=90.0, help="history to fit (default 90)")
    rep.add_argument("--json", action="store_true", help="print JSON instead of text")
    rep.add_argument("-o", "--output", metavar="DIR", default=None,
                     help="also write report.html (with charts) and report.csv here")
    _state_option(rep)
    rep.set_defaults(func=cmd_report)

    hist = sub.add_parser("history", help="the reading history file")
    hist_sub = hist.add_subparsers(dest="action", required=True)
    chk = hist_sub.add_parser("check", help="full integrity check of the history file")
    chk.add_argument("-c", "--config", required=True, metavar="SITE.yaml", help=_CONFIG_HELP)
    _state_option(chk)
    chk.set_defaults(func=cmd_history_check)

    dec = sub.add_parser("decode", help="decode a module memory map (binary or hex dump)")
    dec.add_argument("file", metavar="FILE",
                     help="a memory map: raw bytes, or a hex dump as `optics memory` prints")
    dec.add_argument("--json", action="store_true", help="print JSON instead of text")
    dec.set_defaults(func=cmd_decode)

    from lightwarden.exporters.prometheus.alert_rules import build_parser as rules_parser

    ru = sub.add_parser("rules", help="write Prometheus alerting rules for our metrics")
    rules_parser(ru)
    ru.set_defaults(func=cmd_rules)

    from lightwarden.exporters.pages.budget import build_parser as budget_parser
    from lightwarden.exporters.pages.budget import run as budget_run

    bu = sub.add_parser("budget", help="power budget of a planned link: will it close, which pad")
    budget_parser(bu)
    bu.set_defaults(func=budget_run)
    return p


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help(sys.stderr)
        return EXIT_ERROR
    _setup_logging(args.verbose)
    try:
        return int(args.func(args))
    except (ConfigError, UsageError, LabError) as exc:
        for line in str(exc).splitlines():
            print(f"lightwarden {args.command}: {line}", file=sys.stderr)
        return EXIT_ERROR
    except KeyboardInterrupt:
        return EXIT_OK
    except Exception as exc:  # the last line of defence: no tracebacks for operators
        if os.environ.get("LIGHTWARDEN_DEBUG"):
            raise
        print(f"lightwarden {args.command}: unexpected error: {type(exc).__name__}: {exc} "
              "(set LIGHTWARDEN_DEBUG=1 for details)", file=sys.stderr)
        return EXIT_ERROR


if __name__ == "__main__":
    sys.exit(main())

"""The site config: YAML validated by pydantic, with errors that point at file, line and key.

Each source's device entry and credentials are defined in its own folder
(``collector/snmp/config.py``, ``collector/ssh/config.py``); ``devices`` is a union of
them told apart by ``protocol`` (snmp when left out). Secrets are never written inline:
every secret field takes ``{env: NAME}`` or ``{file: PATH}``, and is read only when a
source is built. Errors name the variable or file, never its content, and pydantic's
input echo is switched off throughout.
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Any, Literal

import yaml
from pydantic import Discriminator, Field, Tag, ValidationError, field_validator, model_validator

from lightwarden.collector.entry import ConfigError, EntryModel, Secret, no_inline_secret
from lightwarden.collector.snmp import config as snmp_config
from lightwarden.collector.snmp.config import SnmpDevice, SnmpV2c, SnmpV3
from lightwarden.collector.ssh import config as ssh_config
from lightwarden.collector.ssh.config import SshDevice, SshLogin

__all__ = ["ConfigError", "Device", "SiteConfig", "load_config", "parse_config"]


_Model = EntryModel


class Credential(_Model):
    snmp_v2c: SnmpV2c | None = None
    snmp_v3: SnmpV3 | None = None
    ssh: SshLogin | None = None

    @model_validator(mode="after")
    def _exactly_one(self) -> Credential:
        given = [k for k in CREDENTIAL_FIELDS if getattr(self, k) is not None]
        if len(given) != 1:
            raise ValueError("give exactly one of " + ", ".join(CREDENTIAL_FIELDS))
        return self

    def given(self) -> tuple[str, Any]:
        """The one credential kind given, with its entry."""
        for k in CREDENTIAL_FIELDS:
            value = getattr(self, k)
            if value is not None:
                return k, value
        raise AssertionError("validated to hold exactly one")  # pragma: no cover


#: every credential kind, in the order the sources declare them
CREDENTIAL_FIELDS = snmp_config.CREDENTIAL_KEYS + ssh_config.CREDENTIAL_KEYS


def _protocol_of(value: Any) -> str:
    """Which source an entry is for; entries that name none are SNMP."""
    if isinstance(value, dict):
        return str(value.get("protocol", "snmp"))
    return str(getattr(value, "protocol", "snmp"))


#: one member per source in exporters/app/sources.py (a test keeps the two in step)
Device = Annotated[
    Annotated[SnmpDevice, Tag("snmp")] | Annotated[SshDevice, Tag("ssh")],
    Discriminator(
        _protocol_of,
        custom_error_type="unknown_protocol",
        custom_error_message="protocol must be one of: snmp, ssh",
    ),
]


class Poll(_Model):
    interval_s: float = Field(default=60.0, gt=0)
    jitter_s: float = Field(default=5.0, ge=0)
    timeout_s: float = Field(default=2.0, gt=0)
    retries: int = Field(default=1, ge=0, le=10)
    max_backoff_s: float = Field(default=900.0, gt=0)
    #: polls running at once across all devices; the rest wait for a slot
    max_in_flight: int = Field(default=64, ge=1, le=10_000)
    #: after a failed poll the last readings stay in the metrics this long, then are
    #: withdrawn (the page keeps showing them, marked stale with their age)
    stale_after_s: float = Field(default=300.0, gt=0)
    ssh_threads: int = Field(default=16, ge=1, le=256)
    ssh_per_device: int = Field(default=1, ge=1, le=8)


class Ssh(_Model):
    #: strict host-key checking against this file; relative: in the state directory
    known_hosts: str | None = None
    strict_host_keys: bool = True
    read_timeout_s: float = Field(default=20.0, gt=0)


class Margins(_Model):
    sensitivity_db: float = Field(default=3.0, ge=0, le=20)
    overload_db: float = Field(default=1.0, ge=0, le=20)
    #: the fixed attenuators the site stocks, dB: pad advice picks from these only
    #: (default the common stock, standards.md "Rules of thumb", practice)
    pads_db: list[Annotated[float, Field(gt=0, le=40)]] = Field(
        default_factory=lambda: [1.0, 3.0, 5.0, 7.0, 10.0, 15.0, 20.0], min_length=1)


class Conditions(_Model):
    """When a reading's condition may change (rules/hysteresis.py)."""

    hold_s: float = Field(default=120.0, ge=0)
    clear_hold_s: float = Field(default=300.0, ge=0)
    hysteresis_db: float = Field(default=0.5, ge=0, le=10)  # Rx and Tx power
    hysteresis_bias_ma: float = Field(default=0.2, ge=0)
    hysteresis_temperature_c: float = Field(default=1.0, ge=0)
    hysteresis_supply_v: float = Field(default=0.02, ge=0)


QuantityName = Literal["rx_power", "tx_power", "bias", "temperature", "supply"]


class AlertHold(_Model):
    """Alert holds for one quantity, or one lane of it (beats the alerting-wide ones)."""

    quantity: QuantityName
    lane: int | None = Field(default=None, ge=0, le=16)
    open_hold_s: float | None = Field(default=None, ge=0)
    resolve_hold_s: float | None = Field(default=None, ge=0)
    update_step: float | None = Field(default=None, gt=0)


class Override(_Model):
    """A site window for a port (``"device port"``) or a part number."""

    port: str | None = None
    part_number: str | None = None
    quantity: QuantityName = "rx_power"
    lane: int | None = Field(default=None, ge=1, le=16)
    rx_overload_dbm: float | None = None
    rx_sensitivity_dbm: float | None = None
    high_alarm: float | None = None
    low_alarm: float | None = None
    high_warning: float | None = None
    low_warning: float | None = None

    @model_validator(mode="after")
    def _target(self) -> Override:
        if (self.port is None) == (self.part_number is None):
            raise ValueError("give exactly one of 'port' (\"DEVICE PORT\") or 'part_number'")
        if self.port is not None and len(self.port.split()) != 2:
            raise ValueError("'port' must be \"DEVICE PORT\", e.g. \"core-1 sfp7\"")
        return self


class PmdAddition(_Model):
    name: str
    wavelength_min_nm: float
    wavelength_max_nm: float
    reach_m: float
    lanes: int = Field(default=1, ge=1, le=16)
    tx_min_dbm: float
    tx_max_dbm: float
    rx_overload_dbm: float
    rx_min_avg_dbm: float
    source: str = "site"
    # Optional PMD-table columns (rules/README.md "The PMD table").
    clause: str = ""
    fibre: Literal["smf", "mmf"] | None = None
    reach_om1_m: float | None = Field(default=None, gt=0)
    reach_om2_m: float | None = Field(default=None, gt=0)
    reach_om3_m: float | None = Field(default=None, gt=0)
    reach_om4_m: float | None = Field(default=None, gt=0)
    reach_engineered_m: float | None = Field(default=None, gt=0)
    tx_oma_min_dbm: float | None = None
    rx_sens_oma_dbm: float | None = None
    er_min_db: float | None = Field(default=None, gt=0)
    oma_clause: str = ""


class Span(_Model):
    """One fibre path as built: used to compare measured span loss with the budget."""

    a: str  # "DEVICE PORT"
    b: str
    km: float = Field(ge=0)
    fibre: Literal["OS1", "OS2", "OM1", "OM2", "OM3", "OM4", "OM5"] = "OS2"
    connectors: int = Field(default=2, ge=0)
    splices: int = Field(default=0, ge=0)
    #: fixed attenuators fitted at A's receiver (counted in the B -> A direction only) and
    #: at B's receiver (A -> B)
    pad_a_db: float = Field(default=0.0, ge=0)
    pad_b_db: float = Field(default=0.0, ge=0)
    #: the wavelength the loss is judged at; default: the middle of the optics' PMD band
    wavelength_nm: float | None = Field(default=None, gt=0)
    #: mode-conditioning patch cords at both ends (1000BASE-LX over multimode, cl.38)
    mode_conditioning: bool = False

    @model_validator(mode="before")
    @classmethod
    def _one_pad_per_receiver(cls, data: Any) -> Any:
        # A pad sits at one receiver and attenuates one direction: one pad_db for the span
        # made a pad at B's receiver read as 10 dB "below budget" from B to A.
        if isinstance(data, dict) and "pad_db" in data:
            raise ValueError("pad_db: a pad is fitted at one receiver; give pad_a_db (at "
                             "a's receiver) or pad_b_db (at b's receiver)")
        return data


class Destination(_Model):
    url: str
    secret: Secret | None = None
    timeout_s: float = Field(default=5.0, gt=0)

    _check = field_validator("secret", mode="before")(no_inline_secret)


class Alerting(_Model):
    alertmanager: list[Destination] = Field(default_factory=list)
    webhooks: list[Destination] = Field(default_factory=list)
    resend_interval_s: float = Field(default=60.0, gt=0)
    # Conditions already wait out their own holds; these only make alerts slower still.
    open_hold_s: float = Field(default=0.0, ge=0)
    resolve_hold_s: float = Field(default=0.0, ge=0)
    holds: list[AlertHold] = Field(default_factory=list)
    outbox_path: str = "lightwarden-outbox.sqlite"  # relative: in the state directory
    labels: dict[str, str] = Field(default_factory=dict)
    generator_url: str | None = None


class Shard(_Model):
    """This instance's share of a site polled by several (rendezvous hashing on names)."""

    index: int = Field(default=0, ge=0)
    count: int = Field(default=1, ge=1, le=1024)

    @model_validator(mode="after")
    def _in_range(self) -> Shard:
        if self.index >= self.count:
            raise ValueError(f"index {self.index} must be below count {self.count}")
        return self


class Listen(_Model):
    host: str = "127.0.0.1"
    port: int = Field(default=9817, ge=0, le=65535)


class History(_Model):
    path: str = "lightwarden-history.sqlite"  # relative: in the state directory
    #: the tiers (exporters/store/README.md): raw samples, then hourly and daily
    #: min/avg/max; keep_days is the hourly tier's, long enough for the 90-day trends
    raw_days: float = Field(default=14.0, ge=1)
    keep_days: float = Field(default=120.0, gt=0)
    daily_days: float = Field(default=3650.0, gt=0)
    #: keep at most one sample per device this often (trends need hours, not seconds)
    sample_every_s: float = Field(default=900.0, gt=0)
    enabled: bool = True


class SiteConfig(_Model):
    site: str = "site"
    #: where everything we write lives (exporters/app/statedir.py); relative: from this
    #: file's folder. Unset: $STATE_DIRECTORY, else the XDG per-user default.
    state_dir: str | None = None
    listen: Listen = Listen()
    shard: Shard = Shard()
    poll: Poll = Poll()
    ssh: Ssh = Ssh()
    margins: Margins = Margins()
    conditions: Conditions = Conditions()
    credentials: dict[str, Credential] = Field(default_factory=dict)
    devices: list[Device] = Field(default_factory=list)
    overrides: list[Override] = Field(default_factory=list)
    pmd_additions: list[PmdAddition] = Field(default_factory=list)
    plant: list[Span] = Field(default_factory=list)
    alerting: Alerting = Alerting()
    history: History = History()


def credential_kinds(protocol: str) -> tuple[str, ...]:
    return {snmp_config.PROTOCOL: snmp_config.CREDENTIAL_KEYS,
            ssh_config.PROTOCOL: ssh_config.CREDENTIAL_KEYS}[protocol]


def reference_problems(cfg: SiteConfig) -> list[tuple[tuple[Any, ...], str]]:
    """Cross-references pydantic cannot see: (location, message) pairs."""
    problems: list[tuple[tuple[Any, ...], str]] = []
    seen: set[str] = set()
    for i, d in enumerate(cfg.devices):
        if d.name in seen:
            problems.append((("devices", i, "name"), f"device name {d.name!r} appears twice"))
        seen.add(d.name)
        cred = cfg.credentials.get(d.credentials)
        where = ("devices", i, "credentials")
        if cred is None:
            problems.append((where, f"unknown credentials {d.credentials!r}"))
        elif cred.given()[0] not in credential_kinds(d.protocol):
            problems.append((where, f"device uses {d.protocol} but {d.credentials!r} is "
                                    f"{cred.given()[0]}"))
    # One problem per root cause: a device missing (renamed, mistyped) is reported once,
    # at its first reference, with how many more there are, not once per plant end.
    unknown: dict[str, list[tuple[Any, ...]]] = {}
    for i, o in enumerate(cfg.overrides):
        if o.port is not None and o.port.split()[0] not in seen:
            unknown.setdefault(o.port.split()[0], []).append(("overrides", i, "port"))
    for i, sp in enumerate(cfg.plant):
        for end in ("a", "b"):
            ref = getattr(sp, end)
            if len(ref.split()) != 2:
                problems.append((("plant", i, end), f"{ref!r} is not \"DEVICE PORT\""))
            elif ref.split()[0] not in seen:
                unknown.setdefault(ref.split()[0], []).append(("plant", i, end))
    for name, refs in unknown.items():
        more = f" (and {len(refs) - 1} more {_plural(len(refs) - 1, 'reference')})" \
            if len(refs) > 1 else ""
        problems.append((refs[0], f"no device named {name!r}{more}"))
    return problems


def _plural(n: int, word: str) -> str:
    return word if n == 1 else word + "s"


# -- loading with file:line:key errors --------------------------------------------------


def _plain_loc(loc: tuple[Any, ...]) -> tuple[Any, ...]:
    """The location as the operator wrote it: without validator and union-tag steps."""
    out: list[Any] = []
    for i, p in enumerate(loc):
        if isinstance(p, str) and p.startswith("function-"):
            continue
        if (isinstance(p, str) and i >= 2 and loc[i - 2] == "devices"
                and isinstance(loc[i - 1], int)):
            continue  # the protocol tag pydantic puts after devices[N]
        out.append(p)
    return tuple(out)


def _node_at(root: yaml.Node | None, loc: tuple[Any, ...]) -> yaml.Node | None:
    node = root
    for part in loc:
        if isinstance(node, yaml.MappingNode):
            nxt = None
            for k, v in node.value:
                if k.value == str(part):
                    nxt = v
                    break
            if nxt is None:
                return node
            node = nxt
        elif isinstance(node, yaml.SequenceNode) and isinstance(part, int):
            if part >= len(node.value):
                return node
            node = node.value[part]
        else:
            return node
    return node


def _key_node_at(root: yaml.Node | None, loc: tuple[Any, ...]) -> yaml.Node | None:
    """For an unknown key, point at the key itself rather than its parent."""
    parent = _node_at(root, loc[:-1])
    if isinstance(parent, yaml.MappingNode):
        for k, _v in parent.value:
            if isinstance(k, yaml.Node) and k.value == str(loc[-1]):
                return k
    return None


def _dotted(loc: tuple[Any, ...]) -> str:
    out = ""
    for part in loc:
        out += f"[{part}]" if isinstance(part, int) else (f".{part}" if out else str(part))
    return out or "(top level)"


#: a site config is a few hundred kB even for thousands of devices; far more is a mistake
MAX_CONFIG_BYTES = 16 * 1024 * 1024


def parse_config(text: str, source: str = "<config>") -> SiteConfig:
    if len(text) > MAX_CONFIG_BYTES:
        raise ConfigError(f"{source}: {len(text)} characters; a site config is limited to "
                          f"{MAX_CONFIG_BYTES} (is this the right file?)")
    try:
        root = yaml.compose(text)
        data = yaml.safe_load(text)
    except RecursionError:
        raise ConfigError(f"{source}: nested too deeply to be a site config") from None
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f"{source}:{mark.line + 1}" if mark else source
        problem = getattr(exc, "problem", None) or "not valid YAML"
        raise ConfigError(f"{where}: {problem}") from None
    if data is None:
        data = {}
    if not isinstance(data, dict):
        raise ConfigError(f"{source}:1: the top level must be a mapping of keys")
    try:
        cfg = SiteConfig.model_validate(data)
    except RecursionError:
        raise ConfigError(f"{source}: nested too deeply to be a site config") from None
    except ValidationError as exc:
        lines = []
        for err in exc.errors(include_input=False, include_url=False):
            loc = _plain_loc(err["loc"])
            node = _key_node_at(root, loc) if err["type"] == "extra_forbidden" and loc else None
            node = node or _node_at(root, loc)
            line = node.start_mark.line + 1 if node is not None else 1
            msg = err["msg"]
            if err["type"] == "extra_forbidden":
                msg = "unknown key"
            msg = msg.removeprefix("Value error, ")
            lines.append(f"{source}:{line}: {_dotted(loc)}: {msg}")
        raise ConfigError("\n".join(lines)) from None
    problems = reference_problems(cfg)
    if problems:
        raise ConfigError("\n".join(
            f"{source}:{_line(root, loc)}: {_dotted(loc)}: {msg}" for loc, msg in problems
        ))
    return cfg


def _line(root: yaml.Node | None, loc: tuple[Any, ...]) -> int:
    node = _node_at(root, loc)
    return node.start_mark.line + 1 if node is not None else 1


def load_config(path: str | Path) -> SiteConfig:
    p = Path(path)
    try:
        text = p.read_text()
    except OSError as exc:
        raise ConfigError(f"{p}: cannot read config: {exc.strerror}") from None
    return parse_config(text, str(p))

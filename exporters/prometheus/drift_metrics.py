"""Drift and run-out gauges from the history's robust estimate (rules/drift.py).

Prometheus's own ``deriv()`` over a few hours of scrapes is a least-squares slope of
whatever samples the window holds: minutes after a restart it has a handful, and a
glitch or a connector step reads as a fast slide. These gauges carry the slope the
planners' report uses instead (Theil–Sen since the last step, on hourly or daily
points), and only where it is believed: a lane whose slope interval includes zero, or
whose history is too short or just stepped, exports no drift sample at all, so a rule
on them cannot fire on a healthy lane.

Refreshed from history every so often (``DriftGauges.update``), not per poll; the text is
rendered once per update and appended to every scrape.
"""

from __future__ import annotations

import math
import threading
from collections.abc import Iterable

from lightwarden.exporters.prometheus.exposition import Family, escape_label_value, format_value
from lightwarden.rules.outlook import LaneOutlook

DRIFT = Family("lightwarden_rx_drift_db_per_day", "gauge",
               "Robust slope of received power since its last step (Theil-Sen, dB/day); "
               "present only when its 95 % interval excludes zero.")
DRIFT_LOW = Family("lightwarden_rx_drift_low_db_per_day", "gauge",
                   "Lower end of the drift slope's 95 % interval, dB/day.")
DRIFT_HIGH = Family("lightwarden_rx_drift_high_db_per_day", "gauge",
                    "Upper end of the drift slope's 95 % interval, dB/day.")
TO_TARGET = Family("lightwarden_rx_time_to_target_seconds", "gauge",
                   "Forecast time until received power leaves its margin target "
                   "(0: already outside); present only with a forecast.")
TO_EDGE = Family("lightwarden_rx_time_to_edge_seconds", "gauge",
                 "Forecast time until received power reaches its window edge "
                 "(sensitivity or overload); present only with a forecast.")
UPDATED = Family("lightwarden_rx_drift_updated_timestamp_seconds", "gauge",
                 "When the drift gauges were last computed from history.")

FAMILIES = (DRIFT, DRIFT_LOW, DRIFT_HIGH, TO_TARGET, TO_EDGE, UPDATED)


def render_drift(lanes: Iterable[LaneOutlook], now: float) -> bytes:
    """The drift families for these lanes' outlooks, computed at ``now``."""
    lines: dict[Family, list[str]] = {f: [] for f in FAMILIES}
    for o in lanes:
        lbl = (f'device="{escape_label_value(o.device)}",port="{escape_label_value(o.port)}",'
               f'lane="{o.lane}"')
        if o.moving and o.rate_db_per_day is not None:
            for fam, v in ((DRIFT, o.rate_db_per_day), (DRIFT_LOW, o.rate_low),
                           (DRIFT_HIGH, o.rate_high)):
                if v is not None and math.isfinite(v):
                    lines[fam].append(f"{fam.name}{{{lbl}}} {format_value(v)}\n")
        for fam, at in ((TO_TARGET, o.target_lost_at), (TO_EDGE, o.edge_reached_at)):
            if at is not None:
                wait = max(0.0, at - now)
                lines[fam].append(f"{fam.name}{{{lbl}}} {format_value(wait)}\n")
    lines[UPDATED].append(f"{UPDATED.name} {format_value(now)}\n")
    return b"".join(f.header() + "".join(lines[f]).encode() for f in FAMILIES if lines[f])


class DriftGauges:
    """The latest rendered drift text; thread-safe (one updater, many scrapes)."""

    def __init__(self) -> None:
        self._lock = threading.Lock()
        self._text = b""

    def update(self, lanes: Iterable[LaneOutlook], now: float) -> None:
        text = render_drift(lanes, now)
        with self._lock:
            self._text = text

    def text(self) -> bytes:
        with self._lock:
            return self._text

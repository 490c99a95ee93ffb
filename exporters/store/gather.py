"""Fetch from the reading history the series the rule layer's outlook works on."""

from __future__ import annotations

from collections.abc import Callable

from lightwarden.collector.readings import Quantity
from lightwarden.exporters.store.history import History
from lightwarden.rules.advice import AdviceContext
from lightwarden.rules.assess import MarginTargets
from lightwarden.rules.outlook import DAY, LaneOutlook, Series, advice_context, lane_outlook
from lightwarden.rules.plant import Plant


def history_advice_context(history: History, plant: Plant | None, device: str, port: str,
                           lane: int, quantity: Quantity, now: float, days: float = 30.0,
                           own: Series | None = None) -> AdviceContext:
    """What history says about one reading: its rate, the feeding laser, the span.

    ``own`` is the reading's own series over the same days, when the caller has it.
    """
    since = now - days * DAY
    if own is None:
        own = history.series(device, port, lane, quantity, since)
    tx_dev, tx_port, wear_end = device, port, "near"
    if quantity is Quantity.RX_POWER:
        far = plant.far_end(device, port) if plant is not None else None
        if far is None:
            return advice_context(quantity, own, None, None, "far")
        (tx_dev, tx_port), wear_end = far, "far"
    tx = history.series(tx_dev, tx_port, lane, Quantity.TX_POWER, since)
    bias = history.series(tx_dev, tx_port, lane, Quantity.BIAS, since)
    # module temperature is stored with lane 0 (collector.readings.MODULE_QUANTITIES)
    temp = history.series(tx_dev, tx_port, 0, Quantity.TEMPERATURE, since)
    return advice_context(quantity, own, tx, bias, wear_end, temperature=temp,
                          baseline=history.baseline(tx_dev, tx_port, lane))


def lane_outlooks(history: History, plant: Plant | None, targets: MarginTargets, now: float,
                  days: float = 90.0, horizon_days: float = 3650.0,
                  progress: Callable[[int, int], None] | None = None,
                  with_lasers: bool = True) -> list[LaneOutlook]:
    """Every receiver lane the history has a window for, with its drift and forecasts.

    ``progress(done, total)`` is called after each lane (for a progress bar). Without
    ``with_lasers`` the feeding laser's history is not read (the drift gauges need only
    the receiver's own series: a fifth of the queries).
    """
    since = now - days * DAY
    out = []
    windows = history.rx_windows()
    for i, w in enumerate(windows):
        if progress is not None:
            progress(i, len(windows))
        rx = history.series(w.device, w.port, w.lane, Quantity.RX_POWER, since,
                            hourly_first=True)
        ctx = (history_advice_context(history, plant, w.device, w.port, w.lane,
                                      Quantity.RX_POWER, now, days=days, own=rx)
               if with_lasers else AdviceContext())
        out.append(lane_outlook(w, rx, ctx, targets, now, horizon_days * DAY))
    return out

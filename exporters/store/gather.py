"""Fetch from the reading history the series the rule layer's outlook works on."""

from __future__ import annotations

from lightwarden.collector.readings import Quantity
from lightwarden.exporters.store.history import History
from lightwarden.rules.advice import AdviceContext
from lightwarden.rules.outlook import DAY, Series, advice_context
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
    return advice_context(quantity, own, tx, bias, wear_end)

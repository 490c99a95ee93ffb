"""Hand-built polls and assessments of the fictional Quillmoor Lab, for exposition tests.

The rule layer is written elsewhere; these assessments are filled in by hand from the
reference sheet so the exporter is tested on its own.
"""

from __future__ import annotations

import numpy as np

from lightwarden.collector.readings import (
    BatchBuilder,
    OpticIdentity,
    PollOutcome,
    Quantity,
    ReadingBatch,
    ReadingStatus,
    Thresholds,
)
from lightwarden.rules.findings import Assessment, Condition, WindowSource
from support.procs import require_binary

# source: standards.md / IEEE 802.3 PMD windows, 10GBASE-LR row (verified): +0.5 / -14.4 dBm
LR_OVERLOAD_DBM = 0.5
LR_SENSITIVITY_DBM = -14.4
# source: standards.md / IEEE 802.3 PMD windows, 100GBASE-LR4 row (memory): +4.5 / -10.6 dBm
LR4_OVERLOAD_DBM = 4.5
LR4_SENSITIVITY_DBM = -10.6

ODD_PORT = 'sfp2 "core"\\side\nB'
ODD_ALIAS = 'to "Quillmoor Lab" rack 4 \\ patch\npanel 7'


def lab_batch(device: str = "hg-core-1", taken_at: float = 1_800_000_000.0) -> ReadingBatch:
    """Two optics: a 10GBASE-LR SFP+ and a 4-lane 100GBASE-LR4 QSFP28 with a dark lane."""
    b = BatchBuilder(device)
    sfp = b.add_optic(
        OpticIdentity(
            device=device,
            port="sfp1",
            alias="to hg-edge-3 sfp1",
            form_factor="SFP+",
            pmd="10GBASE-LR",
            wavelength_nm=1310.0,
            part_number="HGL-10LR-01",
            serial="HGL0001",
            thresholds={
                # bias warning at 10 mA so the 12 mA reading is past it (alarm at 15 is not)
                Quantity.BIAS: Thresholds(high_alarm=15.0, low_alarm=2.0, high_warning=10.0),
                Quantity.TEMPERATURE: Thresholds(high_alarm=75.0, low_alarm=-5.0),
            },
        )
    )
    # source: standards.md / SFF-8472 worked decodes (verified):
    # Rx 0x1F40 = 800.0 uW = -0.969 dBm; Tx 0x2710 = 1.000 mW = 0.000 dBm;
    # bias 0x1770 = 12.000 mA; temperature 0x1A80 = 26.5 C; Vcc 0x80E8 = 3.3000 V
    b.add_power_mw(sfp, 1, Quantity.RX_POWER, 0.8)
    b.add_power_mw(sfp, 1, Quantity.TX_POWER, 1.0)
    b.add(sfp, 1, Quantity.BIAS, 0x1770 * 2 / 1000)  # LSB 2 uA -> mA
    b.add(sfp, 0, Quantity.TEMPERATURE, 0x1A80 / 256)
    b.add(sfp, 0, Quantity.SUPPLY, 0x80E8 / 10_000)  # LSB 100 uV -> V

    qsfp = b.add_optic(
        OpticIdentity(
            device=device,
            port=ODD_PORT,
            alias=ODD_ALIAS,
            form_factor="QSFP28",
            pmd="100GBASE-LR4",
            wavelength_nm=1304.5,
            lanes=4,
            part_number='HGL-"100"-LR4',
            serial="HGL\\0002",
        )
    )
    for lane, mw in ((1, 0.5), (2, 0.4), (3, 0.0), (4, 0.45)):
        b.add_power_mw(qsfp, lane, Quantity.RX_POWER, mw)  # lane 3: 0 mW = no light
        b.add_power_mw(qsfp, lane, Quantity.TX_POWER, 1.2)
        b.add(qsfp, lane, Quantity.BIAS, 40.0 + lane)
    b.add(qsfp, 0, Quantity.TEMPERATURE, 41.25)
    b.add(qsfp, 0, Quantity.SUPPLY, None, ReadingStatus.UNSUPPORTED, "no Vcc monitor")
    return b.build(taken_at)


def lab_assessment(batch: ReadingBatch) -> Assessment:
    """Edges and margins filled in by hand: Rx rows get their PMD window, others none."""
    n = len(batch)
    nan = np.full(n, np.nan)
    low, high = nan.copy(), nan.copy()
    source = np.zeros(n, dtype=np.int8)
    cond = np.zeros(n, dtype=np.int8)
    for i in range(n):
        if int(batch.quantity[i]) != Quantity.RX_POWER:
            continue
        opt = batch.optics[int(batch.optic[i])]
        if opt.pmd == "10GBASE-LR":
            low[i], high[i] = LR_SENSITIVITY_DBM, LR_OVERLOAD_DBM
            source[i] = WindowSource.PMD_TABLE
        else:
            low[i], high[i] = LR4_SENSITIVITY_DBM, LR4_OVERLOAD_DBM
            source[i] = WindowSource.SITE
        if batch.status[i] == ReadingStatus.NO_LIGHT:
            cond[i] = Condition.DARK
    margin_low = batch.value - low  # NaN propagates where there is no value
    margin_high = high - batch.value
    optic_cond = np.array([Condition.NEAR_OVERLOAD, Condition.DARK], dtype=np.int8)
    return Assessment(
        batch=batch,
        low_edge=low,
        high_edge=high,
        low_warning=nan.copy(),
        high_warning=nan.copy(),
        window_source=source,
        margin_low_db=margin_low,
        margin_high_db=margin_high,
        instant=cond.copy(),
        condition=cond,
        optic_condition=optic_cond,
    )


def ok_outcome(batch: ReadingBatch, duration: float = 1.25) -> PollOutcome:
    return PollOutcome(
        device=batch.device, started_at=batch.taken_at - duration, duration_s=duration, batch=batch
    )


def promtool_path() -> str:
    """The promtool binary; skips locally when absent, fails under CI=true."""
    return require_binary("promtool", "prometheus")

"""Conditions that do not flap: hold times and hysteresis over instant judgements.

Each reading gets an *instant* condition from its sample alone (see ``assess``). What an
operator sees is the *held* condition, a pure function of (previous state, this sample's
instant condition, this sample's *strict* condition, time), evaluated over whole
columns at once:

- **Getting worse** (or sideways, e.g. near-sensitivity to near-overload): the new
  condition is adopted once every sample for ``hold_s`` seconds has been at least that
  bad. If samples got worse during the wait, the mildest condition seen is adopted
  (the one that truly held), and a further step needs its own hold. So a row changes
  condition at most once per hold time.
- **Getting better**: judged on the *strict* condition, which is the instant condition
  recomputed with every edge moved ``hysteresis`` further into the window (0.5 dB for
  optical power), and adopted only after it has held for ``clear_hold_s``. A reading
  that wobbles around an edge therefore never clears and re-raises.
- **DARK is adopted at once** (and so are LASER_OFF, TX_FAULT and LOSS_OF_SIGNAL,
  ``ADOPT_AT_ONCE``): no light on a port that should have it is a fact about the link
  (a cut, a pulled fibre, a dead or disabled laser), not a noisy level creeping over an
  edge; waiting would only hide an outage for a poll or two. Leaving DARK is an
  improvement like any other (``clear_hold_s``), so a flapping link stays DARK.
- **UNKNOWN is held like a worsening** (``hold_s``): one missed sensor read says nothing
  about whether a problem went away, so a critical row must not "resolve" into unknown
  on a single gap. Leaving UNKNOWN is immediate: the row only got there after
  ``hold_s`` without values, and the first value back is all we know.
- **First sample** of a row is adopted at once: there is no earlier state to protect,
  and showing "healthy" for a row we can see is below sensitivity would be false.

Defaults: ``hold_s`` 120 s (three polls at a 60 s interval), ``clear_hold_s`` 300 s
(clearing slower than raising keeps alerts from resolving on one good sample), 0.5 dB
hysteresis (a few times the jitter of a steady diagnostic reading). These are our
choices, not a standard's.

State is columnar (numpy arrays) and keyed by (device, port, lane, quantity); the
optic's serial number is part of the identity, so a swapped module starts afresh.
Time is always passed in; nothing here reads a clock.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from lightwarden.collector.readings import Quantity, ReadingBatch
from lightwarden.rules.findings import ADOPT_AT_ONCE, SEVERITY_OF, Condition

RowKey = tuple[str, str, int, int]  # (device, port, lane, Quantity code)

NO_CONDITION = -1  # in state arrays: never seen / no candidate

#: Ordering used to decide "worse" and "better": the one severity order, per condition
#: code. UNKNOWN sits apart (see module doc).
RANK = SEVERITY_OF

_UNKNOWN = int(Condition.UNKNOWN)
_WORSE, _BETTER, _TO_UNKNOWN = 1, -1, 2


# What identifies one poll's row layout: (port, serial) per optic, then the optic, lane
# and quantity columns as bytes.
_Layout = tuple[tuple[tuple[str, str], ...], bytes, bytes, bytes]


@dataclass(slots=True, frozen=True)
class HysteresisPolicy:
    """How long a change must hold, and how far back past an edge a value must come."""

    hold_s: float = 120.0
    clear_hold_s: float = 300.0
    hysteresis_db: float = 0.5  # Rx and Tx power
    hysteresis_bias_ma: float = 0.2
    hysteresis_temperature_c: float = 1.0
    hysteresis_supply_v: float = 0.02

    def __post_init__(self) -> None:
        for name in ("hold_s", "clear_hold_s", "hysteresis_db", "hysteresis_bias_ma",
                     "hysteresis_temperature_c", "hysteresis_supply_v"):
            value = getattr(self, name)
            if not value >= 0.0:
                raise ValueError(f"hold policy: {name} must be 0 or more, got {value!r}")

    def hysteresis(self) -> np.ndarray:
        """Hysteresis per Quantity code, in that quantity's unit."""
        out = np.zeros(max(Quantity) + 1)
        out[Quantity.RX_POWER] = self.hysteresis_db
        out[Quantity.TX_POWER] = self.hysteresis_db
        out[Quantity.BIAS] = self.hysteresis_bias_ma
        out[Quantity.TEMPERATURE] = self.hysteresis_temperature_c
        out[Quantity.SUPPLY] = self.hysteresis_supply_v
        return out


@dataclass(slots=True)
class TrackState:
    """Columnar state of tracked rows. ``condition`` is NO_CONDITION for unseen rows."""

    condition: np.ndarray  # int8
    since: np.ndarray  # float64, when the held condition was adopted
    candidate: np.ndarray  # int8, the change waiting out its hold, or NO_CONDITION
    candidate_since: np.ndarray  # float64

    @classmethod
    def empty(cls, n: int) -> TrackState:
        return cls(
            condition=np.full(n, NO_CONDITION, dtype=np.int8),
            since=np.full(n, np.nan),
            candidate=np.full(n, NO_CONDITION, dtype=np.int8),
            candidate_since=np.full(n, np.nan),
        )


def _direction(x: np.ndarray, cond: np.ndarray) -> np.ndarray:
    d = np.where(RANK[x] >= RANK[cond], _WORSE, _BETTER)
    return np.where(x == _UNKNOWN, _TO_UNKNOWN, d)


def step(
    state: TrackState,
    instant: np.ndarray,
    strict: np.ndarray,
    now: float,
    policy: HysteresisPolicy,
) -> TrackState:
    """The next state, given each row's instant and strict condition at time ``now``.

    Pure: ``state`` is not modified. ``strict`` must be at least as bad as ``instant``
    (it is the same judgement with the window narrowed by the hysteresis).
    """
    instant = np.asarray(instant, dtype=np.int8)
    strict = np.asarray(strict, dtype=np.int8)
    cond = state.condition.copy()
    since = state.since.copy()
    cand = state.candidate.copy()
    cand_since = state.candidate_since.copy()

    unseen = cond == NO_CONDITION
    cur = np.where(unseen, instant, cond)  # safe index for RANK
    r_cur = RANK[cur]

    worse = (instant != cur) & (RANK[instant] >= r_cur)
    improve = (RANK[instant] < r_cur) & (RANK[strict] < r_cur)
    target = np.where(worse, instant, cur)
    target = np.where(improve, strict, target)
    target = np.where((instant == _UNKNOWN) & (cur != _UNKNOWN), _UNKNOWN, target).astype(np.int8)

    t_dir = _direction(target, cur)
    has_cand = cand != NO_CONDITION
    c_dir = _direction(np.where(has_cand, cand, cur), cur)
    changing = target != cur
    same = has_cand & changing & (c_dir == t_dir)
    milder = np.where(
        t_dir == _WORSE,
        np.where(RANK[target] <= RANK[np.where(has_cand, cand, target)], target, cand),
        np.where(RANK[target] >= RANK[np.where(has_cand, cand, target)], target, cand),
    )
    milder = np.where(t_dir == _TO_UNKNOWN, target, milder)
    cand = np.where(changing, np.where(same, milder, target), NO_CONDITION).astype(np.int8)
    cand_since = np.where(changing & ~same, now, cand_since)
    cand_since = np.where(changing, cand_since, np.nan)

    hold = np.where(t_dir == _BETTER, policy.clear_hold_s, policy.hold_s)
    adopt = changing & (now - cand_since >= hold)

    # A fact about the link (DARK, LASER_OFF, TX_FAULT, LOSS_OF_SIGNAL) is adopted at
    # once when the row was not already in it.
    fact = ADOPT_AT_ONCE[np.clip(instant, 0, None).astype(np.int64)] & (instant >= 0)
    immediate = unseen | (fact & (cur != instant)) | (
        (cur == _UNKNOWN) & (instant != _UNKNOWN)
    )
    cand = np.where(immediate, instant, cand).astype(np.int8)
    adopt |= immediate

    cond = np.where(adopt, cand, cur).astype(np.int8)
    since = np.where(adopt, now, since)
    cand = np.where(adopt, NO_CONDITION, cand).astype(np.int8)
    cand_since = np.where(adopt, np.nan, cand_since)
    return TrackState(condition=cond, since=since, candidate=cand, candidate_since=cand_since)


@dataclass(slots=True, frozen=True)
class Tracked:
    """One row's held condition, for people and tests."""

    condition: Condition
    since: float
    candidate: Condition | None
    candidate_since: float | None
    last_seen: float


class ConditionTracker:
    """Held conditions for every (device, port, lane, quantity) seen, in flat arrays.

    Call :meth:`update_batch` once per poll with the instant and strict conditions
    ``assess`` computed; it returns the held conditions aligned with the batch rows.
    """

    __slots__ = ("_identity", "_keys", "_last_seen", "_layouts", "_size", "_state", "policy")

    def __init__(self, policy: HysteresisPolicy | None = None, capacity: int = 1024) -> None:
        self.policy = policy or HysteresisPolicy()
        self._keys: dict[RowKey, int] = {}
        self._identity: list[str] = []
        self._state = TrackState.empty(capacity)
        self._last_seen = np.full(capacity, np.nan)
        self._size = 0
        # device -> (layout signature, slot index per batch row); polls of one device
        # usually repeat the same rows in the same order, so the key lookups run once.
        self._layouts: dict[str, tuple[_Layout, np.ndarray]] = {}

    def __len__(self) -> int:
        return len(self._keys)

    def _grow(self, need: int) -> None:
        cap = self._state.condition.shape[0]
        if need <= cap:
            return
        new_cap = max(need, cap * 2)
        grown = TrackState.empty(new_cap)
        for name in ("condition", "since", "candidate", "candidate_since"):
            getattr(grown, name)[:cap] = getattr(self._state, name)
        self._state = grown
        last = np.full(new_cap, np.nan)
        last[:cap] = self._last_seen
        self._last_seen = last

    def slots(self, keys: Sequence[RowKey], identities: Sequence[str]) -> np.ndarray:
        """State slot per key, creating slots for new keys and resetting slots whose
        identity (module serial) changed."""
        idx = np.empty(len(keys), dtype=np.int64)
        fresh: list[int] = []
        for i, (key, ident) in enumerate(zip(keys, identities, strict=True)):
            slot = self._keys.get(key)
            if slot is None:
                slot = self._size
                self._size += 1
                self._grow(self._size)
                self._keys[key] = slot
                self._identity.append(ident)
                fresh.append(slot)
            elif self._identity[slot] != ident:
                self._identity[slot] = ident
                fresh.append(slot)
            idx[i] = slot
        if fresh:
            f = np.asarray(fresh)
            self._state.condition[f] = NO_CONDITION
            self._state.candidate[f] = NO_CONDITION
            self._state.since[f] = np.nan
            self._state.candidate_since[f] = np.nan
        return idx

    def update(
        self,
        keys: Sequence[RowKey],
        instant: np.ndarray,
        strict: np.ndarray,
        now: float,
        identities: Sequence[str] | None = None,
    ) -> np.ndarray:
        """Advance the given rows to time ``now``; returns their held conditions."""
        idx = self.slots(keys, identities if identities is not None else [""] * len(keys))
        return self._advance(idx, instant, strict, now)

    def update_batch(
        self, batch: ReadingBatch, instant: np.ndarray, strict: np.ndarray, now: float
    ) -> np.ndarray:
        """Advance every row of one poll; returns held conditions aligned with the rows."""
        signature: _Layout = (
            tuple((o.port, o.serial) for o in batch.optics),
            batch.optic.tobytes(),
            batch.lane.tobytes(),
            batch.quantity.tobytes(),
        )
        cached = self._layouts.get(batch.device)
        if cached is not None and cached[0] == signature:
            idx = cached[1]
        else:
            optics = batch.optics
            keys = [
                (batch.device, optics[o].port, int(lane), int(q))
                for o, lane, q in zip(batch.optic.tolist(), batch.lane.tolist(),
                                      batch.quantity.tolist(), strict=True)
            ]
            ids = [optics[o].serial for o in batch.optic.tolist()]
            idx = self.slots(keys, ids)
            self._layouts[batch.device] = (signature, idx)
        return self._advance(idx, instant, strict, now)

    def _advance(
        self, idx: np.ndarray, instant: np.ndarray, strict: np.ndarray, now: float
    ) -> np.ndarray:
        if idx.size == 0:
            return np.empty(0, dtype=np.int8)
        s = self._state
        before = TrackState(s.condition[idx], s.since[idx], s.candidate[idx],
                            s.candidate_since[idx])
        after = step(before, instant, strict, now, self.policy)
        s.condition[idx] = after.condition
        s.since[idx] = after.since
        s.candidate[idx] = after.candidate
        s.candidate_since[idx] = after.candidate_since
        self._last_seen[idx] = now
        return after.condition

    def get(self, key: RowKey) -> Tracked | None:
        slot = self._keys.get(key)
        if slot is None or self._state.condition[slot] == NO_CONDITION:
            return None
        s = self._state
        cand = int(s.candidate[slot])
        return Tracked(
            condition=Condition(int(s.condition[slot])),
            since=float(s.since[slot]),
            candidate=None if cand == NO_CONDITION else Condition(cand),
            candidate_since=None if cand == NO_CONDITION else float(s.candidate_since[slot]),
            last_seen=float(self._last_seen[slot]),
        )

    def prune(self, now: float, max_age_s: float) -> int:
        """Forget rows not seen for ``max_age_s`` (optics removed, devices retired).
        Returns how many were forgotten."""
        cutoff = now - max_age_s
        keep = [(k, slot) for k, slot in self._keys.items() if self._last_seen[slot] >= cutoff]
        forgotten = len(self._keys) - len(keep)
        if not forgotten:
            return 0
        order = np.asarray([slot for _, slot in keep], dtype=np.int64)
        s = self._state
        compact = TrackState.empty(max(len(order), 16))
        for name in ("condition", "since", "candidate", "candidate_since"):
            getattr(compact, name)[: len(order)] = getattr(s, name)[order]
        last = np.full(compact.condition.shape[0], np.nan)
        last[: len(order)] = self._last_seen[order]
        self._identity = [self._identity[slot] for _, slot in keep]
        self._keys = {k: i for i, (k, _) in enumerate(keep)}
        self._state, self._last_seen, self._size = compact, last, len(order)
        self._layouts.clear()
        return forgotten

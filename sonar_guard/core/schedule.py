"""Firing schedule: slots, cycle time, measured periods, crosstalk risk and detection latency.

Sensors fire one slot after another; sensors sharing a slot fire together. A slot lasts its
configured ``slot_duration`` or, when that is 0, the echo timeout 2R/c of its longest-range
sensor. A new obstacle that appears just after a sensor's slot is seen, at worst, one cycle
later plus the echo's flight time: ``cycle - own slot + 2R/c``.

Times in seconds, ranges in metres.
"""
from __future__ import annotations

from collections import deque
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
import math
import statistics

import numpy as np

from sonar_guard.core.acoustics import echo_timeout
from sonar_guard.core.config import Config, SensorConfig

__all__ = [
    'ClashDetector',
    'FiringSlot',
    'PeriodTracker',
    'Schedule',
    'SensorTiming',
    'estimated_firing_time',
    'infer_slots',
    'slot_need_s',
]

_CLASH_FRACTION = 0.9  # firings closer than this share of an echo timeout are a clash
_MIN_PERIODS = 5  # measured periods needed before they replace the configured cycle
_TOGETHER_SHARE = 0.5  # pulses in the air together this often: fired together by design


def slot_need_s(sensor: SensorConfig) -> float:
    """Return how long this sensor needs its slot to last, s."""
    if sensor.slot_duration_s > 0:
        return sensor.slot_duration_s
    return echo_timeout(sensor.max_range_m, sensor.air_temperature_c)


@dataclass(frozen=True, slots=True)
class FiringSlot:
    """One firing slot: which sensors fire in it and how long it lasts (s)."""

    slot: int
    sensors: tuple[str, ...]
    duration_s: float


@dataclass(frozen=True, slots=True)
class SensorTiming:
    """Timing budget of one sensor from the configured schedule (s, m)."""

    name: str
    slot: int
    echo_timeout_s: float
    blind_range_m: float
    cycle_s: float
    detection_latency_s: float


class Schedule:
    """The configured firing schedule of every sensor."""

    __slots__ = ('_timing', 'cycle_s', 'slots')

    def __init__(self, sensors: Sequence[SensorConfig]) -> None:
        by_slot: dict[int, list[SensorConfig]] = {}
        for s in sensors:
            by_slot.setdefault(s.slot, []).append(s)
        self.slots: tuple[FiringSlot, ...] = tuple(
            FiringSlot(k, tuple(s.name for s in group), max(slot_need_s(s) for s in group))
            for k, group in sorted(by_slot.items()))
        self.cycle_s: float = math.fsum(slot.duration_s for slot in self.slots)
        durations = {slot.slot: slot.duration_s for slot in self.slots}
        self._timing = {}
        for s in sensors:
            timeout = echo_timeout(s.max_range_m, s.air_temperature_c)
            self._timing[s.name] = SensorTiming(
                name=s.name, slot=s.slot, echo_timeout_s=timeout, blind_range_m=s.min_range_m,
                cycle_s=self.cycle_s,
                detection_latency_s=self.cycle_s - durations[s.slot] + timeout)

    @classmethod
    def from_config(cls, config: Config) -> Schedule:
        """Build the schedule of ``config``'s sensors."""
        return cls(config.sensors)

    def timing(self, name: str) -> SensorTiming:
        """Return the configured timing of sensor ``name``."""
        return self._timing[name]

    def timings(self) -> tuple[SensorTiming, ...]:
        """Return every sensor's timing in configuration order."""
        return tuple(self._timing.values())

    def slot_duration_s(self, name: str) -> float:
        """Return the duration of the slot sensor ``name`` fires in, s."""
        slot = self._timing[name].slot
        return next(s.duration_s for s in self.slots if s.slot == slot)


class PeriodTracker:
    """Measured time between one sensor's consecutive readings over a sliding window (s)."""

    __slots__ = ('_last', '_periods', '_worst')

    def __init__(self, window: int = 50) -> None:
        self._periods: deque[float] = deque(maxlen=window)
        self._last = math.nan
        self._worst: float | None = None

    def add(self, stamp_s: float) -> None:
        """Record a reading stamped ``stamp_s``."""
        if math.isfinite(self._last) and stamp_s > self._last:
            period = stamp_s - self._last
            periods = self._periods
            dropped = periods[0] if len(periods) == periods.maxlen else None
            periods.append(period)
            worst = self._worst
            if worst is not None:  # keep the window's maximum without rescanning it
                if period >= worst:
                    self._worst = period
                elif dropped == worst:
                    self._worst = None  # the maximum left the window: rescan when asked
        self._last = stamp_s

    def reset(self) -> None:
        """Forget every period (after a clock jump)."""
        self._periods.clear()
        self._last = math.nan
        self._worst = None

    @property
    def count(self) -> int:
        """How many periods the window holds."""
        return len(self._periods)

    @property
    def ready(self) -> bool:
        """True when enough periods were seen to trust the measurement."""
        return len(self._periods) >= _MIN_PERIODS

    @property
    def median_s(self) -> float:
        """Median period, s (NaN when none)."""
        return statistics.median(self._periods) if self._periods else math.nan

    @property
    def worst_s(self) -> float:
        """Longest period in the window, s (NaN when none)."""
        if not self._periods:
            return math.nan
        if self._worst is None:
            self._worst = max(self._periods)
        return self._worst


def estimated_firing_time(stamp_s: float, range_m: float, sensor: SensorConfig) -> float:
    """Estimate when the pulse left, from an echo-time stamp and its range, s.

    A finite in-range reading flew ``2r/c``; a reading at or beyond max_range waited the whole
    echo timeout; anything else (NaN, -inf) is taken as fired at its stamp.
    """
    timeout = echo_timeout(sensor.max_range_m, sensor.air_temperature_c)
    return _firing_time(stamp_s, range_m, timeout, sensor.max_range_m)


def _firing_time(stamp_s: float, range_m: float, timeout_s: float, max_range_m: float) -> float:
    """:func:`estimated_firing_time` with the echo timeout already known (hot path)."""
    if math.isnan(range_m) or range_m < 0:
        return stamp_s
    if range_m >= max_range_m:
        return stamp_s - timeout_s
    return stamp_s - timeout_s * range_m / max_range_m


class ClashDetector:
    """Flag sensors of different slots whose pulses are in the air at the same time."""

    __slots__ = ('_last_fire', '_max_range', '_slot', '_timeouts', '_window')

    def __init__(self, sensors: Sequence[SensorConfig]) -> None:
        self._slot = {s.name: s.slot for s in sensors}
        self._max_range = {s.name: s.max_range_m for s in sensors}
        self._timeouts = {s.name: echo_timeout(s.max_range_m, s.air_temperature_c)
                          for s in sensors}
        self._last_fire: dict[str, float] = {}
        # no clash is ever farther apart than this (the longest echo timeout's share), s
        self._window = _CLASH_FRACTION * max(self._timeouts.values(), default=0.0)

    def reset(self) -> None:
        """Forget every firing (after a clock jump)."""
        self._last_fire.clear()

    def check(self, name: str, stamp_s: float, range_m: float) -> tuple[str, float] | None:
        """Record a reading; return (other sensor, gap s) when it clashes with one, else None.

        Readings whose flight time is unknown (NaN, -inf, negative) neither raise nor count
        toward a clash: their firing time cannot be estimated.
        """
        if math.isnan(range_m) or range_m < 0:
            return None
        timeout = self._timeouts[name]
        fire = _firing_time(stamp_s, range_m, timeout, self._max_range[name])
        last_fire = self._last_fire
        last_fire[name] = fire
        slots, timeouts = self._slot, self._timeouts
        slot = slots[name]
        worst: tuple[str, float] | None = None
        nearest = self._window
        for other, other_fire in last_fire.items():
            gap = fire - other_fire
            size = gap if gap >= 0 else -gap
            if size >= nearest or slots[other] == slot:  # same slot includes this sensor
                continue
            if size < _CLASH_FRACTION * (timeouts[other] if gap >= 0 else timeout):
                worst, nearest = (other, gap), size
        return worst


def infer_slots(firings_s: Mapping[str, Sequence[float]],
                timeouts_s: Mapping[str, float]) -> dict[str, int]:
    """Guess the firing slots of sensors from when their pulses left (s), when none are given.

    Two sensors whose pulses were in the air together (closer than the clash rule of
    :class:`ClashDetector`) in at least half of the readings of each are taken as sharing a
    slot by design; sharing is transitive. Slots are numbered in the order the groups first
    fired. A clash is then what happens against that habit, not the habit itself.
    """
    names = [n for n in firings_s if len(firings_s[n])]
    times = {n: np.sort(np.asarray(firings_s[n], dtype=np.float64)) for n in names}
    group = {n: n for n in firings_s}

    def root(n: str) -> str:
        while group[n] != n:
            group[n] = group[group[n]]
            n = group[n]
        return n

    for i, a in enumerate(names):
        for b in names[i + 1:]:
            if (_together_share(times[a], times[b], timeouts_s[a], timeouts_s[b])
                    >= _TOGETHER_SHARE
                    and _together_share(times[b], times[a], timeouts_s[b], timeouts_s[a])
                    >= _TOGETHER_SHARE):
                group[root(b)] = root(a)
    first: dict[str, float] = {}
    for n in firings_s:
        start = float(times[n][0]) if n in times else math.inf
        first[root(n)] = min(first.get(root(n), math.inf), start)
    order = sorted(first, key=lambda r: (first[r], r))
    return {n: order.index(root(n)) for n in firings_s}


def _together_share(a: np.ndarray, b: np.ndarray, timeout_a_s: float,
                    timeout_b_s: float) -> float:
    """Return the share of firings in ``a`` with a firing of ``b`` in the air at once."""
    if a.size == 0 or b.size == 0:
        return 0.0
    k = np.searchsorted(b, a)  # b[k - 1] < a <= b[k]
    before = a - b[np.maximum(k - 1, 0)]  # how long the last earlier b had been in the air
    after = b[np.minimum(k, b.size - 1)] - a  # how long until the next b left
    close = (((k > 0) & (before < _CLASH_FRACTION * timeout_b_s))
             | ((k < b.size) & (after < _CLASH_FRACTION * timeout_a_s)))
    return float(np.count_nonzero(close)) / a.size

"""The engine: readings, odometry and clock ticks in; verdicts, a speed limit and events out.

Time is always an argument. The live node passes ROS time (receive time of each message and
timer ticks); the offline checker passes bag times. For the same input stream both get the
same verdicts, limits and events.

How the limit is found, for the current direction of travel:

* the sensors whose beam cone meets the corridor the footprint sweeps in that direction cover
  it (geometry); no covering sensor, a silent or untrusted one, or stale odometry means
  ``fallback_speed``;
* each covering sensor bounds the speed by
  ``max_safe_speed(free distance, detection latency + reaction time + reading age, decel,
  margin)``. A reading r puts the nearest echo somewhere on the arc of radius r across the
  cone; the free distance is how far the footprint can travel along the heading before it
  reaches the part of that arc inside the corridor it sweeps (a side wall seen at the cone's
  edge does not limit travel past it). Blind readings count as r = 0, no echo as max range;
* an obstacle that was closing in and then vanished into no echo (a lost echo, or an object
  inside the ring-down range) is remembered and dead-reckoned with odometry until a trusted
  reading clears it;
* the limit is the smallest bound, capped by ``max_speed``; it drops at once and rises at most
  at ``rise_rate``.

Units: seconds, metres, m/s, m/s^2, radians.
"""
from __future__ import annotations

from collections import deque
from collections.abc import Iterable
from dataclasses import dataclass, field
import math
from typing import Any, NamedTuple

import numpy as np

from sonar_guard.core.acoustics import echo_timeout
from sonar_guard.core.braking import max_safe_speed_unchecked
from sonar_guard.core.config import Config, SensorConfig
from sonar_guard.core.geometry import (
    Footprint,
    Mount,
    beam_axis,
    coverage,
    heading_index,
    travel_to_arc,
    uniform_headings,
)
from sonar_guard.core.readings import Motion, RangeReading, ReadingCheck, ReadingValidator, Verdict
from sonar_guard.core.schedule import ClashDetector, PeriodTracker, Schedule

__all__ = [
    'Decision',
    'EVENT_KINDS',
    'Event',
    'Monitor',
    'OdometrySample',
    'SensorStatus',
    'mount_of',
]

EVENT_KINDS: tuple[str, ...] = (
    'blind', 'no_echo', 'invalid', 'stale', 'stuck', 'jump', 'late', 'slot_clash', 'overspeed')

STILL_SPEED_MPS = 0.02  # below this the direction of travel is kept, not re-read
CLOCK_JUMP_S = 0.5  # time going back more than this resets every history
HOLONOMIC_HEADINGS = 72  # 5 degree steps
TABLE_STEP_M = 0.01  # range step of the precomputed travel tables
TREND_S = 0.5  # readings only: a range falling over this long means closing in
_STRETCH_KINDS = {Verdict.BLIND: 'blind', Verdict.INVALID: 'invalid', Verdict.STALE: 'stale',
                  Verdict.STUCK: 'stuck'}  # 'late' follows ReadingCheck.late, any verdict


class OdometrySample(NamedTuple):
    """Body velocity from nav_msgs/Odometry twist (m/s, rad/s) and its times (s)."""

    stamp_s: float
    vx_mps: float
    vy_mps: float
    wz_radps: float
    arrival_s: float


@dataclass(frozen=True, slots=True)
class Event:
    """A finding: what kind, which sensor (None: the robot), when (s) and the numbers."""

    kind: str
    sensor: str | None
    t_start: float
    t_end: float
    detail: str

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form of the contract (kind, sensor, t_start, t_end, detail)."""
        return {'kind': self.kind, 'sensor': self.sensor, 't_start': self.t_start,
                't_end': self.t_end, 'detail': self.detail}


class Decision(NamedTuple):
    """The speed limit at one instant and why."""

    time_s: float
    limit_mps: float
    target_mps: float
    heading_rad: float
    reason: str
    limiting_sensor: str | None
    covering: tuple[str, ...]
    speed_mps: float
    odometry_fresh: bool
    fallback: bool = False  # True when sensing or odometry failed and fallback_speed applies


@dataclass(frozen=True, slots=True)
class SensorStatus:
    """What the engine knows of one sensor now, for diagnostics and reports."""

    name: str
    verdict: Verdict | None
    reason: str
    last_range_m: float
    silent_for_s: float
    silent: bool
    free_distance_m: float
    memory_m: float | None
    latency_s: float
    period_median_s: float
    period_worst_s: float
    counts: dict[str, int] = field(default_factory=dict)


def mount_of(sensor: SensorConfig) -> Mount:
    """Return the geometry mount of a configured sensor."""
    return Mount(sensor.x_m, sensor.y_m, sensor.z_m, sensor.yaw_rad, sensor.field_of_view_rad,
                 sensor.max_range_m)


class _OpenEvent:
    __slots__ = ('detail', 'kind', 'sensor', 't_last', 't_start')

    def __init__(self, kind: str, sensor: str | None, t: float, detail: str) -> None:
        self.kind, self.sensor, self.t_start, self.t_last, self.detail = kind, sensor, t, t, detail


class _SensorState:
    """Everything the engine remembers about one sensor."""

    __slots__ = ('axis', 'check', 'closing', 'config', 'counts', 'footprint', 'heard_stamp',
                 'configured_latency_s', 'last_ok_range', 'latency_s', 'memory_m',
                 'memory_since', 'memory_stamp', 'periods', 'recent', 'seen_m', 'seen_stamp',
                 'slot_s', 'tables', 'timeout_s', 'travel_memo', 'validator')

    def __init__(self, config: SensorConfig, footprint: Footprint, stale_after_s: float) -> None:
        self.tables: dict[float, list[float]] = {}  # heading -> travel per TABLE_STEP_M of range
        self.travel_memo = (math.nan, math.nan, math.nan)  # (range, heading, travel) last asked
        self.slot_s = 0.0  # length of this sensor's slot, s (set from the schedule)
        self.configured_latency_s = 0.0  # worst-case detection latency of the schedule, s
        self.latency_s = 0.0  # detection latency now: measured when possible, else configured
        self.validator = ReadingValidator(config, stale_after_s=stale_after_s)
        self.configure(config, footprint, stale_after_s)
        self.periods = PeriodTracker()
        self.counts = {v.value: 0 for v in Verdict}
        self.reset()

    def configure(self, config: SensorConfig, footprint: Footprint, stale_after_s: float) -> None:
        self.config = config
        self.axis = beam_axis(mount_of(config))
        self.footprint = footprint
        self.tables = {}  # the mount may have moved: travel tables are rebuilt on demand
        self.travel_memo = (math.nan, math.nan, math.nan)
        self.timeout_s = echo_timeout(config.max_range_m, config.air_temperature_c)
        self.validator.configure(config, stale_after_s=stale_after_s)

    def reset(self) -> None:
        self.validator.reset()
        self.periods.reset()
        self.latency_s = self.configured_latency_s
        self.check: ReadingCheck | None = None
        self.heard_stamp: float | None = None
        self.seen_m = math.nan  # effective range of the last usable reading, m
        self.seen_stamp = math.nan
        self.last_ok_range: float | None = None
        self.closing = False
        self.recent: deque[tuple[float, float]] = deque()  # (stamp s, range m), readings only
        self.memory_m: float | None = None
        self.memory_stamp = math.nan
        self.memory_since = math.nan  # when the obstacle's echo was lost

    def clip_range(self, range_m: float) -> float:
        """Clip a range to what the sensor can report (its effective range, m)."""
        return max(0.0, min(range_m, self.config.max_range_m))

    def travel(self, range_m: float, heading: float) -> float:
        """Return how far the robot may travel along ``heading`` before it reaches the arc
        of a reading ``range_m`` (inf: the arc lies outside the swept corridor), m."""
        memo_range, memo_heading, memo_travel = self.travel_memo
        if range_m == memo_range and heading == memo_heading:
            return memo_travel  # ticks between readings ask the same question again
        table = self.tables.get(heading)
        if table is None:
            grid = np.arange(0.0, self.config.max_range_m + 2 * TABLE_STEP_M, TABLE_STEP_M)
            table = travel_to_arc(mount_of(self.config), self.footprint, heading, grid).tolist()
            self.tables[heading] = table
        x = max(0.0, range_m) / TABLE_STEP_M
        i = min(int(x), len(table) - 2)
        a, b = table[i], table[i + 1]
        if math.isinf(a) or math.isinf(b):
            travel = min(a, b)  # at the corridor's edge take the finite, nearer bound
        else:
            travel = a + (b - a) * (x - i)
        self.travel_memo = (range_m, heading, travel)
        return travel

    def refresh_latency(self) -> None:
        """Recompute the detection latency after a new period or a new schedule, s."""
        periods = self.periods
        self.latency_s = (periods.worst_s - self.slot_s + self.timeout_s if periods.ready
                          else self.configured_latency_s)


class Monitor:
    """Keep per-sensor state and decide the speed limit; see the module docstring.

    Feed it with :meth:`on_range`, :meth:`on_odometry` and :meth:`tick`, each with times in
    seconds; collect findings with :meth:`pop_events` and :meth:`finish`.

    ``readings_only=True`` is for a configuration whose mounts, footprint and brakes are not
    known (made up): the engine then judges only what the readings themselves show. It gives
    no ``stuck`` verdicts (they need the mount's direction to know the robot moved along the
    beam) and no ``overspeed`` findings (they need the robot's brakes), and the robot's own
    motion no longer counts as closing in on an echo. The limit it still computes rests on the
    made-up values: a caller in this mode must not present it.
    """

    def __init__(self, config: Config, *, readings_only: bool = False) -> None:
        self.readings_only = readings_only
        lim = config.limits
        self._states = {s.name: _SensorState(s, config.robot.footprint, lim.stale_after_s)
                        for s in config.sensors}
        self._clash = ClashDetector(config.sensors)
        self._derive(config)
        self.clock_resets = 0
        self._closed: list[Event] = []
        self._open: dict[tuple[str, str | None], _OpenEvent] = {}
        # the open kinds of each sensor, in opening order (an index into _open)
        self._open_kinds: dict[str | None, dict[str, None]] = {}
        self._start = math.nan
        self._heard_floor = -math.inf  # no sensor was heard last before this (s): lower bound
        self._reset_motion()

    def _derive(self, config: Config) -> None:
        """Compute everything that follows from the configuration alone."""
        self.config = config
        self.schedule = Schedule.from_config(config)
        for name, st in self._states.items():  # cached: read for every covering sensor, every tick
            st.slot_s = self.schedule.slot_duration_s(name)
            st.configured_latency_s = self.schedule.timing(name).detection_latency_s
            st.refresh_latency()
        count = HOLONOMIC_HEADINGS if config.robot.holonomic else 2
        self._headings = uniform_headings(count)
        table = coverage([mount_of(s) for s in config.sensors], config.robot.footprint,
                         self._headings)
        names = config.sensor_names
        self._covering: tuple[tuple[str, ...], ...] = tuple(
            tuple(n for n, c in zip(names, row) if c) for row in np.asarray(table, dtype=bool))

    def reconfigure(self, config: Config) -> None:
        """Take new limits, braking, thresholds or mounts at once, keeping every history.

        The sensor list and the footprint must stay the same (a restart changes those).
        """
        if config.sensor_names != self.config.sensor_names:
            raise ValueError('the sensor list cannot change at run time: restart the monitor')
        if config.robot.footprint != self.config.robot.footprint:
            raise ValueError('the footprint cannot change at run time: restart the monitor')
        for s in config.sensors:
            self._states[s.name].configure(s, config.robot.footprint,
                                           config.limits.stale_after_s)
        self._clash = ClashDetector(config.sensors)
        self._derive(config)

    # ------------------------------------------------------------------ inputs

    def _reset_motion(self) -> None:
        self._now = -math.inf
        self._odom: OdometrySample | None = None
        self._pose = Motion()
        self._heading = 0.0
        # start where silence leaves it: the fallback, then rise as trusted readings come in
        lim = self.config.limits
        self._limit = min(lim.fallback_speed_mps, lim.max_speed_mps)
        self._limit_time = math.nan
        self._excess_since: float | None = None
        self._excess_allow = 0.0
        self._excess_peak = 0.0

    def _advance(self, now_s: float) -> None:
        if not math.isfinite(now_s):
            return
        if now_s < self._now - CLOCK_JUMP_S:
            self._close_all(self._now)
            for st in self._states.values():
                st.reset()
            self._clash.reset()
            self._reset_motion()
            self._start = now_s
            self._heard_floor = -math.inf
            self.clock_resets += 1
        if math.isnan(self._start):
            self._start = now_s
        self._now = max(self._now, now_s)

    def on_range(self, reading: RangeReading) -> ReadingCheck:
        """Judge one reading and update the sensor's state; return the verdict."""
        st = self._states.get(reading.sensor)
        if st is None:
            raise KeyError(f'unknown sensor {reading.sensor!r}; configured: '
                           f'{", ".join(self._states)}')
        self._advance(reading.arrival_s)
        check = st.validator.check(reading, None if self.readings_only else self._pose)
        st.check = check
        v = check.verdict
        st.counts[v._value_] += 1  # _value_: the plain attribute behind .value (hot path)
        name = reading.sensor
        t = reading.stamp_s
        if v in (Verdict.INVALID, Verdict.STALE):
            # discarded: neither the free distance nor the period and clash estimates move
            self._stretch(name, _STRETCH_KINDS[v], t, check.reason)
            self._close_other_stretches(name, keep=(_STRETCH_KINDS[v], 'stale', 'no_echo'))
            return check
        st.periods.add(t)
        st.refresh_latency()
        clash = self._clash.check(name, t, reading.range_m)
        if clash is not None:
            other, gap = clash
            self._stretch(name, 'slot_clash', t,
                          f'fired {abs(gap) * 1e3:.1f} ms {"after" if gap >= 0 else "before"} '
                          f'{other} (echo timeout {st.timeout_s * 1e3:.1f} ms)')
        else:
            self._close(name, 'slot_clash')
        self._apply(st, check)
        if v is Verdict.OK and not check.late:  # the common case: nothing opens
            if self._open_kinds.get(name):
                self._close_other_stretches(name, keep=())
            return check
        keep = set()
        if v is Verdict.NO_ECHO and st.memory_m is not None and ('no_echo', name) in self._open:
            self._open[('no_echo', name)].t_last = t
            keep.add('no_echo')
        kind = _STRETCH_KINDS.get(v)
        if kind is not None:
            self._stretch(name, kind, t, check.reason)
            keep.add(kind)
        if check.late:
            self._stretch(name, 'late', t,
                          f'arrived {reading.arrival_s - t:.3f} s after its stamp '
                          f'> late_after {st.config.late_after_s:g} s')
            keep.add('late')
        if v is Verdict.JUMP:  # only finite stamps get this far
            self._closed.append(Event('jump', name, t, t, check.reason))
        self._close_other_stretches(name, keep=tuple(keep))
        return check

    def _apply(self, st: _SensorState, check: ReadingCheck) -> None:
        """Update the free distance and the lost-obstacle memory from a usable reading."""
        v, r, t = check.verdict, check.range_m, check.stamp_s
        cfg = st.config
        st.heard_stamp = t  # the sensor is talking, even when what it says is stuck
        if v is Verdict.STUCK:
            return  # stuck readings say nothing; the sensor is untrusted until they change
        if v in (Verdict.OK, Verdict.LATE):
            previous = st.last_ok_range
            if self.readings_only:
                st.closing = self._closing_trend(st, r, t)
            else:
                along = self._speed_along(st)
                st.closing = ((previous is not None and previous - r > cfg.resolution_m)
                              or along > STILL_SPEED_MPS)
            st.last_ok_range = r
            st.seen_m, st.seen_stamp = st.clip_range(r), t
            st.memory_m = None
        elif v is Verdict.JUMP:
            new_free = st.clip_range(r)
            if not math.isfinite(st.seen_m) or new_free < st.seen_m:
                st.seen_m, st.seen_stamp = new_free, t
            # else: keep the nearer, older range with its own (older) stamp
            st.last_ok_range = r
            st.closing = False
        elif v is Verdict.BLIND:
            st.seen_m, st.seen_stamp = 0.0, t
            st.memory_m, st.memory_stamp, st.memory_since = 0.0, t, t
            st.closing = True
        elif v is Verdict.NO_ECHO:
            previous_verdict_closing = st.closing and st.last_ok_range is not None
            if st.memory_m is None and previous_verdict_closing:
                # carry the last free distance forward to now if the robot kept closing in
                closing_mps = max(0.0, self._speed_along(st))
                st.memory_m = max(0.0, st.seen_m - closing_mps * max(0.0, t - st.seen_stamp))
                st.memory_stamp = st.memory_since = t
                kept = ('' if self.readings_only else
                        f'; kept at {st.memory_m:.2f} m until a trusted echo')
                self._stretch(cfg.name, 'no_echo', t,
                              f'echo lost at {st.last_ok_range:.3f} m while closing in{kept}')
            st.closing = False
            st.last_ok_range = None
            st.recent.clear()
            st.seen_m, st.seen_stamp = st.clip_range(cfg.max_range_m), t

    @staticmethod
    def _closing_trend(st: _SensorState, range_m: float, stamp_s: float) -> bool:
        """Return True when the range fell by more than twice the resolution over the last
        TREND_S (readings only: without the mount's direction, odometry cannot tell)."""
        recent = st.recent
        while recent and stamp_s - recent[0][0] > TREND_S:
            recent.popleft()
        closing = bool(recent) and recent[0][1] - range_m > 2 * st.config.resolution_m
        recent.append((stamp_s, range_m))
        return closing

    def _speed_along(self, st: _SensorState) -> float:
        if self._odom is None or self.readings_only:  # the axis is made up: no motion along it
            return 0.0
        return self._odom.vx_mps * float(st.axis[0]) + self._odom.vy_mps * float(st.axis[1])

    def on_odometry(self, sample: OdometrySample) -> None:
        """Take body velocity from odometry; dead-reckon pose and remembered obstacles."""
        self._advance(sample.arrival_s)
        values = (sample.stamp_s, sample.vx_mps, sample.vy_mps, sample.wz_radps,
                  sample.arrival_s)
        if not all(math.isfinite(v) for v in values):
            # refused whole: a non-finite arrival would keep odometry 'fresh' for ever
            self._stretch(None, 'invalid', sample.arrival_s,
                          f'odometry not finite: stamp={sample.stamp_s!r} '
                          f'vx={sample.vx_mps!r} vy={sample.vy_mps!r} wz={sample.wz_radps!r} '
                          f'arrival={sample.arrival_s!r}')
            return
        self._close(None, 'invalid')
        previous = self._odom
        self._odom = sample
        self._close(None, 'stale')
        if previous is None:
            return
        dt = sample.stamp_s - previous.stamp_s
        if not 0 < dt <= self.config.limits.odom_stale_after_s:
            return
        vx, vy, wz = previous.vx_mps, previous.vy_mps, previous.wz_radps
        th = self._pose.theta_rad
        c, s = math.cos(th), math.sin(th)
        self._pose = Motion(self._pose.x_m + (c * vx - s * vy) * dt,
                            self._pose.y_m + (s * vx + c * vy) * dt, th + wz * dt)
        hold = self.config.limits.memory_hold_s
        for st in self._states.values():
            if st.memory_m is None:
                continue
            if hold > 0 and sample.stamp_s - st.memory_since > hold:
                st.memory_m = None  # held long enough without a trusted echo (memory_hold)
                continue
            along = vx * float(st.axis[0]) + vy * float(st.axis[1])
            moved = along * max(0.0, sample.stamp_s - max(previous.stamp_s, st.memory_stamp))
            st.memory_m = max(0.0, st.memory_m - moved)
            st.memory_stamp = max(st.memory_stamp, sample.stamp_s)
            if st.memory_m > st.config.max_range_m:
                st.memory_m = None  # receded out of the sensor's reach

    # ------------------------------------------------------------------ decisions

    def tick(self, now_s: float) -> Decision:
        """Advance the clock to ``now_s``, update silence and overspeed, and decide the limit."""
        self._advance(now_s)
        now = self._now
        lim = self.config.limits
        stale_after = lim.stale_after_s
        if now - self._heard_floor > stale_after:  # someone may be silent: look at each
            floor = math.inf
            for name, st in self._states.items():
                since = st.heard_stamp if st.heard_stamp is not None else self._start
                floor = min(floor, since)
                if now - since > stale_after:
                    if ('stale', name) not in self._open:
                        self._stretch(name, 'stale', since,
                                      f'no usable reading for more than {stale_after:g} s')
                    self._open[('stale', name)].t_last = now
            self._heard_floor = floor
        odom_fresh = self._odometry_fresh(now)
        if not odom_fresh:
            since = self._odom.arrival_s if self._odom is not None else self._start
            if now - since > lim.odom_stale_after_s:
                if ('stale', None) not in self._open:
                    self._stretch(None, 'stale', since,
                                  f'no odometry for more than {lim.odom_stale_after_s:g} s')
                self._open[('stale', None)].t_last = now
        speed = 0.0
        if self._odom is not None:
            vx, vy = self._odom.vx_mps, self._odom.vy_mps
            speed = math.hypot(vx, vy)
            if speed > STILL_SPEED_MPS:
                self._heading = self.heading_of(vx, vy)
        target, reason, limiting, covering, fallback = self._bound(self._heading, now,
                                                                    odom_fresh)
        self._limit = self._rise_limited(target, now)
        if odom_fresh and not self.readings_only:
            self._check_overspeed(speed, now)
        return Decision(time_s=now, limit_mps=self._limit, target_mps=target,
                        heading_rad=self._heading, reason=reason, limiting_sensor=limiting,
                        covering=covering, speed_mps=speed, odometry_fresh=odom_fresh,
                        fallback=fallback)

    def heading_of(self, vx_mps: float, vy_mps: float) -> float:
        """Return the travel heading of a body velocity, rad in [0, 2pi): any direction for a
        holonomic base, else forward (0) or reverse (pi) by the sign of vx."""
        if self.config.robot.holonomic:
            return math.atan2(vy_mps, vx_mps) % (2 * math.pi)
        return 0.0 if vx_mps >= 0 else math.pi

    def limit_for(self, heading_rad: float, now_s: float) -> float:
        """Return the instantaneous limit (no rise limiting) for travel along a heading, m/s."""
        return self._bound(heading_rad, now_s, self._odometry_fresh(now_s))[0]

    def _odometry_fresh(self, now: float) -> bool:
        return (self._odom is not None
                and now - self._odom.arrival_s <= self.config.limits.odom_stale_after_s)

    def covering(self, heading_rad: float) -> tuple[str, ...]:
        """Return the sensors that cover travel along ``heading_rad``."""
        return self._covering[heading_index(heading_rad, len(self._headings))]

    def _canonical(self, heading: float) -> float:
        return float(self._headings[heading_index(heading, len(self._headings))])

    def detection_latency_s(self, name: str) -> float:
        """Worst-case detection latency of one sensor: measured when possible, else configured."""
        return self._states[name].latency_s

    def _bound(self, heading: float, now: float, odom_fresh: bool
               ) -> tuple[float, str, str | None, tuple[str, ...], bool]:
        """Return (limit, reason, limiting sensor, covering sensors, fell back) for a heading."""
        lim = self.config.limits
        robot = self.config.robot
        index = heading_index(heading, len(self._headings))
        covering = self._covering[index]
        heading = float(self._headings[index])  # the canonical heading: one table each
        fallback = min(lim.fallback_speed_mps, lim.max_speed_mps)
        if not odom_fresh:
            return fallback, 'odometry stale or missing', None, covering, True
        if not covering:
            return fallback, 'no sensor covers this direction', None, covering, True
        best, limiting, fell_back = lim.max_speed_mps, None, False
        why = ''  # set when a silent or stuck sensor limits
        best_free = best_latency = 0.0
        states = self._states
        stale_after, margin = lim.stale_after_s, lim.margin_m
        reaction, decel = robot.reaction_time_s, robot.decel_mps2
        for name in covering:
            st = states[name]
            heard = st.heard_stamp
            silent = heard is None or now - heard > stale_after
            if silent or (st.check is not None and st.check.verdict is Verdict.STUCK):
                fell_back = True
                if fallback <= best:
                    best, limiting, why = fallback, name, 'silent' if silent else 'stuck'
                continue
            seen = st.seen_m if st.memory_m is None else min(st.seen_m, st.memory_m)
            free = st.travel(seen, heading)
            age = now - st.seen_stamp
            latency = st.latency_s + reaction + (age if age > 0.0 else 0.0)
            # inputs are validated already: the unchecked form of max_safe_speed (hot path)
            speed = max_safe_speed_unchecked(free - margin, latency, decel)
            if speed < best:
                best, limiting, why = speed, name, ''
                best_free, best_latency = free, latency
        if limiting is None:
            reason = 'clear'
        elif why:
            reason = f'{limiting} {why}'
        else:
            remembered = ' (remembered)' if states[limiting].memory_m is not None else ''
            reason = (f'{limiting}: {best_free:.2f} m free{remembered}, '
                      f'latency {best_latency:.3f} s')
        return min(best, lim.max_speed_mps), reason, limiting, covering, fell_back

    def _rise_limited(self, target: float, now: float) -> float:
        if target <= self._limit:
            self._limit_time = now
            return target
        if math.isnan(self._limit_time):  # first decision: rise from the starting limit
            self._limit_time = now
            return self._limit
        dt = max(0.0, now - self._limit_time)
        self._limit_time = now
        return min(target, self._limit + self.config.limits.rise_rate_mps2 * dt)

    def _check_overspeed(self, speed: float, now: float) -> None:
        lim = self.config.limits
        excess = speed - self._limit
        if excess <= lim.overspeed_tolerance_mps:
            if self._excess_since is not None:
                self._close(None, 'overspeed', now)
            self._excess_since = None
            return
        if self._excess_since is None:
            self._excess_since = now
            self._excess_peak = 0.0
            self._excess_allow = (lim.overspeed_grace_s + self.config.robot.reaction_time_s
                                  + excess / self.config.robot.decel_mps2)
        self._excess_peak = max(self._excess_peak, excess)
        if now - self._excess_since > self._excess_allow:
            detail = (f'speed up to {self._excess_peak:.2f} m/s above the limit for longer '
                      f'than the {self._excess_allow:.2f} s braking allowance')
            self._stretch(None, 'overspeed', self._excess_since, detail)
            self._open[('overspeed', None)].t_last = now

    # ------------------------------------------------------------------ status and events

    def status(self, name: str, now_s: float) -> SensorStatus:
        """Return what the engine knows of sensor ``name`` at ``now_s``."""
        st = self._states[name]
        lim = self.config.limits
        since = st.heard_stamp
        silent_for = math.inf if since is None else max(0.0, now_s - since)
        check = st.check
        return SensorStatus(
            name=name, verdict=None if check is None else check.verdict,
            reason='no reading yet' if check is None else check.reason,
            last_range_m=math.nan if check is None else check.range_m,
            silent_for_s=silent_for, silent=silent_for > lim.stale_after_s,
            free_distance_m=(st.travel(st.seen_m, self._canonical(self._heading))
                             if math.isfinite(st.seen_m) else math.nan),
            memory_m=st.memory_m,
            latency_s=self.detection_latency_s(name), period_median_s=st.periods.median_s,
            period_worst_s=st.periods.worst_s, counts=dict(st.counts))

    def verdict_counts(self, name: str) -> dict[str, int]:
        """Return how many readings of sensor ``name`` got each verdict so far (a copy)."""
        return dict(self._states[name].counts)

    def statuses(self, now_s: float) -> tuple[SensorStatus, ...]:
        """Return every sensor's status in configuration order."""
        return tuple(self.status(n, now_s) for n in self._states)

    def open_events(self) -> tuple[Event, ...]:
        """Return findings still in progress (t_end is the latest time seen so far)."""
        return tuple(Event(e.kind, e.sensor, e.t_start, e.t_last, e.detail)
                     for e in self._open.values())

    def pop_events(self) -> list[Event]:
        """Return and forget the findings that ended since the last call."""
        out, self._closed = self._closed, []
        return out

    def finish(self) -> list[Event]:
        """Close every open finding at its last time seen and return all not yet popped."""
        self._close_all(None)
        return self.pop_events()

    def _stretch(self, sensor: str | None, kind: str, t: float, detail: str) -> None:
        if not math.isfinite(t):  # a broken stamp: place the finding at the engine's clock
            t = self._now if math.isfinite(self._now) else 0.0
        ev = self._open.get((kind, sensor))
        if ev is None:
            self._open[(kind, sensor)] = _OpenEvent(kind, sensor, t, detail)
            self._open_kinds.setdefault(sensor, {})[kind] = None
        else:
            ev.t_last = max(ev.t_last, t)

    def _close(self, sensor: str | None, kind: str, t_end: float | None = None) -> None:
        ev = self._open.pop((kind, sensor), None)
        if ev is not None:
            del self._open_kinds[sensor][kind]
            end = ev.t_last if t_end is None or not math.isfinite(t_end) else max(ev.t_last,
                                                                                   t_end)
            self._closed.append(Event(kind, sensor, ev.t_start, end, ev.detail))

    def _close_other_stretches(self, sensor: str, keep: Iterable[str]) -> None:
        kinds = self._open_kinds.get(sensor)
        if not kinds:
            return
        keep = set(keep) | {'slot_clash'}
        for kind in [k for k in kinds if k not in keep]:
            self._close(sensor, kind)

    def _close_all(self, t_end: float | None) -> None:
        for kind, who in list(self._open):
            self._close(who, kind, t_end)

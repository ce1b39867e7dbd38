"""The engine under arbitrary input streams: it never raises, always answers sanely, and never
allows more speed than an independent brute-force model of the latest readings allows.

Every hypothesis test is derandomized (the same examples on every run, so CI never flakes);
together they run a few thousand streams.
"""
from __future__ import annotations

import copy
from dataclasses import dataclass
from functools import cache
import math
import os

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
import numpy as np
import pytest
from testkit import make_config

from sonar_guard.core.monitor import EVENT_KINDS, Monitor, OdometrySample
from sonar_guard.core.readings import RangeReading, Verdict

CONFIG = make_config({'limits.memory_hold': 0.5})
NAMES = CONFIG.sensor_names
MAX = CONFIG.limits.max_speed_mps


# SONAR_GUARD_FUZZ_SCALE=20 runs twenty times the streams, new random ones each run (local use)
_SCALE = float(os.environ.get('SONAR_GUARD_FUZZ_SCALE', '0') or 0)


def fuzz(examples: int) -> settings:
    """Return the settings of a fuzz test: ``examples`` streams, the same on every run."""
    return settings(max_examples=max(1, round(examples * (_SCALE or 1))), deadline=None,
                    derandomize=not _SCALE, database=None,
                    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])


wild = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True),
    st.floats(-1.0, 6.0),
    st.sampled_from([0.0, -0.0, 0.15, 3.99, 4.0, math.inf, -math.inf, math.nan, 1e300]),
)
step = st.one_of(st.floats(-5.0, 5.0), st.sampled_from([0.0, -100.0, 100.0, 1e-9]),
                 st.floats(0.001, 0.1))
operation = st.one_of(
    st.tuples(st.just('range'), st.sampled_from(NAMES), step, wild, st.floats(-0.5, 1.0)),
    st.tuples(st.just('odom'), wild, wild, wild, step),
    st.tuples(st.just('tick'), step),
    st.tuples(st.just('raw'), st.sampled_from(NAMES), wild, wild, wild),  # any stamp at all
)


def run(ops):
    """Feed the operations; return the monitor and every decision made."""
    m = Monitor(CONFIG)
    t = 1000.0
    decisions = []
    for op in ops:
        if op[0] == 'range':
            _, name, dt, r, delay = op
            t += dt
            m.on_range(RangeReading(name, t, r, t + delay))
        elif op[0] == 'odom':
            _, vx, wz, vy, dt = op
            t += dt
            m.on_odometry(OdometrySample(t, vx, vy, wz, t))
        elif op[0] == 'raw':
            _, name, stamp, arrival, r = op
            m.on_range(RangeReading(name, stamp, r, arrival))
            m.on_odometry(OdometrySample(stamp, r, r, r, arrival))
        else:
            t += op[1]
        decisions.append(m.tick(t))
    return m, decisions


def assert_events_well_formed(events, names) -> None:
    """Every finding names a known kind and sensor, with finite ordered times and a detail."""
    for e in events:
        assert e.kind in EVENT_KINDS, e
        assert e.sensor is None or e.sensor in names, e
        assert math.isfinite(e.t_start) and math.isfinite(e.t_end), e
        assert e.t_start <= e.t_end, e
        assert isinstance(e.detail, str) and e.detail, e


@fuzz(400)
@given(st.lists(operation, max_size=60))
def test_any_stream_gives_a_limit_within_zero_and_max_speed(ops):
    """NaN, infinities, negative and huge ranges, clock jumps: no exception, limit in range."""
    _, decisions = run(ops)
    for d in decisions:
        assert 0.0 <= d.limit_mps <= MAX
        assert 0.0 <= d.target_mps <= MAX
        assert math.isfinite(d.limit_mps)


@fuzz(300)
@given(st.lists(operation, max_size=60))
def test_events_are_well_formed_and_all_closed_at_the_end(ops):
    """Every finding names a known kind and sensor, with finite ordered times."""
    m, _ = run(ops)
    events = m.pop_events() + m.finish()
    assert not m.open_events()
    assert_events_well_formed(events, NAMES)


@fuzz(200)
@given(st.lists(operation, max_size=40), st.floats(0.0, 2 * math.pi))
def test_status_and_limit_for_any_heading_never_raise(ops, heading):
    """Diagnostics and the command gate's per-heading limit answer for any state."""
    m, decisions = run(ops)
    now = decisions[-1].time_s if decisions else 1000.0
    assert 0.0 <= m.limit_for(heading, now) <= MAX
    for status in m.statuses(now):
        assert status.name in NAMES


@fuzz(300)
@given(st.lists(st.one_of(st.floats(0.0, 6.0), st.floats(0.1, 1.0)), min_size=1, max_size=40))
def test_limit_never_exceeds_what_the_latest_reading_allows(ranges):
    """Safety invariant against an independent bound: driving forward with a reading every
    50 ms, the limit after each reading of the front sensor is at most v_max(travel to that
    reading, reaction time + the smallest possible detection latency)."""
    m = Monitor(CONFIG)
    robot, lim = CONFIG.robot, CONFIG.limits
    half = CONFIG.sensor('ahead').field_of_view_rad / 2
    c20 = 331.3 * math.sqrt(1 + 20.0 / 273.15)  # reference.md F1
    timeout = 2 * CONFIG.sensor('ahead').max_range_m / c20
    # detection latency: two one-timeout slots before the period is measured (design.md
    # formula), the 50 ms period after: never less than the smaller of the two
    latency = robot.reaction_time_s + min(2 * timeout, 0.05)
    t = 1000.0
    # 3 s of open space first so the limit has risen and a near reading drops it at once
    for r in [math.inf] * 60 + list(ranges):
        t += 0.05
        m.on_odometry(OdometrySample(t, 0.3, 0.0, 0.0, t))
        check = m.on_range(RangeReading('ahead', t, r, t))
        limit = m.tick(t).limit_mps
        if check.verdict.value == 'blind':
            bound = 0.0
        elif check.verdict.value in ('ok', 'late', 'jump'):
            # plane geometry: the front-edge sensor's arc at r is first reached at its ends,
            # r cos(fov/2) ahead (or later, when they lie beside the 0.3 m half width);
            # reference.md sec. 5 closed form for v_max
            free = r * math.cos(half) - lim.margin_m
            a = robot.decel_mps2
            bound = 0.0 if free <= 0 else (-a * latency
                                            + math.sqrt((a * latency) ** 2 + 2 * a * free))
        else:
            continue  # no echo, invalid, stale, stuck: no bound from this reading alone
        assert limit <= bound + 1e-9, (r, check.verdict, limit, bound)


# =============================================================================================
# Several sensors, arbitrary interleaved streams, and an independent brute-force model.
#
# The test robot's box (testkit) with five sensors: the two of testkit, one on the front edge
# looking inward across the centre line, one on the front edge looking outward with a wider and
# shorter beam, and one on the left side that watches neither travel direction.
# =============================================================================================

MULTI = make_config({
    'sensor_names': ['ahead', 'behind', 'left_in', 'right_out', 'side'],
    'sensors.left_in.x': 0.5, 'sensors.left_in.y': 0.25, 'sensors.left_in.yaw': -0.35,
    'sensors.right_out.x': 0.5, 'sensors.right_out.y': -0.25, 'sensors.right_out.yaw': -0.3,
    'sensors.right_out.field_of_view': 0.7, 'sensors.right_out.max_range': 2.5,
    'sensors.side.x': 0.0, 'sensors.side.y': 0.3, 'sensors.side.yaw': math.pi / 2,
    'limits.max_speed': 2.0,       # high, so that the readings rather than the cap decide
    'limits.fallback_speed': 0.2,  # non-zero, so that "fell back" is told apart from "stop"
    'limits.rise_rate': 100.0,     # the limit follows the target almost at once
    'limits.memory_hold': 0.5,
})
MULTI_NAMES = MULTI.sensor_names
MULTI_MAX = MULTI.limits.max_speed_mps
FALLBACK = min(MULTI.limits.fallback_speed_mps, MULTI.limits.max_speed_mps)
FOOTPRINT = np.asarray(MULTI.robot.footprint.points, dtype=float)
FORWARD, REVERSE = 0.0, math.pi  # a non-holonomic base travels forward or in reverse only

# Tolerance of the one-sided invariant (the engine may allow up to this much more free
# distance than the model), from the engine's documented approximations:
# - it samples a reading's arc at 9 points (steps of fov/8 = 0.05 rad here); where the swept
#   corridor's edge cuts the arc between two samples, the nearest point inside the corridor
#   is missed by r (cos a1 - cos a2) <= L sin(a) * fov/8, L the sensor's distance from that
#   edge across the heading: at most 0.55 m x 0.05 = 2.75 cm (the inward-looking sensor);
# - it reads the free distance from a table with 1 cm range steps, interpolated: the true
#   travel to the corridor's edge, sqrt(r^2 - L^2), rises at most 1.2 m per m of range there
#   (r >= 1.06 m), so 1.2 cm more.
# Measured against the brute force on a 4 mm grid of ranges: at most 2.45 cm (inward sensor,
# r = 1.15 m). 4 cm covers the bound; the model's own stepping is refined to 1e-6 m.
TOLERANCE_M = 0.04
CLOCK_JUMP_S = 0.5  # monitor.py docstring/README: time going back more than this resets all
STILL_MPS = 0.02  # below this body speed the direction of travel is kept (monitor.py)
C20 = 331.3 * math.sqrt(1 + 20.0 / 273.15)  # reference.md F1, m/s at 20 degC
ARC_POINTS = 61  # the model samples each arc far more densely than the engine
STEP_M = 0.01  # footprint stepping, refined by bisection
RECENT_PERIODS = 5  # the engine trusts measured periods once it has 5 (schedule.py)


def in_footprint(points: np.ndarray) -> np.ndarray:
    """Return, per (..., 2) point, whether it lies inside or on the footprint outline.

    Even-odd crossing rule (W. R. Franklin, "PNPOLY - Point Inclusion in Polygon Test"),
    plus a 1e-9 m band around every edge so that touching counts as reaching.
    """
    x, y = points[..., 0], points[..., 1]
    inside = np.zeros(x.shape, dtype=bool)
    count = len(FOOTPRINT)
    for i in range(count):
        (x0, y0), (x1, y1) = FOOTPRINT[i], FOOTPRINT[(i + 1) % count]
        if y0 != y1:
            straddles = (y0 > y) != (y1 > y)
            x_cross = x0 + (y - y0) * (x1 - x0) / (y1 - y0)
            inside ^= straddles & (x < x_cross)
        ex, ey = x1 - x0, y1 - y0
        along = np.clip(((x - x0) * ex + (y - y0) * ey) / (ex * ex + ey * ey), 0.0, 1.0)
        inside |= np.hypot(x - x0 - along * ex, y - y0 - along * ey) <= 1e-9
    return inside


@cache
def brute_free_m(name: str, heading: float, range_m: float) -> float:
    """Return how far the robot may travel along ``heading`` before its footprint reaches a
    point of the reading's arc (radius ``range_m`` across the cone) that lies in its path;
    inf when no point of the arc is ever reached.

    Brute force: ``ARC_POINTS`` points across the cone, the footprint stepped along the
    heading in ``STEP_M`` steps (equivalently each point stepped back against it) with a
    point-in-polygon test, then the first contact refined by bisection. A sliver of the
    footprint thinner than a step could be stepped over: that only makes the model allow more.
    """
    s = MULTI.sensor(name)
    half = s.field_of_view_rad / 2
    angles = s.yaw_rad + np.linspace(-half, half, ARC_POINTS)
    arc = np.column_stack((s.x_m + range_m * np.cos(angles), s.y_m + range_m * np.sin(angles)))
    u = np.array([math.cos(heading), math.sin(heading)])
    diameter = float(np.ptp(FOOTPRINT, axis=0).sum())  # farther than any footprint point
    steps = np.arange(0.0, range_m + abs(s.x_m) + abs(s.y_m) + diameter + STEP_M, STEP_M)
    touched = in_footprint(arc[:, None, :] - steps[None, :, None] * u)  # (points, steps)
    reached = touched.any(axis=1)
    if not reached.any():
        return math.inf
    first = touched.argmax(axis=1)
    hi = steps[first]
    lo = np.where(first > 0, steps[np.maximum(first - 1, 0)], 0.0)
    for _ in range(14):  # 1 cm / 2**14 < 1e-6 m
        mid = (lo + hi) / 2
        now_in = in_footprint(arc - mid[:, None] * u)
        hi, lo = np.where(now_in, mid, hi), np.where(now_in, lo, mid)
    return float(hi[reached].min())


def brute_covers(name: str, heading: float) -> bool:
    """Tell whether any point of the sensor's cone, out to its max range, lies in the path."""
    reach = MULTI.sensor(name).max_range_m
    return any(math.isfinite(brute_free_m(name, heading, float(r)))
               for r in np.linspace(0.02, reach, 40))


COVERING = {h: tuple(n for n in MULTI_NAMES if brute_covers(n, h)) for h in (FORWARD, REVERSE)}


def largest_speed_mps(room_m: float, latency_s: float) -> float:
    """Return the largest v with v*T + v^2/(2a) <= room, by bisection (reference.md sec. 5:
    the stopping distance is the reaction travel plus the braking distance)."""
    a = MULTI.robot.decel_mps2
    if room_m <= 0.0:
        return 0.0
    lo, hi = 0.0, math.sqrt(2.0 * a * room_m) + 1.0  # at hi the braking term alone exceeds room
    for _ in range(80):
        mid = (lo + hi) / 2
        if mid * latency_s + mid * mid / (2.0 * a) <= room_m:
            lo = mid
        else:
            hi = mid
    return lo


def configured_latency_s(name: str) -> float:
    """Worst-case detection latency of the configured schedule (design.md: sum of slots - own
    slot + 2R/c); one sensor per slot in list order, each slot one echo timeout 2R/c."""
    timeouts = {s.name: 2 * s.max_range_m / C20 for s in MULTI.sensors}  # reference.md sec. 2
    return sum(timeouts.values()) - timeouts[name] + timeouts[name]


@dataclass
class Heard:
    """The latest reading of a sensor that the engine kept (not invalid, not stale)."""

    verdict: Verdict
    range_m: float
    stamp_s: float
    periods_s: tuple[float, ...]  # the latest few periods between kept readings, s


class Model:
    """What the latest readings allow, re-derived from the rules in monitor.py's docstring.

    It keeps, per sensor, the latest reading the engine kept and the latest finite odometry,
    and bounds the speed for a heading by the brute-force free distance of each covering
    sensor's latest reading.
    """

    def __init__(self) -> None:
        self.now = -math.inf
        self.resets = 0
        self.reset()

    def reset(self) -> None:
        self.heard: dict[str, Heard] = {}
        self.newest_stamp: dict[str, float] = {}  # of any reading, kept or not
        self.odom: OdometrySample | None = None
        self.heading = FORWARD

    def advance(self, t: float) -> None:
        if not math.isfinite(t):
            return  # a time that is not a time moves no clock
        if t < self.now - CLOCK_JUMP_S:
            self.reset()
            self.resets += 1
            self.now = t
        self.now = max(self.now, t)

    def must_keep(self, reading: RangeReading) -> bool:
        """Tell whether nothing allows discarding this reading (REP 117: a range >= 0 or
        -inf/+inf is information; a stamp newer than every earlier one, arriving fresh)."""
        age = reading.arrival_s - reading.stamp_s
        return (not math.isnan(reading.range_m)
                and (reading.range_m >= 0 or reading.range_m == -math.inf)
                and math.isfinite(reading.stamp_s) and math.isfinite(reading.arrival_s)
                and reading.stamp_s > self.newest_stamp.get(reading.sensor, -math.inf)
                and 0.0 <= age < MULTI.limits.stale_after_s)

    def on_range(self, reading: RangeReading, verdict: Verdict) -> None:
        if math.isfinite(reading.stamp_s):
            self.newest_stamp[reading.sensor] = max(
                reading.stamp_s, self.newest_stamp.get(reading.sensor, -math.inf))
        if verdict in (Verdict.INVALID, Verdict.STALE):
            return  # discarded: the earlier reading still stands
        before = self.heard.get(reading.sensor)
        periods = () if before is None else (
            before.periods_s + (reading.stamp_s - before.stamp_s,))[-RECENT_PERIODS:]
        self.heard[reading.sensor] = Heard(verdict, reading.range_m, reading.stamp_s, periods)

    def on_odometry(self, sample: OdometrySample) -> None:
        if all(math.isfinite(v) for v in (sample.stamp_s, sample.vx_mps, sample.vy_mps,
                                          sample.wz_radps, sample.arrival_s)):
            self.odom = sample  # a sample with any non-finite field is refused whole

    def on_tick(self) -> None:
        if self.odom is not None and math.hypot(self.odom.vx_mps, self.odom.vy_mps) > STILL_MPS:
            self.heading = FORWARD if self.odom.vx_mps >= 0 else REVERSE

    def odometry_fresh(self) -> bool:
        return (self.odom is not None and math.isfinite(self.odom.arrival_s)
                and self.now - self.odom.arrival_s <= MULTI.limits.odom_stale_after_s)

    def sensor_bound(self, name: str, heading: float) -> float:
        """Largest speed sensor ``name``'s latest reading allows along ``heading``, m/s."""
        s = MULTI.sensor(name)
        heard = self.heard.get(name)
        if heard is None or self.now - heard.stamp_s > MULTI.limits.stale_after_s:
            return FALLBACK  # silent
        if heard.verdict is Verdict.STUCK:
            return FALLBACK
        if heard.verdict is Verdict.BLIND:
            reach = 0.0  # something nearer than the sensor can measure
        elif heard.verdict is Verdict.NO_ECHO:
            reach = s.max_range_m  # nothing within max range
        else:  # ok, late, jump: a range to the nearest echo
            assert heard.verdict in (Verdict.OK, Verdict.LATE, Verdict.JUMP), heard
            reach = heard.range_m
        # the configured schedule's latency until periods are measured, then the worst
        # measured period (schedule.py); either is at least the smaller of the configured one
        # and the longest of the latest few periods
        detection = configured_latency_s(name)
        if heard.periods_s:
            detection = min(detection, max(0.0, *heard.periods_s))
        latency = (detection + MULTI.robot.reaction_time_s
                   + max(0.0, self.now - heard.stamp_s))
        room = brute_free_m(name, heading, reach) - MULTI.limits.margin_m + TOLERANCE_M
        return math.inf if math.isinf(room) else largest_speed_mps(room, latency)

    def bound(self, heading: float) -> float:
        """Largest speed the latest readings allow along ``heading``, m/s."""
        if not self.odometry_fresh() or not COVERING[heading]:
            return FALLBACK
        return min([MULTI_MAX] + [self.sensor_bound(n, heading) for n in COVERING[heading]])


def check_verdict_class(reading: RangeReading, verdict: Verdict) -> None:
    """The verdict agrees with REP 117's classes of the range (reference.md sec. 4)."""
    s = MULTI.sensor(reading.sensor)
    r = reading.range_m
    if verdict in (Verdict.INVALID, Verdict.STALE):
        return
    if math.isnan(r) or (r < 0 and r != -math.inf):
        raise AssertionError(f'{r!r} m must be discarded, got {verdict}')
    if r == -math.inf or r < s.min_range_m:
        assert verdict is Verdict.BLIND, (r, verdict)
    elif r == math.inf or r >= s.max_range_m:
        assert verdict is Verdict.NO_ECHO, (r, verdict)
    elif verdict in (Verdict.BLIND, Verdict.NO_ECHO):
        assert r >= s.max_range_m - s.resolution_m, (r, verdict)  # within a step of max


RANGE_POOL = sorted({*np.round(np.arange(0.0, 4.6, 0.05), 2).tolist(), 0.149, 0.151, 1.15,
                     1.5318, 2.49, 3.98, 3.989, 3.991},
                    ) + [-0.0, -0.5, -1e300, 1e300, math.nan, math.inf, -math.inf]
any_range = st.one_of(st.sampled_from(RANGE_POOL), st.sampled_from(RANGE_POOL),
                      st.floats(allow_nan=True, allow_infinity=True), st.floats(0.1, 4.1))
time_step = st.sampled_from([0.0, 1e-9, 0.005, 0.01, 0.02, 0.024, 0.05, 0.1, 0.2, 0.31, -0.01,
                             -0.3, -0.51, -3.0, 1.0, 100.0])
delay = st.sampled_from([0.0, 0.0, 0.001, 0.02, 0.12, 0.29, 0.35, -0.04, -0.06, 5.0])
speed = st.sampled_from([0.0, 0.01, 0.0199, 0.021, 0.3, 1.0, 2.5, -0.3, -1.0, -2.5, 40.0, 1e300,
                         -1e300, math.nan, math.inf, -math.inf])
absolute = st.one_of(st.sampled_from([math.nan, math.inf, -math.inf, 0.0, -1.0, 1e300, 999.0,
                                      1000.4]), st.floats(998.0, 1003.0))
multi_op = st.one_of(
    st.tuples(st.just('read'), st.sampled_from(MULTI_NAMES), time_step, any_range, delay),
    st.tuples(st.just('round'), time_step, st.tuples(*[any_range] * len(MULTI_NAMES)),
              st.sampled_from([0.3, 0.3, 1.0, -0.3, -1.0, 0.0])),
    st.tuples(st.just('odom'), time_step, speed, speed, speed, delay),
    st.tuples(st.just('tick'), time_step),
    st.tuples(st.just('raw'), st.sampled_from(MULTI_NAMES), absolute, absolute, any_range),
    st.tuples(st.just('raw_odom'), absolute, absolute, speed),
)


class Stream:
    """A monitor and the model fed side by side; every tick checks the engine's answer."""

    def __init__(self, *, check: bool = True) -> None:
        self.m = Monitor(MULTI)
        self.model = Model()
        self.t = 1000.0
        self.check = check
        self.biting = 0  # ticks with a limit above 0 checked against a finite bound

    def reading(self, name: str, stamp: float, r: float, arrival: float) -> None:
        rd = RangeReading(name, stamp, r, arrival)
        self.model.advance(arrival)
        must_keep = self.model.must_keep(rd)
        result = self.m.on_range(rd)
        assert result.sensor == name and result.reason
        check_verdict_class(rd, result.verdict)
        if must_keep:  # a good reading is never thrown away (it may say: stop)
            assert result.verdict not in (Verdict.INVALID, Verdict.STALE), result
        self.model.on_range(rd, result.verdict)

    def odometry(self, stamp: float, vx: float, vy: float, wz: float, arrival: float) -> None:
        sample = OdometrySample(stamp, vx, vy, wz, arrival)
        self.model.advance(arrival)
        self.m.on_odometry(sample)
        self.model.on_odometry(sample)

    def tick(self) -> None:
        m, model = self.m, self.model
        model.advance(self.t)
        d = m.tick(self.t)
        model.on_tick()
        assert d.time_s == model.now
        assert m.clock_resets == model.resets
        assert math.isfinite(d.limit_mps) and 0.0 <= d.limit_mps <= MULTI_MAX, d
        assert 0.0 <= d.target_mps <= MULTI_MAX and d.limit_mps <= d.target_mps, d
        if not self.check:
            return
        for heading in (FORWARD, REVERSE):
            limit = (d.limit_mps if heading == model.heading
                     else m.limit_for(heading, d.time_s))
            if limit > 0.0:
                allowed = model.bound(heading)
                assert limit <= allowed + 1e-9, (heading, limit, allowed, model.heard,
                                                  model.odom, d.reason)
                self.biting += FALLBACK < allowed < MULTI_MAX  # bound by a reading

    def round_of(self, ranges) -> None:
        for name, r in zip(MULTI_NAMES, ranges):
            self.t += 0.024  # one echo timeout per slot
            self.reading(name, self.t, r, self.t)

    def warm_up(self) -> Stream:
        """Clean rounds: every sensor heard, periods measured, odometry fresh, limit up."""
        for _ in range(6):
            self.round_of([1.2, 0.8, 2.0, 1.0, 0.6])
            self.odometry(self.t, 0.3, 0.0, 0.0, self.t)
            self.tick()
        return self

    def apply(self, op) -> None:
        """Feed one generated operation, then tick."""
        kind = op[0]
        if kind == 'read':
            _, name, dt, r, late = op
            self.t += dt
            self.reading(name, self.t, r, self.t + late)
        elif kind == 'round':  # a whole firing cycle, then odometry
            _, dt, ranges, vx = op
            self.t += dt
            self.round_of(ranges)
            self.odometry(self.t, vx, 0.0, 0.0, self.t)
        elif kind == 'odom':
            _, dt, vx, vy, wz, late = op
            self.t += dt
            self.odometry(self.t, vx, vy, wz, self.t + late)
        elif kind == 'raw':
            _, name, stamp, arrival, r = op
            self.reading(name, stamp, r, arrival)
        elif kind == 'raw_odom':
            _, stamp, arrival, vx = op
            self.odometry(stamp, vx, 0.0, 0.0, arrival)
        else:
            self.t += op[1]
        self.tick()


@cache
def _warm() -> Stream:
    return Stream().warm_up()


def warm_stream() -> Stream:
    """Return a copy of one warmed-up stream: the same state as warming up a new monitor,
    without paying for the coverage and travel tables on every example."""
    return copy.deepcopy(_warm())


def test_model_agrees_with_the_engine_on_which_sensors_watch_each_direction():
    """The brute-force coverage: front sensors forward, the rear one in reverse, the side one
    never; the engine covers at least those (covering fewer would ignore a watching sensor)."""
    assert COVERING == {FORWARD: ('ahead', 'left_in', 'right_out'), REVERSE: ('behind',)}
    m = Monitor(MULTI)
    for heading, names in COVERING.items():
        assert set(names) <= set(m.covering(heading))


def test_brute_force_free_distance_matches_plane_geometry():
    """The model itself: for the centred front sensor the arc's ends are reached first,
    r cos(fov/2) ahead, while they lie within the 0.3 m half width (plane geometry)."""
    half = MULTI.sensor('ahead').field_of_view_rad / 2
    for r in (0.2, 0.7, 1.4):
        assert brute_free_m('ahead', FORWARD, r) == pytest.approx(r * math.cos(half), abs=1e-5)
    # beyond 0.3 / sin(fov/2) the ends pass beside the robot: the point at y = 0.3 is first
    r = 3.0
    assert brute_free_m('ahead', FORWARD, r) == pytest.approx(math.sqrt(r * r - 0.09),
                                                              abs=2e-3)  # 61-point arc
    assert brute_free_m('side', FORWARD, 1.0) == math.inf
    assert brute_free_m('ahead', FORWARD, 0.0) == 0.0


@fuzz(2000)
@given(st.lists(multi_op, max_size=30))
def test_limit_never_exceeds_what_the_latest_readings_allow(ops):
    """Arbitrary interleaved multi-sensor streams (NaN, +/-inf, negative and huge ranges,
    repeated and out-of-order stamps, zero and negative steps, clock jumps both ways, odometry
    that is NaN, infinite or absurd) after a clean start: after every tick the limit, for the
    current heading and the other one, is within [0, max_speed] and at most what the
    brute-force model of the latest readings allows."""
    stream = warm_stream()
    for op in ops:
        stream.apply(op)


@fuzz(400)
@given(st.lists(multi_op, max_size=40))
def test_from_a_cold_start_limits_are_safe_and_events_well_formed_and_closed(ops):
    """The same from a new monitor (nothing heard yet, schedule not measured): the invariant
    holds, and every finding has a known kind and sensor, finite ordered times, and is closed
    by finish() exactly once."""
    stream = Stream()
    for op in ops:
        stream.apply(op)
    m = stream.m
    events = m.pop_events()
    assert_events_well_formed(events, MULTI_NAMES)
    still_open = m.open_events()
    assert_events_well_formed(still_open, MULTI_NAMES)
    closed = m.finish()
    assert not m.open_events()
    assert_events_well_formed(closed, MULTI_NAMES)
    assert {(e.kind, e.sensor) for e in still_open} <= {(e.kind, e.sensor) for e in closed}
    assert m.finish() == []  # nothing is reported twice


def test_the_invariant_bites():
    """Clean rounds with a near obstacle ahead: the limit is positive and the model's bound
    is below max_speed, so the comparison is a real one."""
    stream = warm_stream()
    for _ in range(4):
        stream.apply(('round', 0.0, (0.6, 1.0, 2.0, 1.0, 1.0), 0.3))
    assert stream.biting >= 4


# ---------------------------------------------------------------------------------------------
# Engine bugs the fuzz found, kept as minimal reproducers.

def _silent_odometry(arrival_s: float):
    """One odometry sample arriving at ``arrival_s``, then 2 s of readings and no odometry;
    return the last decision and every finding."""
    m = Monitor(CONFIG)
    m.on_odometry(OdometrySample(1000.0, 0.3, 0.0, 0.0, arrival_s))
    t = 1000.0
    for _ in range(40):
        t += 0.05
        m.on_range(RangeReading('ahead', t, 3.0, t))
        m.on_range(RangeReading('behind', t + 0.045, math.inf, t + 0.045))
        d = m.tick(t + 0.045)
    return d, m.pop_events() + m.finish()


@pytest.mark.parametrize('arrival_s', [
    1000.0,  # control: an ordinary arrival time, as the node and the checker pass
    # found by the fuzz: a sample that arrived at +inf once stayed 'fresh' for ever (the limit
    # rose to 0.97 m/s with no odometry for 2 s), and a NaN arrival never reported stale
    math.inf,
    math.nan,
])
def test_odometry_that_stops_counts_as_stale_whatever_its_arrival_time(arrival_s):
    """Odometry silent for 2 s (odom_stale_after 0.25 s): not fresh, limit at fallback_speed,
    and a stale finding for the robot (README: odometry goes silent -> fallback_speed)."""
    d, events = _silent_odometry(arrival_s)
    assert not d.odometry_fresh
    assert d.limit_mps <= CONFIG.limits.fallback_speed_mps
    assert any(e.kind == 'stale' and e.sensor is None for e in events)

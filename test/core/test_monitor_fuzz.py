"""The engine under arbitrary input streams: it never raises and always answers sanely."""
from __future__ import annotations

import math

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from testkit import make_config

from sonar_guard.core.monitor import EVENT_KINDS, Monitor, OdometrySample
from sonar_guard.core.readings import RangeReading

CONFIG = make_config({'limits.memory_hold': 0.5})
NAMES = CONFIG.sensor_names
MAX = CONFIG.limits.max_speed_mps

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


@settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(operation, max_size=60))
def test_any_stream_gives_a_limit_within_zero_and_max_speed(ops):
    """NaN, infinities, negative and huge ranges, clock jumps: no exception, limit in range."""
    _, decisions = run(ops)
    for d in decisions:
        assert 0.0 <= d.limit_mps <= MAX
        assert 0.0 <= d.target_mps <= MAX
        assert math.isfinite(d.limit_mps)


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(operation, max_size=60))
def test_events_are_well_formed_and_all_closed_at_the_end(ops):
    """Every finding names a known kind and sensor, with finite ordered times."""
    m, _ = run(ops)
    events = m.pop_events() + m.finish()
    assert not m.open_events()
    for e in events:
        assert e.kind in EVENT_KINDS
        assert e.sensor is None or e.sensor in NAMES
        assert math.isfinite(e.t_start) and math.isfinite(e.t_end)
        assert e.t_start <= e.t_end
        assert isinstance(e.detail, str) and e.detail


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(operation, max_size=40), st.floats(0.0, 2 * math.pi))
def test_status_and_limit_for_any_heading_never_raise(ops, heading):
    """Diagnostics and the command gate's per-heading limit answer for any state."""
    m, decisions = run(ops)
    now = decisions[-1].time_s if decisions else 1000.0
    assert 0.0 <= m.limit_for(heading, now) <= MAX
    for status in m.statuses(now):
        assert status.name in NAMES


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
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

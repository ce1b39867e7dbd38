"""The engine: scripted scenarios on the two-sensor test robot, and invariants."""
from __future__ import annotations

import math

from hypothesis import given, settings
from hypothesis import strategies as st
import numpy as np
import pytest
from testkit import make_config

from sonar_guard.core.config import build_config
from sonar_guard.core.monitor import Monitor, OdometrySample
from sonar_guard.core.readings import RangeReading, Verdict

# Settings shared by the scenarios: no rise limiting unless a test asks for it, so the limit
# equals the instantaneous bound; 20 degC so the speed of sound is reference.md F1 at 20 degC;
# fixed ranges while driving would be stuck, so stuck is off here and tested on its own.
SCENARIO = {'limits.rise_rate': 100.0, 'sonar.air_temperature': 20.0,
            'sonar.stuck_count': 100000,
            'limits.max_speed': 1.5, 'robot.decel': 0.7, 'robot.reaction_time': 0.12,
            'limits.margin': 0.1}
C20 = 331.3 * math.sqrt(1 + 20.0 / 273.15)  # reference.md F1
TIMEOUT = 2 * 4.0 / C20  # echo timeout at the default max_range 4.0 m: one slot
CYCLE = 2 * TIMEOUT  # two sensors, one slot each


def travel(r):
    """Free travel to the arc of a reading r for the test robot's edge-mounted sensors.

    The nearest echo lies on the arc of radius r across the cone; moving along the beam axis,
    the footprint's edge first reaches the arc's ends at +/- fov/2: r*cos(fov/2) (plane
    geometry; valid while r*sin(fov/2) <= the 0.3 m half width, i.e. r <= 1.51 m).
    """
    assert r * math.sin(0.2) <= 0.3
    return r * math.cos(0.2)


def v_max(free, latency, decel, margin):
    """Closed form of reference.md sec. 5: v = -aT + sqrt((aT)^2 + 2ad), 0 when d <= 0."""
    d = free - margin
    if d <= 0:
        return 0.0
    return -decel * latency + math.sqrt((decel * latency) ** 2 + 2 * decel * d)


class Run:
    """Feed a monitor the way a robot would: odometry at 50 Hz, sensors firing slot by slot."""

    def __init__(self, overrides=None, *, readings_only=False):
        params = dict(SCENARIO)
        params.update(overrides or {})
        self.config = make_config(params)
        self.m = Monitor(self.config, readings_only=readings_only)
        self.t = 0.0
        self.stamps: dict[str, list[float]] = {'ahead': [], 'behind': []}
        self.ranges: dict[str, list[float]] = {'ahead': [], 'behind': []}
        self.decision = None

    def drive(self, duration, vx, ahead=lambda t: math.inf, behind=lambda t: math.inf,
              silent=(), vy=0.0):
        """Run for ``duration`` s at body speed vx; range functions give each sensor's echo."""
        inputs = []
        for k in range(int(round(duration / 0.02))):
            t = self.t + k * 0.02
            inputs.append((t, 0, 'odom', None))
        k = 0
        while True:
            fire0 = self.t + k * CYCLE
            if fire0 >= self.t + duration:
                break
            for slot, (name, fn) in enumerate((('ahead', ahead), ('behind', behind))):
                fire = fire0 + slot * TIMEOUT
                if name in silent:
                    continue
                r = fn(fire)
                tof = 2 * r / C20 if math.isfinite(r) and 0 <= r < 4.0 else TIMEOUT
                inputs.append((fire + tof, 1, name, r))
            k += 1
        inputs.sort(key=lambda x: (x[0], x[1]))
        for t, _, kind, r in inputs:
            if kind == 'odom':
                self.m.on_odometry(OdometrySample(t, vx, vy, 0.0, t))
            else:
                self.m.on_range(RangeReading(kind, t, r, t))
                self.stamps[kind].append(t)
                self.ranges[kind].append(r)
            self.decision = self.m.tick(t)
        self.t += duration
        return self.decision

    def measured_latency(self, name):
        """Worst period over the last 50 (numpy) - own slot + own echo timeout."""
        stamps = np.asarray(self.stamps[name][-51:])
        return float(np.max(np.diff(stamps))) - TIMEOUT + TIMEOUT


def test_side_wall_seen_at_the_cone_edge_does_not_limit_forward_travel():
    """A sensor angled off the path limits travel only by the part of its arc in the path."""
    params = dict(SCENARIO)
    params.update({'sensor_names': ['ahead', 'slant'], 'sensors.slant.x': 0.5,
                   'sensors.slant.y': 0.25, 'sensors.slant.yaw': 0.35})
    config = make_config(params)

    def limit_with(slant_range):
        m = Monitor(config)
        for k in range(5):
            t = 0.05 * k
            m.on_odometry(OdometrySample(t, 0.3, 0.0, 0.0, t))
            m.on_range(RangeReading('ahead', t, math.inf, t))
            m.on_range(RangeReading('slant', t + 0.001, slant_range, t + 0.001))
        return m.tick(0.201)

    assert 'slant' in Monitor(config).covering(0.0)  # its cone crosses the path near the mount
    # 0.9 m: the arc spans y = 0.25 + 0.9 sin(0.15..0.55) = 0.38..0.72 m, all beside the
    # 0.3 m half-width path (plane geometry): a side wall, no limit
    far = limit_with(0.9)
    assert far.target_mps == 1.5
    # 0.2 m: the arc enters the path (y <= 0.3 m) up to sin(phi) = 0.05/0.2 from the sensor's
    # x axis; the furthest such point is nearest in travel: 0.2 cos(asin(0.25)) = 0.1936 m
    # ahead of the front edge (plane geometry; the arc is sampled every 0.05 rad)
    near = limit_with(0.2)
    assert near.limiting_sensor == 'slant'
    free = 0.2 * math.cos(math.asin(0.25))
    latency = float(near.reason.split('latency ')[1].split(' s')[0])  # as the engine used it
    assert near.target_mps == pytest.approx(v_max(free, latency, 0.7, 0.1), abs=0.01)


def test_clear_path_gives_max_speed():
    """Nothing in range on either side: the limit is limits.max_speed."""
    run = Run()
    d = run.drive(1.0, vx=0.4)
    assert d.limit_mps == 1.5
    assert d.covering == ('ahead',)
    assert d.odometry_fresh


def test_obstacle_ahead_gives_the_closed_form_limit():
    """Limit = v_max(range - edge offset, latency + reaction + age) (reference.md sec. 5)."""
    run = Run()
    run.drive(1.0, vx=0.3, ahead=lambda t: 1.2)
    d = run.decision
    last = run.stamps['ahead'][-1]
    latency = run.measured_latency('ahead') + 0.12 + (d.time_s - last)
    assert d.limit_mps == pytest.approx(v_max(travel(1.2), latency, 0.7, 0.1), rel=1e-9)
    assert d.limiting_sensor == 'ahead'
    assert d.limit_mps < 1.5


def test_before_periods_are_measured_the_configured_latency_is_used():
    """With too few readings the schedule's cycle - own slot + timeout is the latency."""
    run = Run()
    run.drive(0.02, vx=0.3, silent=('ahead', 'behind'))  # fresh odometry, no readings
    r = 1.0
    stamp = run.t + 2 * r / C20
    run.m.on_range(RangeReading('ahead', stamp, r, stamp))
    d = run.m.tick(stamp)
    latency = CYCLE - TIMEOUT + TIMEOUT + 0.12  # design.md detection_latency + reaction
    assert d.target_mps == pytest.approx(v_max(travel(r), latency, 0.7, 0.1), rel=1e-9)


def test_reverse_travel_is_limited_by_the_rear_sensor():
    """Driving backwards, only the rear-facing sensor counts (odometry twist sign)."""
    run = Run()
    forward = run.drive(1.0, vx=0.3, ahead=lambda t: 0.4, behind=lambda t: 1.5)
    backward = run.drive(1.0, vx=-0.3, ahead=lambda t: 0.4, behind=lambda t: 1.5)
    assert forward.covering == ('ahead',) and backward.covering == ('behind',)
    assert backward.heading_rad == pytest.approx(math.pi)
    latency = run.measured_latency('behind') + 0.12 + (backward.time_s - run.stamps['behind'][-1])
    assert backward.limit_mps == pytest.approx(v_max(travel(1.5), latency, 0.7, 0.1),
                                               rel=1e-9)
    assert forward.limit_mps < backward.limit_mps


def test_silent_sensor_drops_the_limit_to_fallback_after_stale_after():
    """No usable reading for limits.stale_after: fallback_speed and a stale event."""
    run = Run({'limits.fallback_speed': 0.2, 'limits.stale_after': 0.3})
    run.drive(1.0, vx=0.3)
    last = run.stamps['ahead'][-1]
    d = run.drive(1.0, vx=0.3, silent=('ahead',))
    assert d.limit_mps == 0.2
    assert d.reason == 'ahead silent'
    # exactly when: just before and just after last + stale_after
    probe = Run({'limits.fallback_speed': 0.2, 'limits.stale_after': 0.3})
    probe.drive(1.0, vx=0.0)
    last_p = probe.stamps['ahead'][-1]
    probe.m.on_odometry(OdometrySample(last_p + 0.29, 0.0, 0.0, 0.0, last_p + 0.29))
    assert probe.m.tick(last_p + 0.299).limit_mps == 1.5
    assert probe.m.tick(last_p + 0.301).limit_mps == 0.2
    events = [e for e in run.m.finish() if e.kind == 'stale']
    assert [(e.sensor, e.t_start) for e in events] == [('ahead', last)]


def test_stale_odometry_drops_the_limit_to_fallback():
    """Without fresh odometry the robot's motion is unknown: fallback_speed."""
    run = Run({'limits.fallback_speed': 0.1, 'limits.odom_stale_after': 0.25})
    run.drive(0.5, vx=0.2)
    t = run.t
    run.m.on_range(RangeReading('ahead', t + 0.3, math.inf, t + 0.3))
    d = run.m.tick(t + 0.3)
    assert d.limit_mps == 0.1 and not d.odometry_fresh
    assert any(e.kind == 'stale' and e.sensor is None for e in run.m.finish())


def test_obstacle_lost_into_no_echo_is_remembered_and_dead_reckoned():
    """An echo lost while closing in keeps the limit low; odometry moves the memory."""
    run = Run()
    speed = 0.25
    start = 1.0

    def approach(t):
        return start - speed * t

    run.drive(1.2, vx=speed, ahead=approach)  # closes in from 1.0 m to about 0.7 m
    r0, t0 = run.ranges['ahead'][-1], run.stamps['ahead'][-1]
    # the echo is lost (a smooth surface turned the pulse away): +inf from now on
    d = run.drive(0.6, vx=speed, ahead=lambda t: math.inf)
    last_odom = run.t - 0.02
    memory = r0 - speed * (last_odom - t0)  # constant speed dead reckoning
    latency = run.measured_latency('ahead') + 0.12 + (d.time_s - run.stamps['ahead'][-1])
    assert d.limit_mps == pytest.approx(v_max(travel(memory), latency, 0.7, 0.1), rel=1e-6)
    assert '(remembered)' in d.reason
    # a trusted echo far away clears the memory
    d = run.drive(0.5, vx=speed, ahead=lambda t: 3.5)
    assert '(remembered)' not in d.reason and d.limit_mps > 1.0
    lost = [e for e in run.m.finish() if e.kind == 'no_echo']
    assert len(lost) == 1 and lost[0].sensor == 'ahead'
    assert lost[0].t_start > t0


def test_obstacle_lost_into_the_blind_zone_keeps_the_limit_at_zero():
    """Closing in, then blind, then silence from the ring-down range: still stopped."""
    run = Run()
    speed = 0.2
    run.drive(1.0, vx=speed, ahead=lambda t: 0.6 - speed * t)  # 0.6 m down to 0.4 m
    run.drive(0.3, vx=speed, ahead=lambda t: 0.12)  # below min_range 0.15 m: blind
    d = run.drive(0.5, vx=0.0, ahead=lambda t: math.inf)  # the ring-down hides it: no echo
    assert d.limit_mps == 0.0
    assert '(remembered)' in d.reason
    kinds = [e.kind for e in run.m.finish() if e.sensor == 'ahead']
    assert 'blind' in kinds


def test_memory_hold_releases_a_lost_obstacle_after_its_time():
    """With limits.memory_hold set, the remembered obstacle is dropped after that long."""
    run = Run({'limits.memory_hold': 1.0})
    speed = 0.25
    run.drive(1.2, vx=speed, ahead=lambda t: 1.0 - speed * t)
    held = run.drive(0.5, vx=0.0, ahead=lambda t: math.inf)
    assert '(remembered)' in held.reason
    released = run.drive(1.0, vx=0.0, ahead=lambda t: math.inf)
    assert '(remembered)' not in released.reason


def test_no_echo_without_an_approach_is_an_open_path():
    """Open space reads no echo and is not a finding."""
    run = Run()
    run.drive(1.0, vx=0.5)
    assert not [e for e in run.m.finish() if e.kind == 'no_echo']


def test_blind_reading_stops_the_robot_in_that_direction():
    """Something inside the blind range: no free distance at all."""
    run = Run()
    d = run.drive(0.5, vx=0.2, ahead=lambda t: -math.inf)
    assert d.limit_mps == 0.0
    blind = [e for e in run.m.finish() if e.kind == 'blind']
    assert blind and blind[0].t_start == run.stamps['ahead'][0]


def test_limit_starts_at_fallback_and_rises_at_rise_rate():
    """Before anything is known the limit is fallback_speed; it then climbs at rise_rate."""
    run = Run({'limits.rise_rate': 0.5, 'limits.fallback_speed': 0.1})
    first = run.drive(0.02, vx=0.0, silent=('ahead', 'behind'))
    assert first.limit_mps == 0.1
    later = run.drive(1.0, vx=0.0)
    assert later.limit_mps <= 0.1 + 0.5 * (later.time_s - first.time_s) + 1e-9
    assert later.limit_mps > 0.1


def test_limit_drops_at_once_and_rises_at_rise_rate():
    """limits.rise_rate bounds how fast the limit climbs back."""
    run = Run({'limits.rise_rate': 0.5})
    low = run.drive(1.0, vx=0.1, ahead=lambda t: 0.5).limit_mps
    decisions = []
    for _ in range(10):
        decisions.append(run.drive(0.1, vx=0.1))
    limits = [low] + [d.limit_mps for d in decisions]
    times = [run.t - 1.0 - 0.02] + [d.time_s for d in decisions]
    rises = np.diff(limits) / np.diff(times)
    assert np.all(rises <= 0.5 + 1e-9)
    assert limits[-1] > low


def test_overspeed_is_reported_after_the_braking_allowance():
    """Speed above the limit longer than grace + reaction + excess/decel is overspeed."""
    run = Run({'limits.overspeed_grace': 0.2})
    run.drive(3.0, vx=1.2, ahead=lambda t: 0.8)
    events = [e for e in run.m.finish() if e.kind == 'overspeed']
    assert len(events) == 1 and events[0].sensor is None
    assert events[0].t_end - events[0].t_start > 0.2 + 0.12


@pytest.mark.parametrize('readings_only', [False, True], ids=['robot known', 'readings only'])
def test_readings_only_judges_no_overspeed_and_no_stuck(readings_only):
    """Without the robot's brakes and mounts (readings_only) the engine neither raises
    overspeed nor calls an unchanged range stuck; with them, the same stream shows both."""
    run = Run({'limits.overspeed_grace': 0.2, 'sonar.stuck_count': 5,
               'sonar.stuck_travel': 0.2}, readings_only=readings_only)
    run.drive(3.0, vx=1.2, ahead=lambda t: 0.8)  # too fast, and 0.8 m ahead never changes
    kinds = {e.kind for e in run.m.finish()}
    assert ({'overspeed', 'stuck'} & kinds) == (set() if readings_only
                                                else {'overspeed', 'stuck'})
    counts = run.m.verdict_counts('ahead')
    assert (counts['stuck'] == 0) == readings_only


def test_readings_only_calls_a_falling_range_closing_in_when_its_echo_is_lost():
    """Readings only: a range falling over half a second, then no echo, is a lost echo while
    closing in (no_echo), found from the readings alone; a steady range then no echo is not."""
    falling = Run(readings_only=True)
    falling.drive(1.0, vx=0.0, ahead=lambda t: 2.0 - 0.3 * t)  # 0.3 m/s nearer, robot still
    falling.drive(0.5, vx=0.0)  # echo lost
    assert [e.sensor for e in falling.m.finish() if e.kind == 'no_echo'] == ['ahead']
    steady = Run(readings_only=True)
    steady.drive(1.0, vx=0.0, ahead=lambda t: 2.0)
    steady.drive(0.5, vx=0.0)
    assert [e for e in steady.m.finish() if e.kind == 'no_echo'] == []


def test_short_excess_while_braking_is_not_overspeed():
    """A robot that brakes at decel after the limit drops is not overspeeding."""
    run = Run({'limits.overspeed_grace': 0.2})
    run.drive(0.5, vx=0.6)
    run.drive(0.1, vx=0.6, ahead=lambda t: 1.0)
    run.drive(1.0, vx=0.3, ahead=lambda t: 1.0)
    assert not [e for e in run.m.finish() if e.kind == 'overspeed']


def test_jump_and_invalid_readings_become_events():
    """A jump is a one-reading event; a run of NaN is one invalid stretch."""
    run = Run()
    run.drive(0.5, vx=0.0, ahead=lambda t: 2.0)
    run.drive(0.1, vx=0.0, ahead=lambda t: 0.6)
    run.drive(0.3, vx=0.0, ahead=lambda t: math.nan)
    run.drive(0.3, vx=0.0, ahead=lambda t: 0.6)
    events = run.m.finish()
    jumps = [e for e in events if e.kind == 'jump']
    invalid = [e for e in events if e.kind == 'invalid']
    assert len(jumps) == 1 and jumps[0].t_start == jumps[0].t_end
    assert len(invalid) == 1 and invalid[0].t_end > invalid[0].t_start


def test_jump_keeps_the_nearer_of_old_and_new_range():
    """A suspect reading never widens the free distance on its own."""
    run = Run()
    run.drive(0.5, vx=0.1, ahead=lambda t: 0.9)
    before = run.decision.limit_mps
    d = run.drive(0.03, vx=0.1, ahead=lambda t: 3.0)
    assert run.m.status('ahead', d.time_s).verdict is Verdict.JUMP
    assert d.limit_mps <= before + 1e-9


def test_backward_clock_jump_resets_histories():
    """Time going back (bag loop, sim restart) resets every history once."""
    run = Run()
    run.drive(1.0, vx=0.2, ahead=lambda t: 1.0)
    run.t = 0.0
    d = run.drive(0.04, vx=0.2, silent=('ahead', 'behind'))
    assert run.m.clock_resets == 1
    assert d.limit_mps == 0.0  # readings are gone: silent, fallback_speed 0


def test_stuck_sensor_drops_the_limit_to_fallback_but_is_not_silent():
    """A reading frozen while the robot drives toward it is untrusted: fallback_speed."""
    run = Run({'sonar.stuck_count': 5, 'sonar.stuck_travel': 0.1,
               'limits.fallback_speed': 0.15})
    d = run.drive(1.0, vx=0.4, ahead=lambda t: 1.8)
    assert d.limit_mps == 0.15 and d.reason == 'ahead stuck'
    events = run.m.finish()
    assert [e.kind for e in events if e.sensor == 'ahead'] == ['stuck']


def test_status_reports_counts_and_period():
    """Diagnostics see verdict counts and the measured period."""
    run = Run()
    run.drive(1.0, vx=0.2, ahead=lambda t: 1.0)
    status = run.m.status('ahead', run.t)
    assert status.counts['ok'] == len(run.stamps['ahead'])
    assert status.period_median_s == pytest.approx(float(np.median(np.diff(
        run.stamps['ahead'][-51:]))), rel=1e-9)  # numpy
    assert not status.silent


@settings(max_examples=60, deadline=None)
@given(r1=st.floats(0.0, 4.5), r2=st.floats(0.0, 4.5), age=st.floats(0.0, 0.2))
def test_more_free_distance_never_lowers_the_engine_limit(r1, r2, age):
    """Engine level: a farther obstacle gives a limit at least as high, within [0, max]."""
    near, far = sorted((r1, r2))
    limits = []
    for r in (near, far):
        m = Monitor(make_config(SCENARIO))
        m.on_odometry(OdometrySample(0.0, 0.2, 0.0, 0.0, 0.0))
        m.on_range(RangeReading('ahead', 0.01, r, 0.01))
        limits.append(m.tick(0.01 + age).target_mps)
    assert 0.0 <= limits[0] <= limits[1] <= 1.5


def test_reconfigure_takes_new_braking_at_once_and_keeps_history():
    """A runtime change of decel changes the next limit; readings and periods stay."""
    run = Run()
    run.drive(1.0, vx=0.3, ahead=lambda t: 1.2)
    before = run.m.tick(run.t).limit_mps
    counts = run.m.status('ahead', run.t).counts['ok']
    params = run.config.to_parameters()
    params['robot.decel'] = 0.35
    run.m.reconfigure(build_config(params))
    d = run.m.tick(run.t)
    last = run.stamps['ahead'][-1]
    latency = run.measured_latency('ahead') + 0.12 + (d.time_s - last)
    assert d.limit_mps == pytest.approx(v_max(travel(1.2), latency, 0.35, 0.1), rel=1e-9)
    assert d.limit_mps < before
    assert run.m.status('ahead', run.t).counts['ok'] == counts


def test_reconfigure_refuses_a_new_sensor_list():
    """Sensors and footprint need a restart."""
    run = Run()
    params = {k: v for k, v in run.config.to_parameters().items()
              if not k.startswith('sensors.behind.')}
    params['sensor_names'] = ['ahead']
    with pytest.raises(ValueError, match='restart'):
        run.m.reconfigure(build_config(params))


def test_heading_of_a_velocity_follows_the_drive_type():
    """Differential drive: forward or reverse by the sign of vx; holonomic: atan2(vy, vx)."""
    diff = Monitor(make_config())
    assert diff.heading_of(0.3, 0.2) == 0.0 and diff.heading_of(-0.1, 0.0) == math.pi
    omni = Monitor(make_config({'robot.holonomic': True}))
    assert omni.heading_of(0.0, 0.5) == pytest.approx(math.pi / 2)  # REP 103: y left
    assert omni.heading_of(0.0, -0.5) == pytest.approx(3 * math.pi / 2)

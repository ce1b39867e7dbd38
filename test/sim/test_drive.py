"""A robot driving a path: speed profile, limits, firing schedule and the recording."""
from __future__ import annotations

import math
import statistics

import numpy as np
import pytest
from testkit import make_config

from sonar_guard.core.schedule import Schedule
from sonar_guard.offline.bags import BagSource
from sonar_guard.sim.drive import Path, Run, SpeedProfile, Stop
from sonar_guard.sim.sonar import SonarPhysics
from sonar_guard.sim.world import Wall, World

QUIET = SonarPhysics(noise_std_m=0.0)
T0 = 1_700_000_000.0
DT = 1 / 50.0  # default odometry period, s


def c_f1(temp_c: float) -> float:
    """Speed of sound, reference.md sec. 1 F1: 331.3 sqrt(1 + T/273.15) m/s."""
    return 331.3 * math.sqrt(1.0 + temp_c / 273.15)


def config(**overrides):
    """Return the test robot at 20 degC with some parameters replaced."""
    params = {'sonar.air_temperature': 20.0, 'sonar.resolution': 0.001, 'robot.decel': 0.8}
    params.update(overrides)
    return make_config(params)


def corridor() -> World:
    """A wall 5 m ahead of the start across the path, nothing behind; air at 20 degC."""
    return World([Wall((5.0, -5.0), (5.0, 5.0))], default_air_c=20.0)


def straight(length: float = 40.0) -> Path:
    return Path([(0.0, 0.0), (length, 0.0)])


def odometry(run: Run, duration: float):
    """Return (times s, body vx m/s, x m) of the run's odometry, started at bag time 0."""
    rows = [(t, m.twist.twist.linear.x, m.pose.pose.position.x)
            for topic, _, t, m in run.records(duration, start_time_s=0.0) if topic == '/odom']
    return tuple(np.array(col) for col in zip(*rows))


class TestProfileAndPath:
    """Speed profile and path geometry."""

    def test_profile_interpolates_like_numpy(self):
        """speed_at is numpy.interp of the points (held at both ends)."""
        pts = [(1.0, 0.2), (3.0, 1.0), (4.0, 1.0), (6.0, 0.0)]
        profile = SpeedProfile(pts)
        for s in np.linspace(-1.0, 8.0, 91):
            # numpy.interp
            assert profile.speed_at(s) == pytest.approx(np.interp(s, *zip(*pts)))

    def test_path_poses_lie_on_the_polyline(self):
        """Position = numpy.interp over cumulative length; yaw = atan2 of the piece."""
        pts = np.array([(0.0, 0.0), (3.0, 4.0), (3.0, 10.0)])
        path = Path([tuple(p) for p in pts], turn_blend_m=0.0)
        cum = np.concatenate([[0.0], np.cumsum(np.hypot(*np.diff(pts, axis=0).T))])
        assert path.length == pytest.approx(11.0)  # 5 (3-4-5 triangle) + 6
        for s in np.linspace(0.0, 11.0, 45):
            x, y, yaw = path.pose_at(s)
            # numpy.interp along the cumulative length
            assert (x, y) == pytest.approx((np.interp(s, cum, pts[:, 0]),
                                            np.interp(s, cum, pts[:, 1])))
            piece = 0 if s < 5.0 else 1
            assert yaw == pytest.approx(math.atan2(*(pts[piece + 1] - pts[piece])[::-1]))

    def test_heading_turns_gradually_around_a_corner(self):
        """Within turn_blend_m of a corner the yaw lies between the two headings."""
        path = Path([(0.0, 0.0), (2.0, 0.0), (2.0, 2.0)], turn_blend_m=0.4)
        assert path.pose_at(1.7)[2] == 0.0
        assert path.pose_at(2.0)[2] == pytest.approx(math.pi / 4)  # half way through the turn
        assert path.pose_at(2.3)[2] == pytest.approx(math.pi / 2)

    def test_reverse_path_faces_backwards(self):
        """A reversed path's heading is the path's plus pi."""
        x, y, yaw = Path([(0.0, 0.0), (0.0, 5.0)], reverse=True).pose_at(1.0)
        assert (x, y) == pytest.approx((0.0, 1.0))
        assert yaw == pytest.approx(-math.pi / 2)


class TestMotion:
    """The robot follows the profile within its acceleration and braking limits."""

    def test_speed_ramps_at_the_acceleration_limit_to_the_profile(self):
        """v(t) = min(a t, v_profile) from standstill."""
        run = Run(corridor(), config(), straight(), SpeedProfile.constant(0.8), QUIET)
        t, vx, x = odometry(run, 4.0)
        # closed form: constant acceleration from rest, v = a t, capped at the profile speed
        np.testing.assert_allclose(vx, np.minimum(0.6 * t, 0.8), atol=1e-9)
        # trapezoid rule on a piecewise-linear v is exact: x = integral of v dt
        np.testing.assert_allclose(x, np.concatenate([[0.0], np.cumsum(
            0.5 * (vx[1:] + vx[:-1]) * np.diff(t))]), atol=1e-6)

    def test_profile_drop_is_followed_at_the_braking_limit(self):
        """Where the profile drops, the speed falls at decel (robot.decel) and settles."""
        profile = SpeedProfile([(0.0, 1.0), (2.0, 1.0), (2.01, 0.2)])
        run = Run(corridor(), config(), straight(), profile, QUIET)
        t, vx, x = odometry(run, 6.0)
        dv = np.diff(vx)
        # closed form: per step the speed changes by at most a dt (0.6) up or d dt (0.8) down
        assert dv.max() <= 0.6 * DT + 1e-9 and dv.min() >= -0.8 * DT - 1e-9
        assert dv.min() == pytest.approx(-0.8 * DT)
        assert vx[-1] == pytest.approx(0.2)

    def test_robot_stops_at_the_end_of_the_path(self):
        """The robot brakes in time and stands at the last waypoint."""
        run = Run(corridor(), config(), straight(3.0), SpeedProfile.constant(1.0), QUIET)
        t, vx, x = odometry(run, 10.0)
        assert x[-1] == pytest.approx(3.0) and vx[-1] == 0.0
        assert np.diff(vx).min() >= -0.8 * DT - 1e-6  # never harder than the braking limit
        assert x.max() <= 3.0

    def test_speed_cap_is_obeyed(self):
        """With a cap of 0.3 m/s from 2 to 4 s the robot brakes to it and stays below."""
        asked = []

        def cap(t, speed):
            asked.append((t, speed))
            return 0.3 if 2.0 <= t < 4.0 else math.inf

        run = Run(corridor(), config(), straight(), SpeedProfile.constant(1.0), QUIET,
                  speed_cap=cap)
        t, vx, _ = odometry(run, 6.0)
        # closed form: braking from v(2 s) = 1.0 at 0.8 m/s^2 takes (1.0 - 0.3) / 0.8 s
        settled = (t >= 2.0 + (1.0 - 0.3) / 0.8 + DT) & (t <= 4.0)
        assert settled.any() and vx[settled].max() <= 0.3 + 1e-9
        assert vx[t > 5.5].min() > 0.3  # released, it speeds up again
        # the cap is asked with simulation time at every tick, and the current speed
        times = [a for a, _ in asked]
        np.testing.assert_allclose(times, np.arange(len(times)) * DT, atol=1e-9)
        assert [b for _, b in asked][: len(vx)] == pytest.approx(list(vx)[: len(asked)])

    def test_commanded_speed_is_recorded(self):
        """cmd_vel carries min(profile, cap): 0 during a planned stop."""
        run = Run(corridor(), config(), straight(), SpeedProfile.constant(0.5), QUIET,
                  stops=[Stop(1.0, 1.0)])
        cmd = [(t - T0, m.linear.x) for topic, _, t, m in run.records(3.0, start_time_s=T0)
               if topic == '/cmd_vel']
        assert all(v == 0.0 for t, v in cmd if 1.0 <= t < 2.0 - 1e-9)
        assert all(v == 0.5 for t, v in cmd if t < 1.0 - 1e-9 or t >= 2.0)
        t, vx, _ = odometry(run, 3.0)
        assert vx[(t > 1.0 + 0.5 / 0.8 + DT) & (t < 2.0)].max() == 0.0

    def test_reverse_drive_has_negative_body_speed(self):
        """Driving a path in reverse, odometry's body vx is negative."""
        run = Run(corridor(), config(), Path([(0.0, 0.0), (-10.0, 0.0)], reverse=True),
                  SpeedProfile.constant(0.4), QUIET)
        t, vx, x = odometry(run, 2.0)
        assert vx[-1] == pytest.approx(-0.4) and x[-1] < 0.0


class TestRecords:
    """Time order, firing schedule, stamps and the written recording."""

    def test_records_come_in_time_order(self):
        """Log times never decrease; every Range is logged at its header stamp."""
        run = Run(corridor(), config(), straight(), SpeedProfile.constant(0.7), SonarPhysics())
        records = list(run.records(3.0, start_time_s=T0))
        times = [r[2] for r in records]
        assert times == sorted(times) and T0 <= times[0] and times[-1] <= T0 + 3.0
        for _topic, msgtype, t, m in records:
            if msgtype == 'sensor_msgs/msg/Range':
                assert m.header.stamp.sec + m.header.stamp.nanosec * 1e-9 == pytest.approx(
                    t, abs=1e-6)
        assert {r[0] for r in records} == {'/odom', '/cmd_vel', '/sonar/ahead', '/sonar/behind'}

    def test_each_sensor_fires_once_per_cycle(self):
        """Median Range period = Schedule cycle (1 ms); a no-echo sensor exactly the cycle."""
        cfg = config()
        run = Run(corridor(), cfg, straight(), SpeedProfile.constant(0.7), QUIET)
        cycle = Schedule.from_config(cfg).cycle_s
        # reference.md sec. 2: timeout 2 R/c; two slots of 2 x 4 m / c at 20 degC
        assert cycle == pytest.approx(2 * 2 * 4.0 / c_f1(20.0), rel=1e-12)
        stamps = {'/sonar/ahead': [], '/sonar/behind': []}
        ranges = {'/sonar/ahead': [], '/sonar/behind': []}
        for topic, _, t, m in run.records(5.0, start_time_s=T0):
            if topic in stamps:
                stamps[topic].append(t)
                ranges[topic].append(m.range)
        assert math.isfinite(ranges['/sonar/ahead'][-1])  # the wall comes within reach
        assert all(r == math.inf for r in ranges['/sonar/behind'])
        ahead_periods = np.diff(stamps['/sonar/ahead'])
        assert statistics.median(ahead_periods) == pytest.approx(cycle, abs=1e-3)
        np.testing.assert_allclose(np.diff(stamps['/sonar/behind']), cycle, atol=1e-6)
        # 'behind' fires one slot after 'ahead': its stamps sit a slot plus its timeout later
        first_behind = stamps['/sonar/behind'][0] - T0
        assert first_behind == pytest.approx(cycle / 2 + 2 * 4.0 / c_f1(20.0), abs=1e-6)

    def test_sensors_of_one_slot_share_firing_times(self):
        """Both sensors in slot 0: echo time minus flight (2 r / c) is the same firing time."""
        cfg = config(**{'sensors.behind.slot': 0})
        world = World([Wall((5.0, -5.0), (5.0, 5.0)), Wall((-3.0, -5.0), (-3.0, 5.0))],
                      default_air_c=20.0)
        run = Run(world, cfg, straight(), SpeedProfile.constant(0.7), QUIET)
        fired = {'ahead': [], 'behind': []}
        for topic, _, t, m in run.records(3.0, start_time_s=T0):
            name = topic.rsplit('/', 1)[-1]
            if name in fired:
                flight = 2 * 4.0 / c_f1(20.0) if m.range == math.inf else 2 * m.range / c_f1(20.0)
                fired[name].append(t - flight)  # time of flight d = c t / 2 (reference.md 2)
        n = min(len(fired['ahead']), len(fired['behind']))  # the last echo may be cut off
        assert n > 10 and abs(len(fired['ahead']) - len(fired['behind'])) <= 1
        fired = {name: times[:n] for name, times in fired.items()}
        # resolution 1 mm -> firing time uncertain by 2 x 0.5 mm / c
        np.testing.assert_allclose(fired['ahead'], fired['behind'], atol=1e-5)
        np.testing.assert_allclose(np.diff(fired['ahead']),
                                   Schedule.from_config(cfg).cycle_s, atol=1e-5)

    def test_range_messages_carry_the_configured_sensor_data(self):
        """frame_id (or the name), min/max range and field of view come from the config."""
        cfg = config(**{'sensors.ahead.frame_id': 'sonar_ahead', 'sonar.min_range': 0.12})
        run = Run(corridor(), cfg, straight(), SpeedProfile.constant(0.7), QUIET)
        seen = {}
        for topic, _, _, m in run.records(0.5):
            if topic.startswith('/sonar/'):
                seen[topic] = m
        assert seen['/sonar/ahead'].header.frame_id == 'sonar_ahead'
        assert seen['/sonar/behind'].header.frame_id == 'behind'
        for topic, name in (('/sonar/ahead', 'ahead'), ('/sonar/behind', 'behind')):
            s = cfg.sensor(name)
            m = seen[topic]
            # Range.msg fields are float32 (reference.md sec. 4)
            assert np.float32(m.min_range) == np.float32(s.min_range_m)
            assert np.float32(m.max_range) == np.float32(s.max_range_m)
            assert np.float32(m.field_of_view) == np.float32(s.field_of_view_rad)
            assert m.radiation_type == 0  # Range.msg ULTRASOUND=0

    def test_crosstalk_lets_a_partner_pulse_arrive_first(self):
        """Two forward sensors fire together; the nearer one's echo reaches the farther one."""
        cfg = config(**{'sensors.behind.slot': 0, 'sensors.behind.x': 2.0,
                        'sensors.behind.y': 0.05, 'sensors.behind.yaw': 0.0,
                        'sensors.ahead.x': 0.0})
        world = World([Wall((3.0, -5.0), (3.0, 5.0))], default_air_c=20.0)
        first = {}
        for physics in (QUIET, SonarPhysics(noise_std_m=0.0, crosstalk=True)):
            run = Run(world, cfg, straight(), SpeedProfile.constant(0.0), physics)
            first[physics.crosstalk] = next(m.range for topic, _, _, m in run.records(0.2)
                                            if topic == '/sonar/ahead')
        # geometry: own echo 3 m; partner path 1 m to the wall + hypot(3, 0.05) back, halved
        assert first[False] == pytest.approx(3.0, abs=5e-4)
        assert first[True] == pytest.approx(0.5 * (1.0 + math.hypot(3.0, 0.05)), abs=5e-4)

    def test_same_seed_same_recording(self):
        """Runs are reproducible from their seed; another seed changes the noise."""
        def ranges(seed):
            run = Run(corridor(), config(), straight(), SpeedProfile.constant(0.7),
                      SonarPhysics(), seed=seed)
            return [m.range for topic, _, _, m in run.records(4.0) if topic == '/sonar/ahead']
        assert ranges(1) == ranges(1)
        assert ranges(1) != ranges(2)

    @pytest.mark.parametrize('storage', ['mcap', 'sqlite3', 'rosbag1'])
    def test_written_recording_reads_back_with_bagsource(self, tmp_path, storage):
        """Run.write makes a recording BagSource reads with every record and value."""
        run = Run(corridor(), config(), straight(), SpeedProfile.constant(0.7), SonarPhysics())
        distro = 'noetic' if storage == 'rosbag1' else 'humble'
        expected = list(run.records(1.5, start_time_s=T0, distro=distro))
        out = run.write(tmp_path / 'run.bag', 1.5, storage=storage, start_time_s=T0)
        with BagSource(out) as bag:
            assert bag.message_count == len(expected)
            got = list(bag.messages(['/odom', '/cmd_vel', '/sonar/ahead', '/sonar/behind']))
        assert [(topic, round(t, 6)) for topic, t, _ in got] == [
            (topic, round(t, 6)) for topic, _, t, _ in expected]
        ranges = [m.range for topic, _, m in got if topic == '/sonar/ahead']
        # Range.msg range is float32 (reference.md sec. 4)
        assert ranges == [np.float32(m.range) for topic, _, _, m in expected
                          if topic == '/sonar/ahead']


def test_bad_run_arguments_raise_value_error_naming_them():
    """Non-positive rates and limits are refused with the argument's name."""
    for kw, name in (({'odom_rate_hz': 0.0}, 'odom_rate_hz'), ({'accel_mps2': -1.0}, 'accel'),
                     ({'decel_mps2': 0.0}, 'decel')):
        with pytest.raises(ValueError, match=name):
            Run(corridor(), config(), straight(), SpeedProfile.constant(0.5), **kw)
    run = Run(corridor(), config(), straight(), SpeedProfile.constant(0.5))
    with pytest.raises(ValueError, match='duration_s'):
        run.records(-1.0)

"""A robot driving a path: speed profile, limits, firing schedule and the recording."""
from __future__ import annotations

import math
import statistics

import numpy as np
import pytest
from testkit import make_config

from sonar_guard.core.schedule import Schedule
from sonar_guard.offline.bags import BagSource
from sonar_guard.sim.drive import Arc, Line, Path, Run, SpeedProfile, Stop, Turn
from sonar_guard.sim.sonar import SonarPhysics
from sonar_guard.sim.world import AirZone, Disc, Wall, World

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


def motion(run: Run, duration: float) -> dict[str, np.ndarray]:
    """Return the run's odometry as arrays: t, x, y, yaw (pose) and vx, vy, wz (body twist)."""
    rows = []
    for topic, _, t, m in run.records(duration, start_time_s=0.0):
        if topic == '/odom':
            p, q, v = m.pose.pose.position, m.pose.pose.orientation, m.twist.twist
            # yaw of a quaternion turning about z only (REP 103: z up)
            rows.append((t, p.x, p.y, 2.0 * math.atan2(q.z, q.w), v.linear.x, v.linear.y,
                         v.angular.z))
    cols = np.array(rows).T
    return dict(zip(('t', 'x', 'y', 'yaw', 'vx', 'vy', 'wz'), cols))


def arc_pose(k: float, s: float) -> tuple[float, float, float]:
    """Pose after path length s on an arc of curvature k from the origin heading +x.

    reference.md sec. 7 (arc motion of a differential-drive base):
    (x, y, theta) = (sin(ks)/k, (1 - cos(ks))/k, ks).
    """
    return (math.sin(k * s) / k, (1.0 - math.cos(k * s)) / k, k * s)


def wrapped(angle):
    """Angle(s) wrapped into [-pi, pi), rad."""
    return (np.asarray(angle) + math.pi) % (2.0 * math.pi) - math.pi


def circumradius(cfg) -> float:
    """Largest distance of a footprint corner from base_link, m (numpy)."""
    return float(np.hypot(*np.asarray(cfg.robot.footprint.points).T).max())


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


class TestSegmentPaths:
    """Paths of lines, arcs and turns in place."""

    @pytest.mark.parametrize('radius', [0.4, 1.0, 3.5])
    @pytest.mark.parametrize('side', [1.0, -1.0])
    def test_arc_pose_is_the_textbook_circle(self, radius, side):
        """An arc's pose after s m is reference.md sec. 7's formula with k = +/- 1/radius."""
        path = Path.of(Arc(radius, side * 2.5))
        k = side / radius
        assert path.length == pytest.approx(radius * 2.5)
        for s in np.linspace(0.0, path.length, 23):
            x, y, yaw = path.pose_at(s)
            ex, ey, eth = arc_pose(k, s)  # reference.md sec. 7
            assert (x, y) == pytest.approx((ex, ey), abs=1e-12)
            assert yaw == pytest.approx(float(wrapped(eth)), abs=1e-12)

    def test_arc_from_any_start_is_the_formula_moved_rigidly(self):
        """From start (x0, y0, h0) the arc is the sec. 7 formula rotated by h0 and shifted."""
        x0, y0, h0 = 2.0, -1.0, 2.2
        path = Path.of(Arc(1.3, -1.7), start=(x0, y0, h0))
        rot = np.array([[math.cos(h0), -math.sin(h0)], [math.sin(h0), math.cos(h0)]])
        for s in np.linspace(0.0, path.length, 11):
            ex, ey, eth = arc_pose(-1.0 / 1.3, s)  # reference.md sec. 7
            expected = np.array([x0, y0]) + rot @ np.array([ex, ey])  # rigid motion (numpy)
            x, y, yaw = path.pose_at(s)
            np.testing.assert_allclose((x, y), expected, atol=1e-12)
            assert yaw == pytest.approx(float(wrapped(h0 + eth)), abs=1e-12)

    def test_segments_chain_from_where_the_one_before_ended(self):
        """Line 2 m, quarter circle left of radius 1 m, line 1 m: ends at (3, 2) facing +y."""
        path = Path.of(Line(2.0), Arc(1.0, math.pi / 2), Line(1.0))
        # by hand: the arc's centre is (2, 1); a quarter turn ends at (3, 1) heading +y
        assert path.length == pytest.approx(3.0 + math.pi / 2)
        assert path.pose_at(2.0) == pytest.approx((2.0, 0.0, 0.0))
        assert path.pose_at(2.0 + math.pi / 2) == pytest.approx((3.0, 1.0, math.pi / 2))
        assert path.pose_at(path.length) == pytest.approx((3.0, 2.0, math.pi / 2))

    def test_turn_in_place_changes_only_the_heading(self):
        """A turn adds no length; the next segment leaves in the turned heading."""
        path = Path.of(Line(1.0), Turn(-math.pi / 2), Line(1.0), start=(0.5, 0.5, 0.0))
        assert path.length == pytest.approx(2.0)
        assert path.pose_at(1.0) == pytest.approx((1.5, 0.5, -math.pi / 2))  # turn counts done
        assert path.pose_at(1.5) == pytest.approx((1.5, 0.0, -math.pi / 2))

    def test_reverse_segment_path_faces_backwards(self):
        """Reversed, the robot's yaw is the path heading plus pi; the position is the same."""
        forward = Path.of(Arc(2.0, 1.0))
        backward = Path.of(Arc(2.0, 1.0), reverse=True)
        for s in (0.0, 0.7, 2.0):
            assert backward.pose_at(s)[:2] == pytest.approx(forward.pose_at(s)[:2])
            assert wrapped(backward.pose_at(s)[2] - forward.pose_at(s)[2] - math.pi
                           ) == pytest.approx(0.0, abs=1e-12)

    @pytest.mark.parametrize('build, name', [
        (lambda: Line(0.0), 'Line.length_m'),
        (lambda: Line(math.inf), 'Line.length_m'),
        (lambda: Arc(-1.0, 1.0), 'Arc.radius_m'),
        (lambda: Arc(1.0, 0.0), 'Arc.angle_rad'),
        (lambda: Turn(math.nan), 'Turn.angle_rad'),
        (lambda: Path.of(), 'segments'),
        (lambda: Path.of(Line(1.0), 'left'), r'segments\[1\]'),
        (lambda: Path.of(Line(1.0), start=(0.0, math.nan, 0.0)), 'start'),
        (lambda: Path([(0.0, 0.0), (1.0, 0.0)], segments=[Line(1.0)]), 'not both'),
        (lambda: Path([(0.0, 0.0), (1.0, 0.0)], start=(0.0, 0.0, 0.0)), 'start'),
        (lambda: Path.of(Line(1.0), travel_rad=math.inf), 'travel_rad'),
    ])
    def test_bad_segments_raise_value_error_naming_them(self, build, name):
        """Zero, infinite or NaN sizes, empty or mixed paths are refused, naming the field."""
        with pytest.raises(ValueError, match=name):
            build()


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


class TestTurningMotion:
    """Arcs and turns in place: pose, twist, yaw-rate limits and the caps."""

    @pytest.mark.parametrize('side', [1.0, -1.0])
    def test_arc_odometry_lies_on_the_circle_with_yaw_rate_v_over_r(self, side):
        """On an arc the odometry pose is the sec. 7 circle and wz = vx / R with the arc's sign."""
        radius = 1.5
        run = Run(World([]), config(), Path.of(Arc(radius, side * 3.0)),
                  SpeedProfile.constant(0.5), QUIET)
        m = motion(run, 12.0)
        theta = np.unwrap(m['yaw'])
        # reference.md sec. 7: the pose at heading theta = k s is (sin(theta)/k, (1-cos(theta))/k)
        k = side / radius
        np.testing.assert_allclose(m['x'], np.sin(theta) / k, atol=1e-9)
        np.testing.assert_allclose(m['y'], (1.0 - np.cos(theta)) / k, atol=1e-9)
        # yaw rate of circular motion: w = v / R (reference.md sec. 7: radius v / w)
        np.testing.assert_allclose(m['wz'], side * m['vx'] / radius, atol=1e-12)
        assert m['vx'].max() == pytest.approx(0.5) and not m['vy'].any()
        assert theta[-1] == pytest.approx(side * 3.0)  # it went the whole arc

    @pytest.mark.parametrize('holonomic, travel', [(False, 0.0), (False, math.pi),
                                                   (True, math.pi / 2)])
    def test_odometry_twist_is_the_rate_of_change_of_its_pose(self, holonomic, travel):
        """Body twist = the pose's time derivative (central differences), turned into base_link."""
        cfg = config(**{'robot.holonomic': holonomic})
        path = Path.of(Arc(1.2, 2.8), travel_rad=travel)
        m = motion(Run(World([]), cfg, path, SpeedProfile.constant(0.6), QUIET), 10.0)
        yaw = np.unwrap(m['yaw'])
        # numpy.gradient: central differences of the map pose over time
        vx_map, vy_map = np.gradient(m['x'], m['t']), np.gradient(m['y'], m['t'])
        wz = np.gradient(yaw, m['t'])
        # body frame = map velocity rotated by -yaw (REP 105: twist in child_frame_id)
        vx = np.cos(yaw) * vx_map + np.sin(yaw) * vy_map
        vy = -np.sin(yaw) * vx_map + np.cos(yaw) * vy_map
        inner = slice(1, -1)  # one-sided differences at the ends
        tol = 0.6 * DT  # speed changes at most accel (0.6 m/s^2) per s; differences lag a tick
        np.testing.assert_allclose(m['vx'][inner], vx[inner], atol=tol)
        np.testing.assert_allclose(m['vy'][inner], vy[inner], atol=tol)
        np.testing.assert_allclose(m['wz'][inner], wz[inner], atol=tol)
        assert abs(m['vx'] if travel == math.pi / 2 else m['vy']).max() < 1e-12
        assert np.abs(m['vx'] if travel != math.pi / 2 else m['vy']).max() == pytest.approx(0.6)

    def test_sideways_travel_needs_a_holonomic_base(self):
        """A path driven sideways is refused for a robot that drives forward and reverse only."""
        with pytest.raises(ValueError, match='travel_rad'):
            Run(World([]), config(), Path.of(Line(1.0), travel_rad=math.pi / 2),
                SpeedProfile.constant(0.5))

    def test_turn_in_place_turns_by_the_angle_and_stays_put(self):
        """Yaw changes by the asked angle, the position never moves, vx = vy = 0 throughout."""
        start = (1.0, 2.0, 0.3)
        run = Run(World([]), config(), Path.of(Turn(-2.0), start=start),
                  SpeedProfile.constant(0.5), QUIET)
        m = motion(run, 6.0)
        assert not m['vx'].any() and not m['vy'].any()
        np.testing.assert_allclose(m['x'], 1.0, atol=1e-12)
        np.testing.assert_allclose(m['y'], 2.0, atol=1e-12)
        assert float(wrapped(m['yaw'][-1] - (0.3 - 2.0))) == pytest.approx(0.0, abs=1e-9)
        assert m['wz'].max() <= 0.0 and m['wz'].min() == pytest.approx(-1.0)  # top yaw rate
        # trapezoid rule on the yaw rate gives the angle turned; the last tick stops short at
        # the asked angle, so allow half a tick of braking (0.8 / R_c rad/s^2 x dt x dt / 2)
        assert float(np.sum(0.5 * (m['wz'][1:] + m['wz'][:-1]) * np.diff(m['t']))
                     ) == pytest.approx(-2.0, abs=0.8 / circumradius(config()) * DT * DT)

    def test_yaw_rate_ramps_at_accel_and_decel_over_the_circumradius(self):
        """By default the yaw rate speeds up at accel / R_c and brakes at robot.decel / R_c."""
        cfg = config()
        run = Run(World([]), cfg, Path.of(Turn(3.0)), SpeedProfile.constant(0.5), QUIET)
        m = motion(run, 6.0)
        # the engine's rule for robot.turn_decel = 0 (issue 17): robot.decel / circumradius
        up, down = 0.6 / circumradius(cfg), 0.8 / circumradius(cfg)
        dw = np.diff(m['wz'])
        assert dw.max() == pytest.approx(up * DT) and dw.min() == pytest.approx(-down * DT)

    def test_turn_cap_brakes_the_yaw_rate_at_the_angular_deceleration(self):
        """A turn cap of 0.3 rad/s from 2 s: the yaw rate falls at turn_decel and stays under."""
        asked = []

        def cap(t, yaw_rate):
            asked.append((t, yaw_rate))
            return 0.3 if t >= 2.0 else math.inf

        run = Run(World([]), config(), Path.of(Turn(6.0)), SpeedProfile.constant(0.5), QUIET,
                  turn_decel_radps2=0.5, turn_cap=cap)
        m = motion(run, 5.0)
        t, wz = m['t'], m['wz']
        assert wz[t <= 2.0 + 1e-9].max() == pytest.approx(1.0)  # at its top rate before
        # closed form: from 1.0 down to 0.3 rad/s at 0.5 rad/s^2 takes 1.4 s, 0.5 dt per tick
        braking = (t > 2.0 + 1e-9) & (t <= 2.0 + 1.4 - 1e-9)
        np.testing.assert_allclose(np.diff(wz)[braking[1:]], -0.5 * DT, atol=1e-12)
        assert wz[t >= 3.4 + DT].max() == pytest.approx(0.3)
        # asked at every tick with simulation time and the current signed yaw rate
        np.testing.assert_allclose([a for a, _ in asked][: len(t)], t, atol=1e-9)
        assert [w for _, w in asked][: len(wz)] == pytest.approx(list(wz))

    def test_a_cap_on_either_rate_slows_both_on_an_arc(self):
        """On an arc of radius 2 m a turn cap of 0.2 rad/s holds the speed to 0.4 m/s, and a
        speed cap of 0.3 m/s the yaw rate to 0.15 rad/s: the curvature is kept."""
        def caps(t, _):
            return 0.3 if 3.0 <= t < 6.0 else math.inf

        def turn_caps(t, _):
            return 0.2 if t >= 6.0 else math.inf

        run = Run(World([]), config(), Path.of(Arc(2.0, 6.0)), SpeedProfile.constant(0.8),
                  QUIET, speed_cap=caps, turn_cap=turn_caps)
        m = motion(run, 10.0)
        t, vx, wz = m['t'], m['vx'], m['wz']
        np.testing.assert_allclose(wz, vx / 2.0, atol=1e-12)  # w = v / R (reference.md sec. 7)
        # closed form: braking at 0.8 m/s^2 from 0.8 to 0.3 m/s takes 0.625 s
        assert vx[(t >= 3.0 + 0.625 + DT) & (t < 6.0)].max() == pytest.approx(0.3)
        assert wz[t >= 9.0].max() == pytest.approx(0.2) and vx[t >= 9.0].max() == (
            pytest.approx(0.4))

    def test_robot_enters_a_tight_arc_no_faster_than_its_top_yaw_rate_allows(self):
        """Before an arc of radius 0.5 m it brakes on the straight to turn_rate * R = 0.4 m/s."""
        run = Run(World([]), config(), Path.of(Line(4.0), Arc(0.5, math.pi / 2), Line(2.0)),
                  SpeedProfile.constant(1.0), QUIET, turn_rate_radps=0.8)
        m = motion(run, 12.0)
        on_arc = np.abs(m['wz']) > 0.0
        assert on_arc.any() and np.abs(m['wz']).max() <= 0.8 + 1e-12
        assert m['vx'][on_arc].max() <= 0.4 + 1e-12 and m['vx'].max() == pytest.approx(1.0)
        assert np.diff(m['vx']).min() >= -0.8 * DT - 1e-12  # never harder than robot.decel
        assert m['x'][-1] == pytest.approx(4.5) and m['y'][-1] == pytest.approx(2.5)

    def test_robot_stands_still_at_each_end_of_a_turn_in_place(self):
        """Line, turn, line: it never drives and turns at once, and ends where the path does."""
        run = Run(World([]), config(), Path.of(Line(1.5), Turn(math.pi / 2), Line(1.0)),
                  SpeedProfile.constant(0.7), QUIET)
        m = motion(run, 12.0)
        assert not np.any((m['vx'] != 0.0) & (m['wz'] != 0.0))
        assert (m['wz'] > 0.0).sum() > 10 and (m['vx'] > 0.0).sum() > 10
        assert (m['x'][-1], m['y'][-1]) == pytest.approx((1.5, 1.0))
        assert m['yaw'][-1] == pytest.approx(math.pi / 2)
        assert np.abs(np.diff(m['x'])).max() <= 0.7 * DT + 1e-12  # no jumps at the seams

    def test_sonars_fire_from_the_turned_pose(self):
        """Turned half round in front of a wall, the rear sensor sees it at its own distance."""
        world = World([Wall((2.0, -5.0), (2.0, 5.0))], default_air_c=20.0)
        run = Run(world, config(), Path.of(Turn(math.pi)), SpeedProfile.constant(0.5), QUIET)
        ranges = {'/sonar/ahead': [], '/sonar/behind': []}
        for topic, _, _, m in run.records(8.0, start_time_s=T0):
            if topic in ranges:
                ranges[topic].append(m.range)
        # mounts at x = +/- 0.5 m (testkit): the wall 2 m from base_link is 1.5 m from either
        assert ranges['/sonar/ahead'][0] == pytest.approx(1.5, abs=1e-3)
        assert ranges['/sonar/behind'][0] == math.inf
        assert ranges['/sonar/ahead'][-1] == math.inf
        assert ranges['/sonar/behind'][-1] == pytest.approx(1.5, abs=1e-3)

    @pytest.mark.filterwarnings('error::RuntimeWarning')  # rays that hit nothing stay quiet
    def test_sonars_fire_from_the_pose_after_an_arc(self):
        """After a quarter circle left of radius 1 m the robot faces +y at (1, 1) (sec. 7)."""
        world = World([Wall((-5.0, 3.5), (5.0, 3.5))], default_air_c=20.0)
        run = Run(world, config(), Path.of(Arc(1.0, math.pi / 2)), SpeedProfile.constant(0.5),
                  QUIET)
        last = [m.range for topic, _, _, m in run.records(8.0) if topic == '/sonar/ahead'][-1]
        x, y, _ = arc_pose(1.0, math.pi / 2)  # reference.md sec. 7: (1, 1, pi/2)
        assert last == pytest.approx(3.5 - (y + 0.5), abs=1e-3)  # ahead sensor 0.5 m forward


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

    def test_sensors_fired_together_read_what_each_reads_alone(self):
        """Cast in one pass, each sensor keeps its own mount, cone, range and air temperature."""
        cfg = config(**{'sensors.behind.slot': 0, 'sensors.behind.field_of_view': 0.2,
                        'sensors.behind.max_range': 2.5, 'sensors.ahead.yaw': 0.3})
        world = World([Wall((3.0, -5.0), (3.0, 5.0)), Disc((-1.6, 0.2), 0.3)],
                      air=[AirZone([(0.0, -1.0), (1.0, -1.0), (1.0, 1.0), (0.0, 1.0)], 5.0)],
                      default_air_c=20.0)
        run = Run(world, cfg, straight(), SpeedProfile.constant(0.0), QUIET)
        rng = np.random.default_rng(0)
        for pose in ((0.0, 0.0, 0.0), (0.4, 0.1, -0.1), (-0.2, -0.3, -0.4)):
            together = run._fire(cfg.sensors, 0.0, pose, rng)
            alone = [run._fire([s], 0.0, pose, rng)[0] for s in cfg.sensors]
            assert together == alone
            assert all(math.isfinite(value) for _, value, _ in together)  # both hear something
        # the ahead sensor stands in the 5 degC zone, the behind one in 20 degC air
        assert world.air_temperature(0.5, 0.0) != world.air_temperature(-0.5, 0.0)

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
                     ({'decel_mps2': 0.0}, 'decel'), ({'turn_rate_radps': 0.0}, 'turn_rate'),
                     ({'turn_accel_radps2': math.nan}, 'turn_accel'),
                     ({'turn_decel_radps2': -0.5}, 'turn_decel')):
        with pytest.raises(ValueError, match=name):
            Run(corridor(), config(), straight(), SpeedProfile.constant(0.5), **kw)
    run = Run(corridor(), config(), straight(), SpeedProfile.constant(0.5))
    with pytest.raises(ValueError, match='duration_s'):
        run.records(-1.0)
    run = Run(corridor(), config(), Path.of(Turn(1.0)), SpeedProfile.constant(0.5),
              turn_cap=lambda t, w: math.nan)
    with pytest.raises(ValueError, match='turn_cap returned NaN'):
        list(run.records(0.1))

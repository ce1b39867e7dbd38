"""Pieces of the node that need no DDS: the command gate, transition logging, descriptors."""
from __future__ import annotations

import math

import pytest

pytest.importorskip('rclpy', reason='rclpy is not installed (make venv brings it)')

from geometry_msgs.msg import Twist
from rcl_interfaces.msg import ParameterType

from sonar_guard.core.config import global_specs, sensor_specs
from sonar_guard.core.monitor import Event
from sonar_guard.core.readings import Verdict
from sonar_guard.ros.convert import seconds_to_stamp_parts, stamp_to_s
from sonar_guard.ros.node import FindingLog, TransitionLog, gate_command
from sonar_guard.ros.params import descriptor_of


def twist(vx=0.0, vy=0.0, wz=0.0):
    msg = Twist()
    msg.linear.x, msg.linear.y, msg.angular.z = vx, vy, wz
    return msg


class TestGate:
    """cmd_vel_request scaled into cmd_vel_limited."""

    def test_command_within_the_limit_passes_unchanged(self):
        """Below the limit nothing changes."""
        out = gate_command(twist(0.3, 0.0, 0.5), 0.8, False)
        assert (out.linear.x, out.angular.z) == (0.3, 0.5)

    def test_faster_command_is_scaled_keeping_its_curvature(self):
        """Linear and angular scale alike, so the path curvature v/w stays (common practice)."""
        out = gate_command(twist(1.0, 0.0, 0.4), 0.5, False)
        assert out.linear.x == pytest.approx(0.5)
        assert out.angular.z == pytest.approx(0.2)
        assert out.linear.x / out.angular.z == pytest.approx(1.0 / 0.4)

    def test_holonomic_command_is_scaled_by_its_planar_speed(self):
        """The speed compared with the limit is hypot(vx, vy)."""
        out = gate_command(twist(0.6, 0.8), 0.5, False)
        assert math.hypot(out.linear.x, out.linear.y) == pytest.approx(0.5)

    @pytest.mark.parametrize('cmd', [twist(0.4, 0.0, 0.3), twist(0.0, 0.0, 0.5)])
    def test_failed_sensing_with_zero_fallback_gives_a_zero_command(self, cmd):
        """Sensing failed and fallback_speed is 0: nothing moves, not even a turn."""
        out = gate_command(cmd, 0.0, True)
        assert (out.linear.x, out.angular.z) == (0.0, 0.0)

    def test_non_finite_command_becomes_zero(self):
        """A NaN command is never passed on."""
        out = gate_command(twist(math.nan, 0.0, 0.1), 1.0, False)
        assert (out.linear.x, out.angular.z) == (0.0, 0.0)

    def test_zero_limit_stops_translation_but_not_a_turn_in_place(self):
        """An obstacle ahead at the limit 0 still lets the robot turn away."""
        out = gate_command(twist(0.0, 0.0, 0.5), 0.0, False)
        assert out.angular.z == 0.5


class TestTransitionLog:
    """One line per verdict change, throttled per sensor."""

    def test_each_change_is_said_once(self):
        """The same verdict twice says nothing the second time."""
        log = TransitionLog(period_s=1.0)
        assert log.note('a', Verdict.OK, '1.0 m', 0.0) == 'a: none -> ok: 1.0 m'
        assert log.note('a', Verdict.OK, '1.0 m', 5.0) is None

    def test_a_flood_of_changes_is_held_and_counted(self):
        """Within the period further changes are counted, then summarised."""
        log = TransitionLog(period_s=1.0)
        log.note('a', Verdict.OK, 'x', 0.0)
        for i in range(10):
            verdict = Verdict.JUMP if i % 2 == 0 else Verdict.OK
            assert log.note('a', verdict, 'x', 0.1 + 0.01 * i) is None
        line = log.note('a', Verdict.BLIND, 'y', 2.0)
        assert line == 'a: ok -> blind: y (10 more changes in the last 1 s)'

    def test_sensors_are_throttled_independently(self):
        """One noisy sensor does not hide another's change."""
        log = TransitionLog(period_s=1.0)
        log.note('a', Verdict.OK, 'x', 0.0)
        assert log.note('b', Verdict.STUCK, 'z', 0.1) is not None


class TestFindingLog:
    """Closed findings reach the log without flooding it."""

    def test_a_finding_is_logged_with_kind_sensor_times_and_detail(self):
        """One line carries everything the offline report would show."""
        line = FindingLog().note(Event('jump', 'a', 1.0, 1.0, '2.0 -> 0.5 m'), 0.0)
        assert line == 'finding: jump a 1.000..1.000 s: 2.0 -> 0.5 m'

    def test_more_than_the_rate_is_held_and_counted(self):
        """Beyond per_second lines a second, findings are counted and the count is said."""
        log = FindingLog(per_second=3)
        event = Event('overspeed', None, 1.0, 2.0, 'x')
        lines = [log.note(event, 0.01 * i) for i in range(10)]
        assert sum(line is not None for line in lines) == 3
        later = log.note(event, 1.5)
        assert later is not None and '(7 findings not logged before this one)' in later
        assert 'robot' in later


class TestDescriptors:
    """Parameter descriptors carry type, unit and range from the schema."""

    def test_float_keys_get_their_range_and_accept_integers(self):
        """limits.max_speed: (0, 10] m/s as a FloatingPointRange; dynamic typing for 2 vs 2.0."""
        spec = next(s for s in global_specs() if s.key == 'limits.max_speed')
        d = descriptor_of(spec)
        assert d.type == ParameterType.PARAMETER_DOUBLE
        assert d.dynamic_typing
        assert (d.floating_point_range[0].from_value, d.floating_point_range[0].to_value) == (
            0.0, 10.0)
        assert '[m/s]' in d.description
        assert 'allowed: > 0 and <= 10 m/s' in d.additional_constraints

    def test_integer_keys_get_an_integer_range(self):
        """sonar.stuck_count is an IntegerRange."""
        spec = next(s for s in global_specs() if s.key == 'sonar.stuck_count')
        d = descriptor_of(spec)
        assert d.type == ParameterType.PARAMETER_INTEGER
        assert d.integer_range[0].from_value == 2

    def test_restart_only_keys_say_so(self):
        """Topic keys tell the user a restart is needed."""
        spec = next(s for s in sensor_specs('front') if s.key == 'sensors.front.topic')
        assert 'restart the node' in descriptor_of(spec).description


@pytest.mark.parametrize('t', [0.0, 1.5, 1796223266.022023418, 12.999999999])
def test_stamp_round_trip(t):
    """builtin_interfaces/Time (sec, nanosec) and float seconds convert both ways."""
    sec, nanosec = seconds_to_stamp_parts(t)
    assert 0 <= nanosec < 1_000_000_000

    class Stamp:
        pass
    stamp = Stamp()
    stamp.sec, stamp.nanosec = sec, nanosec
    assert stamp_to_s(stamp) == pytest.approx(t, abs=1e-6)

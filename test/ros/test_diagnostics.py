"""Diagnostics messages: names, levels as bytes, values, and the monitor status (no ROS spin)."""
from __future__ import annotations

import dataclasses
import math
from pathlib import Path
import subprocess
import sys

from builtin_interfaces.msg import Time
from diagnostic_msgs.msg import DiagnosticArray, DiagnosticStatus
import pytest
from testkit import make_config

from sonar_guard.core.monitor import Decision, Monitor, OdometrySample, SensorStatus
from sonar_guard.core.readings import RangeReading, Verdict
from sonar_guard.ros import diagnostics
from sonar_guard.ros.diagnostics import (
    build_diagnostics,
    format_number,
    levels_of,
    monitor_level,
    sensor_level,
)

# diagnostic_msgs/DiagnosticStatus.msg: byte OK=0 WARN=1 ERROR=2 STALE=3
# (reference.md sec. 4: rclpy holds `byte` fields as one-byte bytes objects.)
OK, WARN, ERROR, STALE = (DiagnosticStatus.OK, DiagnosticStatus.WARN, DiagnosticStatus.ERROR,
                          DiagnosticStatus.STALE)

# No stuck verdicts while the test robot drives past a fixed echo; nothing rises slowly.
SETTINGS = {'sensors.ahead.frame_id': 'sonar_ahead', 'sonar.stuck_count': 100000,
            'limits.rise_rate': 100.0, 'limits.max_speed': 1.0, 'limits.fallback_speed': 0.0}
STAMP = Time(sec=1234, nanosec=567_000_000)
SENSOR_KEYS = ('last_range_m', 'verdict', 'period_median_s', 'period_worst_s',
               'detection_latency_s', 'free_distance_m', 'remembered_m', 'silent_for_s')
MONITOR_KEYS = ('allowed_speed_mps', 'target_mps', 'reason', 'heading_rad', 'covering',
                'limiting_sensor', 'measured_speed_mps', 'odometry_fresh')


def drive(config, ahead, *, seconds=0.5, vx=0.2, odometry=True):
    """Run a monitor: odometry at 50 Hz, 'ahead' every 40 ms with range ``ahead``, 'behind' mute.

    Returns (monitor, last decision, last time s).
    """
    monitor = Monitor(config)
    decision, t = None, 0.0
    for k in range(int(round(seconds / 0.02))):
        t = k * 0.02
        if odometry:
            monitor.on_odometry(OdometrySample(t, vx, 0.0, 0.0, t))
        if k % 2 == 0 and ahead is not None:
            monitor.on_range(RangeReading('ahead', t, ahead, t))
        decision = monitor.tick(t)
    return monitor, decision, t


def by_name(array):
    """Return {status name: DiagnosticStatus}."""
    return {s.name: s for s in array.status}


def values(status):
    """Return {key: value} of a DiagnosticStatus."""
    return {kv.key: kv.value for kv in status.values}


@pytest.fixture
def config():
    """The two-sensor test robot; only 'ahead' has a frame_id."""
    return make_config(SETTINGS)


def test_names_are_exact_and_one_status_per_sensor_plus_the_monitor(config):
    """Names 'sonar_guard: <sensor>' and 'sonar_guard: monitor', sensors first (design.md)."""
    monitor, decision, t = drive(config, 1.25)
    array = build_diagnostics(monitor.statuses(t), decision, config, STAMP)
    assert isinstance(array, DiagnosticArray)
    assert [s.name for s in array.status] == ['sonar_guard: ahead', 'sonar_guard: behind',
                                              'sonar_guard: monitor']


def test_header_stamp_is_the_given_stamp(config):
    """The caller's builtin_interfaces/Time goes into the array header unchanged."""
    monitor, decision, t = drive(config, 1.25)
    array = build_diagnostics(monitor.statuses(t), decision, config, STAMP)
    assert array.header.stamp == STAMP
    assert (array.header.stamp.sec, array.header.stamp.nanosec) == (1234, 567_000_000)


def test_hardware_id_is_the_frame_id_or_else_the_sensor_name(config):
    """'ahead' has frame_id sonar_ahead; 'behind' has none and falls back to its name."""
    monitor, decision, t = drive(config, 1.25)
    status = by_name(build_diagnostics(monitor.statuses(t), decision, config, STAMP))
    assert status['sonar_guard: ahead'].hardware_id == 'sonar_ahead'
    assert status['sonar_guard: behind'].hardware_id == 'behind'
    assert status['sonar_guard: monitor'].hardware_id == 'sonar_guard'


def test_engine_states_map_to_message_levels(config):
    """ok -> OK, never heard -> STALE, NaN -> ERROR, -inf -> WARN (levels compared as bytes)."""
    monitor, decision, t = drive(config, 1.25)
    status = by_name(build_diagnostics(monitor.statuses(t), decision, config, STAMP))
    assert status['sonar_guard: ahead'].level == OK
    assert status['sonar_guard: behind'].level == STALE  # never heard
    assert isinstance(status['sonar_guard: ahead'].level, bytes)

    # REP 117: NaN is an erroneous detection (the validator's invalid verdict)
    monitor.on_range(RangeReading('ahead', t + 0.01, math.nan, t + 0.01))
    status = by_name(build_diagnostics(monitor.statuses(t + 0.01), decision, config, STAMP))
    assert status['sonar_guard: ahead'].level == ERROR
    assert status['sonar_guard: ahead'].message.startswith('invalid: ')

    # REP 117: -inf is too close to quantify (the validator's blind verdict)
    monitor.on_range(RangeReading('ahead', t + 0.02, -math.inf, t + 0.02))
    status = by_name(build_diagnostics(monitor.statuses(t + 0.02), decision, config, STAMP))
    assert status['sonar_guard: ahead'].level == WARN
    assert status['sonar_guard: ahead'].message.startswith('blind: ')


def test_sensor_that_stops_talking_goes_stale_and_says_for_how_long(config):
    """After limits.stale_after (0.3 s default) without a reading: STALE, 'silent for ...'."""
    monitor, decision, t = drive(config, 1.25)
    later = t + 0.42
    status = by_name(build_diagnostics(monitor.statuses(later), decision, config, STAMP))
    ahead = status['sonar_guard: ahead']
    assert ahead.level == STALE
    assert ahead.message.startswith('silent for 0.42 s')
    assert values(ahead)['silent_for_s'] == '0.420'


BASE_STATUS = SensorStatus(name='ahead', verdict=Verdict.OK, reason='1.250 m', last_range_m=1.25,
                           silent_for_s=0.01, silent=False, free_distance_m=1.25, memory_m=None,
                           latency_s=0.05, period_median_s=0.04, period_worst_s=0.05)


@pytest.mark.parametrize(('verdict', 'expected'), [
    (Verdict.OK, OK),
    (Verdict.NO_ECHO, OK),
    (Verdict.BLIND, WARN),
    (Verdict.JUMP, WARN),
    (Verdict.LATE, WARN),
    (Verdict.STALE, WARN),
    (Verdict.INVALID, ERROR),
    (Verdict.STUCK, ERROR),
])
def test_every_verdict_has_its_level(verdict, expected):
    """The module docstring's table, row by row; levels from the message constants."""
    status = dataclasses.replace(BASE_STATUS, verdict=verdict)
    assert bytes([sensor_level(status)]) == expected


@pytest.mark.parametrize('verdict', list(Verdict))
def test_silence_overrides_every_verdict(verdict):
    """A silent sensor is STALE whatever it said last."""
    status = dataclasses.replace(BASE_STATUS, verdict=verdict, silent=True, silent_for_s=1.0)
    assert bytes([sensor_level(status)]) == STALE


def test_no_reading_yet_is_stale_even_before_stale_after():
    """verdict None (nothing heard) is STALE though silent is not yet set."""
    status = dataclasses.replace(BASE_STATUS, verdict=None, silent=False)
    assert bytes([sensor_level(status)]) == STALE


def test_a_held_obstacle_raises_ok_to_warn_but_never_lowers_error():
    """A remembered obstacle makes an ok/no_echo sensor WARN; invalid stays ERROR."""
    held = dataclasses.replace(BASE_STATUS, verdict=Verdict.NO_ECHO, memory_m=0.42)
    assert bytes([sensor_level(held)]) == WARN
    assert bytes([sensor_level(dataclasses.replace(held, verdict=Verdict.INVALID))]) == ERROR


def test_sensor_values_hold_every_key_and_a_count_per_verdict(config):
    """Keys of the brief, plus count_<verdict> for each Verdict member."""
    monitor, decision, t = drive(config, 1.25)
    status = by_name(build_diagnostics(monitor.statuses(t), decision, config, STAMP))
    got = values(status['sonar_guard: ahead'])
    expected = set(SENSOR_KEYS) | {f'count_{v.value}' for v in Verdict}
    assert set(got) == expected
    assert all(isinstance(v, str) for v in got.values())
    # 0.5 s of driving, one reading every 40 ms from t = 0: 13 readings, all ok
    assert got['count_ok'] == '13' and got['count_invalid'] == '0'
    assert got['verdict'] == 'ok'


def test_numbers_are_fixed_point_and_unknowns_are_spelled_out(config):
    """'%.3f' numbers; never-heard sensor: range 'nan', silence 'inf', memory 'none'."""
    monitor, decision, t = drive(config, 1.25)
    status = by_name(build_diagnostics(monitor.statuses(t), decision, config, STAMP))
    ahead = values(status['sonar_guard: ahead'])
    behind = values(status['sonar_guard: behind'])
    assert ahead['last_range_m'] == '1.250'
    # front-edge sensor, half fov 0.2 rad: the footprint first reaches the reading's arc at
    # its ends, 1.25 cos(0.2) = 1.225 m ahead (plane geometry)
    assert ahead['free_distance_m'] == f'{1.25 * math.cos(0.2):.3f}'
    assert ahead['period_median_s'] == '0.040'  # one reading every 0.04 s (input)
    assert ahead['remembered_m'] == 'none'
    assert behind['last_range_m'] == 'nan'
    assert behind['silent_for_s'] == 'inf'
    assert behind['verdict'] == 'none'
    assert status['sonar_guard: ahead'].message == 'ok: 1.250 m'


@pytest.mark.parametrize(('value', 'text'), [
    # decimal.Decimal(1.2345) = 1.23449999...: the stored double is below the half
    (1.2345, '1.234'),
    # decimal.Decimal(0.0005) = 0.00050000000000000001...: above the half
    (0.0005, '0.001'),
    (-0.25, '-0.250'),
    (3, '3.000'),
    (math.nan, 'nan'),
    (math.inf, 'inf'),
    (-math.inf, '-inf'),
    (None, 'none'),
])
def test_format_number(value, text):
    """Three decimals of the exact stored double ('%.3f'); NaN/inf spelled out, None 'none'."""
    assert format_number(value) == text


def decision_with(**changes):
    """Return a clear-path decision with some fields replaced."""
    base = Decision(time_s=1.0, limit_mps=1.0, target_mps=1.0, heading_rad=0.0, reason='clear',
                    limiting_sensor=None, covering=('ahead',), speed_mps=0.2,
                    odometry_fresh=True)
    return base._replace(**changes)


@pytest.mark.parametrize(('decision', 'expected'), [
    (decision_with(), OK),
    (decision_with(limit_mps=0.62, target_mps=0.62, limiting_sensor='ahead',
                   reason='ahead: 0.80 m free, latency 0.220 s'), WARN),
    (decision_with(limit_mps=0.8, target_mps=1.0), WARN),  # still rising back to max
    (decision_with(limit_mps=0.0, target_mps=0.0, limiting_sensor='ahead',
                   reason='ahead silent'), ERROR),
    (decision_with(limit_mps=0.0, target_mps=0.0, limiting_sensor='ahead',
                   reason='ahead stuck'), ERROR),
    (decision_with(limit_mps=0.0, target_mps=0.0, reason='odometry stale or missing',
                   odometry_fresh=False), ERROR),
    (decision_with(limit_mps=0.0, target_mps=0.0, reason='no sensor covers this direction',
                   covering=()), ERROR),
    # a sensor name holding a failure word is not a failure: an obstacle, WARN
    (decision_with(limit_mps=0.3, target_mps=0.3, limiting_sensor='stuck_bumper',
                   reason='stuck_bumper: 0.40 m free, latency 0.200 s'), WARN),
])
def test_monitor_level_table(config, decision, expected):
    """Failure -> ERROR, below max_speed -> WARN, at max_speed -> OK."""
    assert bytes([monitor_level(decision, config)]) == expected


@pytest.mark.parametrize(('ahead', 'odometry', 'expected', 'reason_part'), [
    (math.inf, True, OK, 'clear'),
    (0.5, True, WARN, 'ahead: '),
    (None, True, ERROR, 'ahead silent'),
    (math.inf, False, ERROR, 'odometry'),
])
def test_monitor_status_follows_the_engine(config, ahead, odometry, expected, reason_part):
    """Real engine decisions (core/monitor.py reasons) give the monitor status its level."""
    monitor, decision, t = drive(config, ahead, odometry=odometry)
    assert reason_part in decision.reason
    status = by_name(build_diagnostics(monitor.statuses(t), decision, config, STAMP))
    mon = status['sonar_guard: monitor']
    assert mon.level == expected
    assert mon.message == f'limit {decision.limit_mps:.2f} m/s: {decision.reason}'


def test_monitor_values_hold_every_key(config):
    """allowed speed, target, reason, heading, covering, limiting sensor, speed, odometry."""
    monitor, decision, t = drive(config, 0.5)
    got = values(by_name(build_diagnostics(monitor.statuses(t), decision, config,
                                           STAMP))['sonar_guard: monitor'])
    assert set(got) == set(MONITOR_KEYS)
    assert got['covering'] == 'ahead'
    assert got['limiting_sensor'] == 'ahead'
    assert got['measured_speed_mps'] == '0.200'  # odometry input vx
    assert got['heading_rad'] == '0.000'
    assert got['odometry_fresh'] == 'true'
    assert got['reason'] == decision.reason
    assert float(got['allowed_speed_mps']) == pytest.approx(decision.limit_mps, abs=5e-4)
    assert 0.0 < float(got['allowed_speed_mps']) < 1.0


def test_covering_is_comma_joined(config):
    """Several covering sensors appear as 'a,b'."""
    array = build_diagnostics([], decision_with(covering=('ahead', 'behind')), config, STAMP)
    assert values(array.status[0])['covering'] == 'ahead,behind'


def test_levels_of_reads_bytes_back_as_ints(config):
    """levels_of gives {name: int}; ints equal the message constants' single byte."""
    monitor, decision, t = drive(config, 1.25)
    levels = levels_of(build_diagnostics(monitor.statuses(t), decision, config, STAMP))
    assert levels == {'sonar_guard: ahead': OK[0], 'sonar_guard: behind': STALE[0],
                      'sonar_guard: monitor': OK[0]}
    assert (OK[0], WARN[0], ERROR[0], STALE[0]) == (0, 1, 2, 3)  # DiagnosticStatus.msg


def test_public_names_exist_and_all_is_sorted():
    """Sorted __all__ whose names exist (style.md facades)."""
    assert list(diagnostics.__all__) == sorted(diagnostics.__all__)
    assert all(hasattr(diagnostics, name) for name in diagnostics.__all__)


def test_messages_build_without_rclpy_init():
    """Building diagnostics and markers needs no rclpy.init and no DDS: rclpy stays unloaded."""
    code = ('import sys\n'
            'from builtin_interfaces.msg import Time\n'
            'from testkit import make_config\n'
            'from sonar_guard.core.monitor import Monitor\n'
            'from sonar_guard.ros.diagnostics import build_diagnostics\n'
            'from sonar_guard.ros.markers import build_markers\n'
            'c = make_config()\n'
            'm = Monitor(c)\n'
            'd = m.tick(0.0)\n'
            'build_diagnostics(m.statuses(0.0), d, c, Time())\n'
            'build_markers(c, m.statuses(0.0), d, Time())\n'
            'print("rclpy" in sys.modules)\n')
    test_dir = str(Path(__file__).resolve().parents[1])
    proc = subprocess.run([sys.executable, '-c', code], capture_output=True, text=True,
                          timeout=120, cwd=test_dir, check=False)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.strip() == 'False'

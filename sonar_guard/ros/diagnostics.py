"""Build diagnostic_msgs/DiagnosticArray messages from the engine's statuses and decision.

Pure functions: no node, no ``rclpy.init``; only the diagnostic_msgs message classes are used,
so the live node and tests share them without DDS. One status per sensor, named
``sonar_guard: <sensor>``, and one for the speed limit, named ``sonar_guard: monitor``.

Levels are plain ints here (0 OK, 1 WARN, 2 ERROR, 3 STALE, as in DiagnosticStatus.msg); the
message field ``level`` is a ``byte``, which rclpy holds as a one-byte ``bytes`` object, so
they are written as ``bytes([level])`` and read back with :func:`levels_of`.

Per-sensor level, first matching row wins; a held (remembered) obstacle raises OK to WARN:

=========================================  ======  ========================================
sensor state                               level   why
=========================================  ======  ========================================
silent (no usable reading for stale_after) STALE   nothing current is known of this beam
no reading yet (verdict None)              STALE   nothing was ever heard
``invalid`` or ``stuck``                   ERROR   the sensor's output cannot be used
``blind``, ``jump``, ``late``, ``stale``   WARN    usable with care, or something is close
``ok``, ``no_echo``                        OK      a trusted reading
``ok``/``no_echo`` with an obstacle held   WARN    a lost echo is dead-reckoned from memory
=========================================  ======  ========================================

Monitor level: ERROR when the limit sits at ``fallback_speed`` because sensing or odometry
failed (a covering sensor silent or stuck, odometry stale, no sensor covering the direction of
travel); WARN when the limit is below ``max_speed`` for any other reason (an obstacle, or the
limit still rising back); OK at ``max_speed``.

Numbers in values are fixed-point with three decimals (``'%.3f'``), NaN as ``'nan'``, infinities
as ``'inf'``/``'-inf'``; absent things as ``'none'``. Units: m, s, m/s, rad.
"""
from __future__ import annotations

from collections.abc import Sequence
import math
from typing import TYPE_CHECKING

from diagnostic_msgs.msg import DiagnosticArray, DiagnosticStatus, KeyValue

from sonar_guard.core.config import Config
from sonar_guard.core.monitor import Decision, SensorStatus
from sonar_guard.core.readings import Verdict

if TYPE_CHECKING:
    from builtin_interfaces.msg import Time

__all__ = [
    'HARDWARE_ID',
    'LEVEL_ERROR',
    'LEVEL_OK',
    'LEVEL_STALE',
    'LEVEL_WARN',
    'MONITOR_STATUS_NAME',
    'NAME_PREFIX',
    'build_diagnostics',
    'format_number',
    'levels_of',
    'monitor_level',
    'sensor_level',
    'sensor_status_name',
]

# Taken from the message definition (bytes in rclpy) so the ints cannot drift from it.
LEVEL_OK: int = DiagnosticStatus.OK[0]
LEVEL_WARN: int = DiagnosticStatus.WARN[0]
LEVEL_ERROR: int = DiagnosticStatus.ERROR[0]
LEVEL_STALE: int = DiagnosticStatus.STALE[0]

NAME_PREFIX = 'sonar_guard: '
MONITOR_STATUS_NAME = NAME_PREFIX + 'monitor'
HARDWARE_ID = 'sonar_guard'

_VERDICT_LEVELS: dict[Verdict, int] = {
    Verdict.OK: LEVEL_OK,
    Verdict.NO_ECHO: LEVEL_OK,
    Verdict.BLIND: LEVEL_WARN,
    Verdict.JUMP: LEVEL_WARN,
    Verdict.LATE: LEVEL_WARN,
    Verdict.STALE: LEVEL_WARN,
    Verdict.INVALID: LEVEL_ERROR,
    Verdict.STUCK: LEVEL_ERROR,
}
# Words of the engine's reasons (core/monitor.py Monitor._bound) when the limit fell back
# because sensing or odometry failed, not because of an obstacle.
_FAILURE_WORDS = ('silent', 'stuck', 'odometry', 'no sensor covers')


def sensor_status_name(sensor: str) -> str:
    """Return the DiagnosticStatus name of one sensor: ``'sonar_guard: <sensor>'``."""
    return NAME_PREFIX + sensor


def format_number(value: float | None) -> str:
    """Format a value for a KeyValue: three decimals, 'nan', 'inf', '-inf', or 'none'."""
    if value is None:
        return 'none'
    number = float(value)
    if math.isnan(number):
        return 'nan'
    if math.isinf(number):
        return 'inf' if number > 0 else '-inf'
    return f'{number:.3f}'


def sensor_level(status: SensorStatus) -> int:
    """Return the diagnostic level (0 OK, 1 WARN, 2 ERROR, 3 STALE) of one sensor's status."""
    if status.silent or status.verdict is None:
        return LEVEL_STALE
    level = _VERDICT_LEVELS[status.verdict]
    if status.memory_m is not None:
        level = max(level, LEVEL_WARN)
    return level


def _fell_back_for_failure(decision: Decision) -> bool:
    """Tell whether the decision's reason is a sensing or odometry failure."""
    reason = decision.reason
    # Drop a leading sensor name so a sensor called e.g. 'stuck_bumper' is not read as a word.
    limiting = decision.limiting_sensor
    if limiting and reason.startswith(limiting):
        reason = reason[len(limiting):]
    return any(word in reason for word in _FAILURE_WORDS)


def monitor_level(decision: Decision, config: Config) -> int:
    """Return the diagnostic level (0 OK, 1 WARN, 2 ERROR) of the speed limit decision."""
    limit = decision.limit_mps
    if not math.isfinite(limit) or _fell_back_for_failure(decision):
        return LEVEL_ERROR
    if limit < config.limits.max_speed_mps:
        return LEVEL_WARN
    return LEVEL_OK


def _status(level: int, name: str, message: str, hardware_id: str,
            pairs: Sequence[tuple[str, str]]) -> DiagnosticStatus:
    # DiagnosticStatus.level is a `byte`: rclpy's setter accepts only a one-byte bytes object.
    return DiagnosticStatus(level=bytes([level]), name=name, message=message,
                            hardware_id=hardware_id,
                            values=[KeyValue(key=key, value=value) for key, value in pairs])


def _sensor_message(status: SensorStatus) -> str:
    """Return the one-line message of a sensor: verdict and reason, silence, memory (s, m)."""
    if status.verdict is None:
        text = status.reason or 'no reading yet'
    else:
        text = f'{status.verdict.value}: {status.reason}'
    if status.silent:
        silence = ('silent since start' if math.isinf(status.silent_for_s)
                   else f'silent for {status.silent_for_s:.2f} s')
        text = silence if status.verdict is None else f'{silence}; last {text}'
    if status.memory_m is not None:
        text += f'; obstacle held at {status.memory_m:.2f} m free'
    return text


def _sensor_status(status: SensorStatus, config: Config) -> DiagnosticStatus:
    sensor = config.sensor(status.name)
    pairs: list[tuple[str, str]] = [
        ('last_range_m', format_number(status.last_range_m)),
        ('verdict', 'none' if status.verdict is None else status.verdict.value),
    ]
    pairs += [(f'count_{v.value}', str(status.counts.get(v.value, 0))) for v in Verdict]
    pairs += [
        ('period_median_s', format_number(status.period_median_s)),
        ('period_worst_s', format_number(status.period_worst_s)),
        ('detection_latency_s', format_number(status.latency_s)),
        ('free_distance_m', format_number(status.free_distance_m)),
        ('remembered_m', format_number(status.memory_m)),
        ('silent_for_s', format_number(status.silent_for_s)),
    ]
    return _status(sensor_level(status), sensor_status_name(status.name),
                   _sensor_message(status), sensor.frame_id or sensor.name, pairs)


def _monitor_status(decision: Decision, config: Config) -> DiagnosticStatus:
    pairs = [
        ('allowed_speed_mps', format_number(decision.limit_mps)),
        ('target_mps', format_number(decision.target_mps)),
        ('reason', decision.reason),
        ('heading_rad', format_number(decision.heading_rad)),
        ('covering', ','.join(decision.covering)),
        ('limiting_sensor', decision.limiting_sensor or 'none'),
        ('measured_speed_mps', format_number(decision.speed_mps)),
        ('odometry_fresh', 'true' if decision.odometry_fresh else 'false'),
    ]
    message = f'limit {decision.limit_mps:.2f} m/s: {decision.reason}'
    return _status(monitor_level(decision, config), MONITOR_STATUS_NAME, message, HARDWARE_ID,
                   pairs)


def build_diagnostics(statuses: Sequence[SensorStatus], decision: Decision, config: Config,
                      stamp: Time) -> DiagnosticArray:
    """Return a DiagnosticArray stamped ``stamp``: one status per sensor, then the monitor."""
    array = DiagnosticArray()
    array.header.stamp = stamp
    array.status = ([_sensor_status(s, config) for s in statuses]
                    + [_monitor_status(decision, config)])
    return array


def levels_of(array: DiagnosticArray) -> dict[str, int]:
    """Return ``{status name: level as int}`` of a DiagnosticArray (levels are bytes in rclpy)."""
    out: dict[str, int] = {}
    for status in array.status:
        level = status.level
        out[status.name] = level[0] if isinstance(level, (bytes, bytearray)) else int(level)
    return out

"""Speed of sound, time of flight, echo timeout and blind range for ultrasonic rangers in air.

Units are SI (REP 103): metres, seconds, m/s; temperatures in degrees Celsius.

The speed of sound is the ideal-gas value for dry air anchored at 0 degC,
``c = 331.3 * sqrt(1 + T/273.15)`` m/s. Real air differs from it by less than 0.05 % from
-10 to 40 degC when dry and is up to about 0.7 % faster when humid (0 to 30 degC), which is
about 7 mm at 1 m of range.

An ultrasonic ranger measures the round-trip time ``t`` of its pulse and reports ``c*t/2``
with the ``c`` its firmware assumes. Every function here is plain ``math`` (it runs on the
per-reading hot path) and raises :class:`ValueError` naming the argument and showing the value
when an argument is out of its domain.
"""
from __future__ import annotations

from collections.abc import Collection
import math
import numbers

from sonar_guard.core.arguments import non_negative, real

__all__ = [
    'C0_MPS',
    'MAX_AIR_TEMP_C',
    'MIN_AIR_TEMP_C',
    'ZERO_CELSIUS_K',
    'blind_range',
    'detection_latency',
    'echo_timeout',
    'range_from_tof',
    'reported_range',
    'speed_of_sound',
    'tof_from_range',
]

C0_MPS = 331.3
"""Speed of sound in dry air at 0 degC used by the ideal-gas model, m/s."""

ZERO_CELSIUS_K = 273.15
"""0 degC in kelvin (absolute zero is -273.15 degC)."""

MIN_AIR_TEMP_C = -90.0
"""Coldest air temperature accepted, degC (below any recorded surface-air temperature)."""

MAX_AIR_TEMP_C = 150.0
"""Warmest air temperature accepted, degC (beyond it the input is almost surely a unit slip)."""






def _temperature(name: str, value: object) -> float:
    """Return an air temperature in degC after checking it is physical and in the sane window."""
    rule = f'a finite number in [{MIN_AIR_TEMP_C:g}, {MAX_AIR_TEMP_C:g}] degC'
    temp_c = real(name, value, rule)
    if temp_c <= -ZERO_CELSIUS_K:
        raise ValueError(f'{name} must be above absolute zero (-{ZERO_CELSIUS_K} degC) and '
                         f'in [{MIN_AIR_TEMP_C:g}, {MAX_AIR_TEMP_C:g}] degC: {temp_c!r}')
    if not (MIN_AIR_TEMP_C <= temp_c <= MAX_AIR_TEMP_C):  # also rejects NaN and +-inf
        raise ValueError(f'{name} must be {rule}: {temp_c!r}')
    return temp_c


def _speed(temp_c: float) -> float:
    """Return the ideal-gas speed of sound for an already validated temperature, m/s."""
    return C0_MPS * math.sqrt(1.0 + temp_c / ZERO_CELSIUS_K)


def speed_of_sound(temp_c: float = 20.0) -> float:
    """Return the speed of sound in dry air at ``temp_c`` degC, m/s (ideal gas)."""
    return _speed(_temperature('temp_c', temp_c))


def range_from_tof(tof_s: float, temp_c: float = 20.0) -> float:
    """Return the one-way range c*t/2 in m for a round-trip echo time ``tof_s`` in s."""
    tof = non_negative('tof_s', tof_s, 's')
    return 0.5 * _speed(_temperature('temp_c', temp_c)) * tof


def tof_from_range(range_m: float, temp_c: float = 20.0) -> float:
    """Return the round-trip echo time 2R/c in s for a target at ``range_m`` m."""
    distance = non_negative('range_m', range_m, 'm')
    return 2.0 * distance / _speed(_temperature('temp_c', temp_c))


def echo_timeout(max_range_m: float, temp_c: float = 20.0) -> float:
    """Return the round-trip time 2R/c in s to ``max_range_m`` m: how long to wait for an echo."""
    distance = non_negative('max_range_m', max_range_m, 'm')
    return 2.0 * distance / _speed(_temperature('temp_c', temp_c))


def blind_range(ring_down_s: float, temp_c: float = 20.0) -> float:
    """Return the nearest detectable range c*t_ring/2 in m for a ring-down time in s."""
    ring_down = non_negative('ring_down_s', ring_down_s, 's')
    return 0.5 * _speed(_temperature('temp_c', temp_c)) * ring_down


def reported_range(true_range_m: float, true_temp_c: float, assumed_temp_c: float) -> float:
    """Return the range in m a sensor reports when its firmware assumes the wrong temperature.

    The sensor measures the true round trip ``2*R/c_true`` and converts it with the speed of
    sound it assumes, so it reports ``R * c_assumed / c_true``: a sensor that assumes 20 degC
    reads long in colder (slower) air and short in warmer air.
    """
    distance = non_negative('true_range_m', true_range_m, 'm')
    c_true = _speed(_temperature('true_temp_c', true_temp_c))
    c_assumed = _speed(_temperature('assumed_temp_c', assumed_temp_c))
    return distance * c_assumed / c_true


def detection_latency(slot_durations_s: Collection[float], sensor_index: int, range_m: float,
                      temp_c: float = 20.0) -> float:
    """Return the worst-case time in s from an obstacle appearing to this sensor's echo.

    The obstacle appears just after the sensor's own slot ended, so it waits for every other
    slot of the firing cycle and then for the round trip to ``range_m``:
    ``sum(slots) - slots[sensor_index] + 2*range_m/c``. ``slot_durations_s`` is the ordered
    firing schedule (a sequence or a 1-D numpy array of slot durations in s); ``sensor_index``
    counts from 0 (negative indices are refused: they usually hide an off-by-one).
    """
    rule = 'a non-empty sequence of finite numbers >= 0 s'
    try:
        items = list(slot_durations_s)
    except TypeError:
        raise ValueError(f'slot_durations_s must be {rule}: {slot_durations_s!r}') from None
    if not items:
        raise ValueError(f'slot_durations_s must be {rule}: {slot_durations_s!r}')
    slots = []
    for position, item in enumerate(items):
        slots.append(non_negative(f'slot_durations_s[{position}]', item, 's'))
    count = len(slots)
    if (isinstance(sensor_index, bool) or not isinstance(sensor_index, numbers.Integral)
            or not 0 <= sensor_index < count):
        raise ValueError(f'sensor_index must be an int in [0, {count - 1}] '
                         f'(one per slot): {sensor_index!r}')
    index = int(sensor_index)
    distance = non_negative('range_m', range_m, 'm')
    wait_for_others = math.fsum(slots[:index] + slots[index + 1:])
    return wait_for_others + 2.0 * distance / _speed(_temperature('temp_c', temp_c))

"""Stopping distance and the largest speed a robot can still stop within a free distance.

Units are SI (REP 103): metres, seconds, m/s, m/s^2.

The robot keeps its speed ``v`` for the whole latency ``T`` (sensing, processing and
actuation) and then brakes at a constant deceleration ``a`` it can always achieve::

    s(v) = v*T + v**2 / (2*a)

:func:`max_safe_speed` inverts it for the free distance ``d`` left after a margin. The
textbook root ``-a*T + sqrt((a*T)**2 + 2*a*d)`` cancels badly when ``a*T`` is large compared
with ``d``; it is computed as the algebraically equal ``d / (T/2 + sqrt((T/2)**2 + d/(2*a)))``
so that ``s(max_safe_speed(d)) == d`` to a few units in the last place.

The scalar functions are plain ``math`` (they run on the hot path); numpy is used only by
:func:`max_safe_speed_array` for bulk offline work. Bad arguments raise :class:`ValueError`
naming the argument and showing the value.
"""
from __future__ import annotations

import math

import numpy as np
import numpy.typing as npt

from sonar_guard.core.arguments import non_negative, real

__all__ = [
    'max_safe_speed',
    'max_safe_speed_array',
    'max_safe_speed_unchecked',
    'stopping_distance',
]






def _decel(value: object) -> float:
    """Return a deceleration in m/s^2 after checking it is finite and > 0."""
    number = real('decel', value, 'a finite number > 0 m/s^2')
    if not math.isfinite(number):
        raise ValueError(f'decel must be a finite number > 0 m/s^2: {number!r}')
    if number <= 0.0:
        raise ValueError(f'decel must be > 0 m/s^2: {number!r}')
    return number


def _root(room_m: float, latency_s: float, decel: float) -> float:
    """Return the positive root v of v*T + v^2/(2a) = room for finite room > 0, in m/s."""
    half_t = 0.5 * latency_s
    quarter = room_m / (2.0 * decel)  # (v/a)^2 / 4 when T = 0; overflows only for absurd inputs
    if math.isinf(quarter):
        # d/(2a) beyond float range: the latency term is negligible next to sqrt(2ad).
        return max(0.0, math.sqrt(2.0) * math.sqrt(decel) * math.sqrt(room_m)
                   - decel * latency_s)
    denominator = half_t + math.hypot(half_t, math.sqrt(quarter))
    if denominator == 0.0:
        # T == 0 and d/(2a) underflowed to 0: use sqrt(2ad) directly, factored against overflow.
        return math.sqrt(2.0) * math.sqrt(decel) * math.sqrt(room_m)
    return room_m / denominator


def stopping_distance(speed: float, latency_s: float, decel: float) -> float:
    """Return the distance in m to stop from ``speed`` m/s: speed*latency + speed^2/(2*decel)."""
    v = non_negative('speed', speed, 'm/s')
    latency = non_negative('latency_s', latency_s, 's')
    a = _decel(decel)
    return v * latency + v * v / (2.0 * a)


def max_safe_speed(free_distance_m: float, latency_s: float, decel: float,
                   margin_m: float = 0.0) -> float:
    """Return the largest speed in m/s whose stopping distance fits in free_distance - margin.

    Returns 0.0 when ``free_distance_m - margin_m <= 0`` (a negative free distance is allowed:
    an obstacle already inside the footprint means stop) and ``math.inf`` when the free
    distance is ``+inf`` (nothing seen: no limit from this distance). NaN raises.
    """
    distance = real('free_distance_m', free_distance_m, 'a number (not NaN) in m')
    if math.isnan(distance):
        raise ValueError(f'free_distance_m must be a number (not NaN) in m: {distance!r}')
    latency = non_negative('latency_s', latency_s, 's')
    a = _decel(decel)
    margin = non_negative('margin_m', margin_m, 'm')
    room = distance - margin
    if room <= 0.0:
        return 0.0
    if math.isinf(room):
        return math.inf
    return _root(room, latency, a)


def max_safe_speed_unchecked(room_m: float, latency_s: float, decel: float) -> float:
    """Return :func:`max_safe_speed` for room = free distance - margin, m/s, without checks.

    For the engine's per-reading path, whose inputs come from a validated configuration and
    validated readings: ``room_m`` may be <= 0 or +inf, ``latency_s`` >= 0, ``decel`` > 0.
    """
    if room_m <= 0.0:
        return 0.0
    if room_m == math.inf:
        return math.inf
    return _root(room_m, latency_s, decel)


def max_safe_speed_array(free_distance_m: npt.ArrayLike,
                         latency_s: npt.ArrayLike,
                         decel: float,
                         margin_m: float = 0.0) -> npt.NDArray[np.float64]:
    """Return :func:`max_safe_speed` elementwise in m/s for arrays of free distance and latency.

    ``free_distance_m`` (m) and ``latency_s`` (s) broadcast against each other; ``decel``
    (m/s^2) and ``margin_m`` (m) are scalars. Same rules as the scalar function: NaN anywhere
    raises, latencies must be finite and >= 0, +inf free distance gives inf.
    """
    a = _decel(decel)
    margin = non_negative('margin_m', margin_m, 'm')
    try:
        distance = np.asarray(free_distance_m, dtype=np.float64)
    except (TypeError, ValueError) as err:
        raise ValueError(f'free_distance_m must be an array of numbers in m: {err}') from None
    try:
        latency = np.asarray(latency_s, dtype=np.float64)
    except (TypeError, ValueError) as err:
        raise ValueError(f'latency_s must be an array of finite numbers >= 0 s: {err}') from None
    is_nan = np.isnan(distance)
    if is_nan.any():
        where = tuple(int(i) for i in np.argwhere(is_nan)[0])
        raise ValueError(f'free_distance_m must not contain NaN (m): nan at index {where}')
    bad_latency = ~(np.isfinite(latency) & (latency >= 0.0))
    if bad_latency.any():
        where = tuple(int(i) for i in np.argwhere(bad_latency)[0])
        raise ValueError(f'latency_s must be finite numbers >= 0 s: {float(latency[where])!r} '
                         f'at index {where}')
    try:
        room, latency = np.broadcast_arrays(distance - margin, latency)
    except ValueError as err:
        raise ValueError(f'free_distance_m and latency_s must broadcast together: {err}') from None

    speed = np.zeros(room.shape, dtype=np.float64)
    positive = room > 0.0
    speed[positive & np.isinf(room)] = np.inf
    finite = positive & np.isfinite(room)
    d = room[finite]
    t = latency[finite]
    half_t = 0.5 * t
    with np.errstate(over='ignore', under='ignore', divide='ignore', invalid='ignore'):
        quarter = d / (2.0 * a)
        denominator = half_t + np.hypot(half_t, np.sqrt(quarter))
        direct = math.sqrt(2.0) * math.sqrt(a) * np.sqrt(d)
        values = np.where(denominator == 0.0, direct, d / denominator)
        values = np.where(np.isinf(quarter),
                          np.maximum(0.0, direct - a * t), values)
    speed[finite] = values
    return speed

"""A robot driving a path through the invented world, and the recording of its run.

The robot follows a polyline :class:`Path` at the speed a :class:`SpeedProfile` gives for the
distance travelled, waiting during planned :class:`Stop` s and obeying an optional speed cap
(a callback, e.g. a monitor's limit). It accelerates and brakes toward the target speed at
its limits, and brakes in time to stop at the end of the path. Its sonars fire slot by slot
as :class:`~sonar_guard.core.schedule.Schedule` says, each slot lasting its duration.

:meth:`Run.records` is a discrete-event simulation: it yields ``(topic, msgtype, log_time_s,
message)`` in time order and computes the robot's next step only after the records before it
were taken, so a speed cap that reads a monitor fed with those records sees them in time.

Times: simulation time starts at 0 (world movers, stops, the speed cap); records carry bag
time, ``start_time_s`` + simulation time. Units: metres, seconds, radians, m/s, m/s^2.
"""
from __future__ import annotations

from bisect import bisect_right
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field
import heapq
import math
from pathlib import Path as FilePath
from typing import Any

import numpy as np

from sonar_guard.core.acoustics import echo_timeout
from sonar_guard.core.config import Config, SensorConfig
from sonar_guard.core.schedule import Schedule
from sonar_guard.offline.bagwrite import odometry_msg, range_msg, twist_msg, write_bag
from sonar_guard.sim.sonar import Scene, SonarPhysics, _Heard, _listen, _reading, mount_pose
from sonar_guard.sim.world import Point, World

__all__ = [
    'CMD_VEL_TOPIC',
    'Path',
    'Run',
    'SpeedProfile',
    'Stop',
]

CMD_VEL_TOPIC = '/cmd_vel'
"""Topic of the commanded speed in the recording."""

_ODOM_TYPE = 'nav_msgs/msg/Odometry'
_TWIST_TYPE = 'geometry_msgs/msg/Twist'
_RANGE_TYPE = 'sensor_msgs/msg/Range'
_DEFAULT_PHYSICS = SonarPhysics()


def _wrap(angle: float) -> float:
    """Return ``angle`` wrapped into [-pi, pi), rad."""
    return (angle + math.pi) % (2.0 * math.pi) - math.pi


def _positive(name: str, value: float, unit: str) -> float:
    """Return ``value`` as a float when finite and > 0, else raise ValueError naming it."""
    number = float(value)
    if not (math.isfinite(number) and number > 0.0):
        raise ValueError(f'{name} must be a finite number > 0 {unit}: {value!r}')
    return number


def _absolute(topic: str) -> str:
    """Return a configured (relative) topic name as an absolute one."""
    if topic.startswith('~'):
        topic = '/sonar_guard' + topic[1:]
    return '/' + topic.lstrip('/')


@dataclass(frozen=True, slots=True)
class SpeedProfile:
    """Speed as a function of distance along the path: ``(s m, speed m/s)`` points, linear.

    Before the first point and after the last one the speed holds.
    """

    points: Sequence[tuple[float, float]]

    def __post_init__(self) -> None:
        """Check the points: at least one, s increasing, speeds finite and >= 0."""
        if not self.points:
            raise ValueError('points must hold at least one (s, speed) pair: []')
        last = -math.inf
        for i, (s, v) in enumerate(self.points):
            if not (math.isfinite(s) and s > last):
                raise ValueError(f'points[{i}].s must be finite and increase: {s!r} m')
            if not (math.isfinite(v) and v >= 0.0):
                raise ValueError(f'points[{i}].speed must be finite and >= 0 m/s: {v!r}')
            last = s
        object.__setattr__(self, 'points', tuple((float(s), float(v)) for s, v in self.points))

    @classmethod
    def constant(cls, speed_mps: float) -> SpeedProfile:
        """Return a profile of one speed everywhere, m/s."""
        return cls(((0.0, speed_mps),))

    def speed_at(self, s_m: float) -> float:
        """Return the profile speed at ``s_m`` m along the path, m/s."""
        pts = self.points
        if s_m <= pts[0][0]:
            return pts[0][1]
        if s_m >= pts[-1][0]:
            return pts[-1][1]
        i = bisect_right([p[0] for p in pts], s_m)
        s0, v0 = pts[i - 1]
        s1, v1 = pts[i]
        return v0 + (s_m - s0) / (s1 - s0) * (v1 - v0)


@dataclass(frozen=True, slots=True)
class Path:
    """A polyline through ``waypoints`` (x m, y m) in the map frame.

    The heading follows each straight piece and turns linearly over ``turn_blend_m`` m
    around each corner (at most the shorter neighbouring piece), so the yaw rate stays finite.
    ``reverse``: the robot drives the path backwards (its heading is the path's plus pi).
    """

    waypoints: Sequence[Point]
    reverse: bool = False
    turn_blend_m: float = 0.3
    _cum: tuple[float, ...] = field(init=False, repr=False, compare=False)
    _heading: tuple[float, ...] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        """Check the waypoints (two distinct at least) and keep the piece lengths."""
        pts: list[Point] = []
        for i, w in enumerate(self.waypoints):
            x, y = (float(w[0]), float(w[1]))
            if not (math.isfinite(x) and math.isfinite(y)):
                raise ValueError(f'waypoints[{i}] must be finite (x, y) in m: {w!r}')
            if not pts or (x, y) != pts[-1]:
                pts.append((x, y))
        if len(pts) < 2:
            raise ValueError(f'waypoints must hold two distinct points: {self.waypoints!r}')
        if not (math.isfinite(self.turn_blend_m) and self.turn_blend_m >= 0.0):
            raise ValueError(f'turn_blend_m must be finite and >= 0 m: {self.turn_blend_m!r}')
        cum = [0.0]
        heading = []
        for (x0, y0), (x1, y1) in zip(pts[:-1], pts[1:]):
            cum.append(cum[-1] + math.hypot(x1 - x0, y1 - y0))
            heading.append(math.atan2(y1 - y0, x1 - x0))
        object.__setattr__(self, 'waypoints', tuple(pts))
        object.__setattr__(self, '_cum', tuple(cum))
        object.__setattr__(self, '_heading', tuple(heading))

    @property
    def length(self) -> float:
        """Total length of the path, m."""
        return self._cum[-1]

    def _blend(self, j: int) -> float:
        """Return the turning length around corner ``j`` (waypoint index), m."""
        cum = self._cum
        return min(self.turn_blend_m, cum[j] - cum[j - 1], cum[j + 1] - cum[j])

    def pose_at(self, s_m: float) -> tuple[float, float, float]:
        """Return the robot's (x m, y m, yaw rad) after ``s_m`` m along the path (held at ends)."""
        cum, heading, pts = self._cum, self._heading, self.waypoints
        s = min(max(s_m, 0.0), cum[-1])
        i = min(bisect_right(cum, s) - 1, len(heading) - 1)
        f = (s - cum[i]) / (cum[i + 1] - cum[i])
        x = pts[i][0] + f * (pts[i + 1][0] - pts[i][0])
        y = pts[i][1] + f * (pts[i + 1][1] - pts[i][1])
        yaw = heading[i]
        corner = None
        if i > 0 and s - cum[i] < 0.5 * self._blend(i):
            corner = i
        elif i + 1 < len(heading) and cum[i + 1] - s < 0.5 * self._blend(i + 1):
            corner = i + 1
        if corner is not None:
            b = self._blend(corner)
            if b > 0.0:
                g = (s - (cum[corner] - 0.5 * b)) / b
                before = heading[corner - 1]
                yaw = before + g * _wrap(heading[corner] - before)
        if self.reverse:
            yaw += math.pi
        return (x, y, _wrap(yaw))


@dataclass(frozen=True, slots=True)
class Stop:
    """A planned wait: the robot's target speed is 0 from ``t_start`` for ``duration`` s."""

    t_start: float
    duration: float

    def covers(self, t: float) -> bool:
        """Return True when simulation time ``t`` s lies in the wait."""
        return self.t_start <= t < self.t_start + self.duration


class Run:
    """A robot with sonars driving a path through a world: the source of a recording.

    ``config`` is the robot's sonar_guard configuration (sensors, their schedule, braking).
    ``speed_cap(t, current_speed)`` returns the largest speed allowed now (m/s); ``t`` is
    simulation time in s (0 at the start, the clock of the world's movers and of the stops;
    add ``start_time_s`` for bag time). It is asked at every odometry tick, after every record
    before that tick was yielded, so a cap can follow a monitor fed with the records. The
    robot accelerates at ``accel_mps2`` and brakes at ``decel_mps2`` (default: the configured
    ``robot.decel``) toward the smallest of the profile speed, the cap, 0 during stops, and
    the speed that still stops at the path's end.
    """

    def __init__(self, world: World, config: Config, path: Path, profile: SpeedProfile,
                 physics: SonarPhysics = _DEFAULT_PHYSICS, *, seed: int = 0,
                 odom_rate_hz: float = 50.0, accel_mps2: float = 0.6,
                 decel_mps2: float | None = None,
                 speed_cap: Callable[[float, float], float] | None = None,
                 stops: Sequence[Stop] = ()) -> None:
        self.world = world
        self.config = config
        self.path = path
        self.profile = profile
        self.physics = physics
        self.seed = seed
        self.odom_rate_hz = _positive('odom_rate_hz', odom_rate_hz, 'Hz')
        self.accel_mps2 = _positive('accel_mps2', accel_mps2, 'm/s^2')
        self.decel_mps2 = _positive(
            'decel_mps2', config.robot.decel_mps2 if decel_mps2 is None else decel_mps2,
            'm/s^2')
        self.speed_cap = speed_cap
        self.stops = tuple(stops)
        self.schedule = Schedule.from_config(config)
        if not self.schedule.cycle_s > 0.0:
            raise ValueError(f'the firing cycle must last > 0 s: {self.schedule.cycle_s!r}')

    def __repr__(self) -> str:
        """Return a short description: sensors, path length, odometry rate."""
        return (f'Run({len(self.config.sensors)} sensors, path {self.path.length:.2f} m, '
                f'odom {self.odom_rate_hz:g} Hz, seed {self.seed})')

    def _target(self, t: float, s: float, v: float, dt: float) -> float:
        """Return the speed the robot aims for at simulation time ``t`` s, m/s."""
        target = self.profile.speed_at(s)
        if any(stop.covers(t) for stop in self.stops):
            target = 0.0
        if self.speed_cap is not None:
            cap = float(self.speed_cap(t, v))
            if math.isnan(cap):
                raise ValueError(f'speed_cap returned NaN at t = {t!r} s')
            target = min(target, cap)
        # Brake in time for the path's end: the largest next speed from which braking at
        # decel still stops by the end, after this step's travel (trapezoid rule):
        # v'^2 / (2 d) + v' dt / 2 <= remaining - v dt / 2.
        room = max(self.path.length - s - 0.5 * v * dt, 0.0)
        half = 0.5 * self.decel_mps2 * dt
        target = min(target, -half + math.sqrt(half * half + 2.0 * self.decel_mps2 * room))
        return max(target, 0.0)

    def _step(self, v: float, target: float, dt: float) -> float:
        """Return the speed after ``dt`` s of accelerating or braking toward ``target``, m/s."""
        if target >= v:
            return min(target, v + self.accel_mps2 * dt)
        return max(target, v - self.decel_mps2 * dt)

    def _fire(self, sensors: Sequence[SensorConfig], t: float,
              pose: tuple[float, float, float], rng: np.random.Generator
              ) -> list[tuple[SensorConfig, float, float]]:
        """Fire ``sensors`` together at ``t`` s; return (sensor, range m, echo delay s) each."""
        scene = Scene.of(self.world, t)
        heard = [_listen(scene, self.world, pose, s, self.physics) for s in sensors]
        strays = (_strays(sensors, heard, pose) if self.physics.crosstalk and len(sensors) > 1
                  else [None] * len(sensors))
        out = []
        for sensor, h, stray in zip(sensors, heard, strays):
            value, t_echo = _reading(h, sensor, self.physics, rng, stray)
            if t_echo is None:
                t_echo = echo_timeout(sensor.max_range_m, sensor.air_temperature_c)
            out.append((sensor, value, t_echo))
        return out

    def records(self, duration_s: float, *, start_time_s: float = 1_700_000_000.0,
                distro: str = 'humble') -> Iterator[tuple[str, str, float, Any]]:
        """Yield ``(topic, msgtype, log_time_s, message)`` of ``duration_s`` s, in time order.

        '/<odom_topic>' nav_msgs/Odometry (map pose, body twist) and '/cmd_vel'
        geometry_msgs/Twist (the commanded speed) at the odometry rate; each sensor's
        sensor_msgs/Range on '/<topic>', stamped at echo time (firing + round trip at the
        true speed of sound, or firing + echo timeout when there is no echo).
        """
        duration = float(duration_s)
        if not (math.isfinite(duration) and duration >= 0.0):
            raise ValueError(f'duration_s must be a finite number >= 0 s: {duration_s!r}')
        return self._events(duration, float(start_time_s), distro)

    def _events(self, duration: float, t0: float, distro: str
                ) -> Iterator[tuple[str, str, float, Any]]:
        """Run the discrete-event loop behind :meth:`records`."""
        rng = np.random.default_rng(self.seed)
        dt = 1.0 / self.odom_rate_hz
        odom_topic = _absolute(self.config.odom_topic)
        slots = [(tuple(self.config.sensor(n) for n in slot.sensors), slot.duration_s)
                 for slot in self.schedule.slots]
        offsets = [0.0]
        for _, length in slots[:-1]:
            offsets.append(offsets[-1] + length)
        cycle = self.schedule.cycle_s
        topics = {s.name: _absolute(s.topic) for s in self.config.sensors}
        sign = -1.0 if self.path.reverse else 1.0

        pending: list[tuple[float, int, tuple[str, str, float, Any]]] = []
        seq = 0
        k = 0  # next odometry tick
        n = 0  # next firing
        s = v = 0.0  # state at the latest tick
        s_next = v_next = 0.0  # state at the tick after it
        t_tick = 0.0
        yaw_prev = self.path.pose_at(0.0)[2]
        while True:
            t_odom = k * dt
            t_fire = (n // len(slots)) * cycle + offsets[n % len(slots)]
            t_pend = pending[0][0] if pending else math.inf
            if min(t_odom, t_fire, t_pend) > duration:
                return
            if t_pend <= t_odom and t_pend <= t_fire:
                yield heapq.heappop(pending)[2]
            elif t_odom <= t_fire:
                if k > 0:
                    s, v = s_next, v_next
                x, y, yaw = self.path.pose_at(s)
                wz = _wrap(yaw - yaw_prev) / dt if k > 0 else 0.0
                yaw_prev = yaw
                stamp = t0 + t_odom
                yield (odom_topic, _ODOM_TYPE, stamp,
                       odometry_msg(stamp, sign * v, 0.0, wz, x=x, y=y, yaw=yaw, distro=distro))
                target = self._target(t_odom, s, v, dt)
                yaw_cmd = self.path.pose_at(s + target * dt)[2]
                yield (CMD_VEL_TOPIC, _TWIST_TYPE, stamp,
                       twist_msg(sign * target, _wrap(yaw_cmd - yaw) / dt, distro=distro))
                v_next = self._step(v, target, dt)
                s_next = s + 0.5 * (v + v_next) * dt
                if s_next >= self.path.length:
                    s_next, v_next = self.path.length, 0.0
                t_tick = t_odom
                k += 1
            else:
                frac = min(max((t_fire - t_tick) / dt, 0.0), 1.0)
                pose = self.path.pose_at(s + frac * (s_next - s))
                sensors, _ = slots[n % len(slots)]
                for sensor, value, t_echo in self._fire(sensors, t_fire, pose, rng):
                    stamp = t0 + t_fire + t_echo
                    msg = range_msg(stamp, sensor.frame_id or sensor.name, value,
                                    min_range=sensor.min_range_m, max_range=sensor.max_range_m,
                                    field_of_view=sensor.field_of_view_rad, distro=distro)
                    heapq.heappush(pending, (t_fire + t_echo, seq,
                                             (topics[sensor.name], _RANGE_TYPE, stamp, msg)))
                    seq += 1
                n += 1

    def write(self, path: str | FilePath, duration_s: float, *, storage: str = 'mcap',
              **kw: Any) -> FilePath:
        """Write ``duration_s`` s of the run to a new recording at ``path``; return the path.

        ``kw`` goes to :meth:`records` (``start_time_s``, ``distro``); the distro defaults to
        'noetic' for storage 'rosbag1', else 'humble'.
        """
        distro = kw.pop('distro', None) or ('noetic' if storage == 'rosbag1' else 'humble')
        return write_bag(path, self.records(duration_s, distro=distro, **kw), storage=storage,
                         distro=distro)


def _strays(sensors: Sequence[SensorConfig], heard: Sequence[_Heard],
            pose: tuple[float, float, float]) -> list[float | None]:
    """Return, per sensor, the one-way range at which a partner's pulse reaches it (m) or None.

    Sensors firing together: partner B's pulse reflects where B's own first echo comes from
    and travels on to sensor A; when that point lies in A's cone, A hears it after the path
    ``r_B + |point - A|``, i.e. at the one-way range half of it. The earliest partner wins.
    """
    firsts: list[int | None] = []
    for h in heard:
        times = np.where(h.detected, h.time_s, np.inf)
        first = int(np.argmin(times))
        firsts.append(first if math.isfinite(times[first]) else None)
    out: list[float | None] = []
    for a, sensor in enumerate(sensors):
        ax, ay, yaw = mount_pose(pose, sensor)
        best: float | None = None
        for b, h in enumerate(heard):
            i = firsts[b]
            if b == a or i is None:
                continue
            px, py = float(h.points[i, 0]), float(h.points[i, 1])
            off = _wrap(math.atan2(py - ay, px - ax) - yaw)
            if abs(off) > 0.5 * sensor.field_of_view_rad:
                continue
            stray = 0.5 * (float(h.dist_m[i]) + math.hypot(px - ax, py - ay))
            if best is None or stray < best:
                best = stray
        out.append(best)
    return out

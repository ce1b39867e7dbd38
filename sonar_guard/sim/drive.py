"""A robot driving a path through the invented world, and the recording of its run.

A :class:`Path` is a chain of segments, :class:`Line` (straight), :class:`Arc` (a circle of
given radius, curving left or right) and :class:`Turn` (rotating in place at zero linear
speed), or, as before, a polyline through waypoints whose heading blends around the corners.
The robot follows it at the speed a :class:`SpeedProfile` gives for the distance travelled,
waiting during planned :class:`Stop` s and obeying an optional speed cap and turn-rate cap
(callbacks, e.g. a monitor's limits). Its sonars fire slot by slot as
:class:`~sonar_guard.core.schedule.Schedule` says, each slot lasting its duration, from the
true pose at the firing time.

Kinematics (segment paths): the robot keeps to the path exactly. On a line the yaw rate is 0;
on an arc of signed curvature k it is ``k * speed``, so both change together: the speed is
held to ``turn_rate_radps / |k|`` (the robot's top yaw rate) and to ``turn_cap / |k|``, and it
speeds up and brakes at most at ``turn_accel / |k|`` and ``turn_decel / |k|`` as well as at the
linear limits. It brakes ahead of time (at the smallest deceleration on the way) to enter an
arc no faster than that arc allows, and to stand still where a turn in place begins and at the
path's end. In a turn the linear speed is 0 and the yaw rate speeds up, holds at the smaller
of ``turn_rate_radps`` and the turn cap, and brakes at ``turn_decel`` to stop at the asked
angle. Odometry carries the true pose and the true body twist at each tick.

:meth:`Run.records` is a discrete-event simulation: it yields ``(topic, msgtype, log_time_s,
message)`` in time order and computes the robot's next step only after the records before it
were taken, so a cap that reads a monitor fed with those records sees them in time.

Times: simulation time starts at 0 (world movers, stops, the caps); records carry bag time,
``start_time_s`` + simulation time. Units: metres, seconds, radians, m/s, m/s^2, rad/s,
rad/s^2; angles and yaw rates > 0 turn left (counter-clockwise seen from above, REP 103).
"""
from __future__ import annotations

from bisect import bisect_right
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field
import heapq
import math
from pathlib import Path as FilePath
from typing import Any, NamedTuple

import numpy as np

from sonar_guard.core.acoustics import echo_timeout
from sonar_guard.core.config import Config, SensorConfig
from sonar_guard.core.schedule import Schedule
from sonar_guard.offline.bagwrite import odometry_msg, range_msg, twist_msg, write_bag
from sonar_guard.sim.sonar import (
    Scene,
    SonarPhysics,
    _Heard,
    _listen_all,
    _reading,
    mount_pose,
)
from sonar_guard.sim.world import Point, World

__all__ = [
    'Arc',
    'CMD_VEL_TOPIC',
    'Line',
    'Path',
    'Run',
    'Segment',
    'SpeedProfile',
    'Stop',
    'Turn',
]

CMD_VEL_TOPIC = '/cmd_vel'
"""Topic of the commanded speed in the recording."""

_ODOM_TYPE = 'nav_msgs/msg/Odometry'
_TWIST_TYPE = 'geometry_msgs/msg/Twist'
_RANGE_TYPE = 'sensor_msgs/msg/Range'
_DEFAULT_PHYSICS = SonarPhysics()
_ARRIVED = 1e-9  # m or rad short of a piece's end that count as there (rounding)


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


def _ask(cap: Callable[[float, float], float] | None, name: str, t: float, now: float
         ) -> float:
    """Return what a cap callback allows at ``t`` s (inf without one); NaN is a ValueError."""
    if cap is None:
        return math.inf
    value = float(cap(t, now))
    if math.isnan(value):
        raise ValueError(f'{name} returned NaN at t = {t!r} s')
    return value


def _reach(room: float, ceiling: float, decel: float, dt: float) -> float:
    """Return the largest next rate from which braking at ``decel`` gets down to ``ceiling``
    within ``room`` (after this step's travel, trapezoid rule):
    (v'^2 - ceiling^2) / (2 decel) + v' dt / 2 <= room. Units: m and m/s, or rad and rad/s."""
    if math.isinf(ceiling):
        return math.inf
    half = 0.5 * decel * dt
    return -half + math.sqrt(half * half + ceiling * ceiling + 2.0 * decel * max(room, 0.0))


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
class Line:
    """A straight segment of ``length_m`` m along the current heading."""

    length_m: float

    def __post_init__(self) -> None:
        """Check the length: finite and > 0 m."""
        object.__setattr__(self, 'length_m', _positive('Line.length_m', self.length_m, 'm'))


@dataclass(frozen=True, slots=True)
class Arc:
    """A circular segment of ``radius_m`` m that turns the heading by ``angle_rad``.

    ``angle_rad`` > 0 curves left (counter-clockwise), < 0 right; its path length is
    ``radius_m * |angle_rad|`` and its curvature ``+/- 1 / radius_m`` (1/m).
    """

    radius_m: float
    angle_rad: float

    def __post_init__(self) -> None:
        """Check the radius (finite, > 0 m) and the angle (finite, not 0 rad)."""
        object.__setattr__(self, 'radius_m', _positive('Arc.radius_m', self.radius_m, 'm'))
        object.__setattr__(self, 'angle_rad', _turning('Arc.angle_rad', self.angle_rad))

    @property
    def length_m(self) -> float:
        """Path length of the arc, m."""
        return self.radius_m * abs(self.angle_rad)

    @property
    def curvature_1pm(self) -> float:
        """Signed curvature, 1/m: > 0 left, < 0 right (yaw rate = curvature * speed)."""
        return math.copysign(1.0 / self.radius_m, self.angle_rad)


@dataclass(frozen=True, slots=True)
class Turn:
    """A turn in place by ``angle_rad`` (> 0 left, counter-clockwise) at zero linear speed."""

    angle_rad: float

    def __post_init__(self) -> None:
        """Check the angle: finite and not 0 rad."""
        object.__setattr__(self, 'angle_rad', _turning('Turn.angle_rad', self.angle_rad))


Segment = Line | Arc | Turn
"""One piece of a segment path."""


def _turning(name: str, value: float) -> float:
    """Return ``value`` as a float when finite and not 0, else raise ValueError naming it."""
    number = float(value)
    if not (math.isfinite(number) and number != 0.0):
        raise ValueError(f'{name} must be a finite number other than 0 rad: {value!r}')
    return number


class _Piece(NamedTuple):
    """One stretch of a path as the run follows it."""

    kind: str  # 'line', 'arc', 'turn', or 'poly' (a whole waypoint polyline)
    s0: float  # path length before it, m
    size: float  # its length in m, or for a turn its |angle| in rad
    x0: float  # start position, m
    y0: float
    h0: float  # path heading at the start, rad
    k: float  # arc: signed curvature 1/m; turn: direction +1 (left) or -1 (right); else 0


@dataclass(frozen=True, slots=True)
class Path:
    """A path in the map frame: a chain of ``segments``, or a polyline through ``waypoints``.

    Segment paths (build them with :meth:`of`) start at ``start`` = (x m, y m, heading rad)
    and chain :class:`Line`, :class:`Arc` and :class:`Turn` segments, each continuing from
    where the one before ended. Waypoint paths are a polyline through ``waypoints`` (x m, y m):
    the heading follows each straight piece and turns linearly over ``turn_blend_m`` m around
    each corner (at most the shorter neighbouring piece) while the position stays on the
    polyline; the robot's top yaw rate and angular acceleration do not apply to those blends
    (a turn cap does).

    ``travel_rad`` is the direction of travel in base_link (0 forward; a holonomic base may
    drive sideways, +pi/2 left); ``reverse`` adds pi to it (the robot drives backwards, its
    heading the path's plus pi). The robot's yaw is the path heading minus that direction.
    """

    waypoints: Sequence[Point] = ()
    reverse: bool = False
    turn_blend_m: float = 0.3
    segments: Sequence[Segment] = ()
    start: tuple[float, float, float] | None = None
    travel_rad: float = 0.0
    _cum: tuple[float, ...] = field(init=False, repr=False, compare=False)
    _heading: tuple[float, ...] = field(init=False, repr=False, compare=False)
    _pieces: tuple[_Piece, ...] = field(init=False, repr=False, compare=False)

    @classmethod
    def of(cls, *segments: Segment, start: tuple[float, float, float] = (0.0, 0.0, 0.0),
           reverse: bool = False, travel_rad: float = 0.0) -> Path:
        """Return the path of ``segments`` from ``start`` (x m, y m, heading rad)."""
        return cls(segments=segments, start=start, reverse=reverse, travel_rad=travel_rad)

    def __post_init__(self) -> None:
        """Check the waypoints or segments and lay the path out piece by piece."""
        if not (math.isfinite(self.travel_rad)):
            raise ValueError(f'travel_rad must be finite rad: {self.travel_rad!r}')
        if self.waypoints and self.segments:
            raise ValueError('give waypoints or segments, not both: '
                             f'{len(self.waypoints)} waypoints, {len(self.segments)} segments')
        if self.segments or not self.waypoints and self.start is not None:
            self._lay_segments()
        else:
            if self.start is not None:
                raise ValueError(f'start is for segment paths; a waypoint path starts at its '
                                 f'first waypoint: {self.start!r}')
            self._lay_waypoints()

    def _lay_waypoints(self) -> None:
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
        object.__setattr__(self, '_pieces', (
            _Piece('poly', 0.0, cum[-1], pts[0][0], pts[0][1], heading[0], 0.0),))

    def _lay_segments(self) -> None:
        """Check the segments and the start; chain the pieces from the start pose."""
        segments = tuple(self.segments)
        if not segments:
            raise ValueError('segments must hold at least one Line, Arc or Turn: ()')
        start = self.start if self.start is not None else (0.0, 0.0, 0.0)
        if len(start) != 3 or not all(math.isfinite(float(v)) for v in start):
            raise ValueError(f'start must be finite (x m, y m, heading rad): {self.start!r}')
        x, y, h = (float(v) for v in start)
        s = 0.0
        pieces = []
        for i, seg in enumerate(segments):
            if isinstance(seg, Line):
                pieces.append(_Piece('line', s, seg.length_m, x, y, h, 0.0))
            elif isinstance(seg, Arc):
                pieces.append(_Piece('arc', s, seg.length_m, x, y, h, seg.curvature_1pm))
            elif isinstance(seg, Turn):
                pieces.append(_Piece('turn', s, abs(seg.angle_rad), x, y, h,
                                     math.copysign(1.0, seg.angle_rad)))
            else:
                raise ValueError(f'segments[{i}] must be a Line, Arc or Turn: {seg!r}')
            x, y, h = _piece_pose(pieces[-1], pieces[-1].size)
            s += 0.0 if pieces[-1].kind == 'turn' else pieces[-1].size
        object.__setattr__(self, 'segments', segments)
        object.__setattr__(self, 'start', (float(start[0]), float(start[1]), float(start[2])))
        object.__setattr__(self, '_cum', ())
        object.__setattr__(self, '_heading', ())
        object.__setattr__(self, '_pieces', tuple(pieces))

    @property
    def length(self) -> float:
        """Total length of the path, m (turns in place add nothing)."""
        last = self._pieces[-1]
        return last.s0 + (0.0 if last.kind == 'turn' else last.size)

    @property
    def travel_offset_rad(self) -> float:
        """Direction of travel in base_link, rad: ``travel_rad`` plus pi when reversed."""
        return self.travel_rad + (math.pi if self.reverse else 0.0)

    def pose_at(self, s_m: float) -> tuple[float, float, float]:
        """Return the robot's (x m, y m, yaw rad) after ``s_m`` m along the path (held at ends).

        Turns in place at ``s_m`` itself count as done.
        """
        pieces = self._pieces
        s = min(max(s_m, 0.0), self.length)
        i = max(bisect_right([p.s0 for p in pieces], s) - 1, 0)
        return self._pose(i, s - pieces[i].s0)

    def _pose(self, i: int, q: float) -> tuple[float, float, float]:
        """Return the robot's (x m, y m, yaw rad) at progress ``q`` (m or rad) in piece ``i``."""
        piece = self._pieces[i]
        q = min(max(q, 0.0), piece.size)
        if piece.kind == 'poly':
            x, y, h, _ = self._polyline(q)
        else:
            x, y, h = _piece_pose(piece, q)
        return (x, y, _wrap(h - self.travel_offset_rad))

    def _curvature(self, i: int, q: float) -> float:
        """Return the yaw change per metre (1/m) at progress ``q`` in drive piece ``i``."""
        piece = self._pieces[i]
        if piece.kind == 'poly':
            return self._polyline(q)[3]
        return piece.k if piece.kind == 'arc' else 0.0

    def _blend(self, j: int) -> float:
        """Return the turning length around corner ``j`` (waypoint index), m."""
        cum = self._cum
        return min(self.turn_blend_m, cum[j] - cum[j - 1], cum[j + 1] - cum[j])

    def _polyline(self, s_m: float) -> tuple[float, float, float, float]:
        """Return (x m, y m, heading rad, heading change per metre 1/m) on the polyline."""
        cum, heading, pts = self._cum, self._heading, self.waypoints
        s = min(max(s_m, 0.0), cum[-1])
        i = min(bisect_right(cum, s) - 1, len(heading) - 1)
        f = (s - cum[i]) / (cum[i + 1] - cum[i])
        x = pts[i][0] + f * (pts[i + 1][0] - pts[i][0])
        y = pts[i][1] + f * (pts[i + 1][1] - pts[i][1])
        yaw = heading[i]
        rate = 0.0
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
                rate = _wrap(heading[corner] - before) / b
                yaw = before + g * rate * b
        return (x, y, yaw, rate)


def _piece_pose(piece: _Piece, q: float) -> tuple[float, float, float]:
    """Return (x m, y m, path heading rad) at progress ``q`` (m, or rad in a turn) of a piece."""
    x0, y0, h0, k = piece.x0, piece.y0, piece.h0, piece.k
    if piece.kind == 'turn':
        return (x0, y0, h0 + k * q)
    if piece.kind == 'arc':
        # circle about the centre (x0 - sin h0 / k, y0 + cos h0 / k)
        h = h0 + k * q
        return (x0 + (math.sin(h) - math.sin(h0)) / k, y0 - (math.cos(h) - math.cos(h0)) / k, h)
    return (x0 + q * math.cos(h0), y0 + q * math.sin(h0), h0)


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
    ``speed_cap(t, speed)`` returns the largest speed allowed now (m/s); ``turn_cap(t,
    yaw_rate)`` the largest |yaw rate| allowed now (rad/s; it is given the current signed yaw
    rate). ``t`` is simulation time in s (0 at the start, the clock of the world's movers and of
    the stops; add ``start_time_s`` for bag time). Both are asked at every odometry tick, speed
    first, after every record before that tick was yielded, so a cap can follow a monitor fed
    with the records.

    The robot speeds up at ``accel_mps2`` and brakes at ``decel_mps2`` (default: the configured
    ``robot.decel``) toward the smallest of the profile speed, the caps, 0 during stops, and the
    speed that still stops in time (see the module docstring). Its yaw rate is at most
    ``turn_rate_radps`` (invented default) and changes at most at ``turn_accel_radps2`` and
    ``turn_decel_radps2``, by default ``accel_mps2`` and ``decel_mps2`` divided by the
    footprint's circumradius about base_link (the engine's rule for the turn deceleration).
    """

    def __init__(self, world: World, config: Config, path: Path, profile: SpeedProfile,
                 physics: SonarPhysics = _DEFAULT_PHYSICS, *, seed: int = 0,
                 odom_rate_hz: float = 50.0, accel_mps2: float = 0.6,
                 decel_mps2: float | None = None,
                 speed_cap: Callable[[float, float], float] | None = None,
                 stops: Sequence[Stop] = (), turn_rate_radps: float = 1.0,
                 turn_accel_radps2: float | None = None,
                 turn_decel_radps2: float | None = None,
                 turn_cap: Callable[[float, float], float] | None = None) -> None:
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
        points = np.asarray(config.robot.footprint.points, dtype=float)
        circumradius = float(np.hypot(points[:, 0], points[:, 1]).max())
        self.turn_rate_radps = _positive('turn_rate_radps', turn_rate_radps, 'rad/s')
        self.turn_accel_radps2 = _positive(
            'turn_accel_radps2', self.accel_mps2 / circumradius if turn_accel_radps2 is None
            else turn_accel_radps2, 'rad/s^2')
        self.turn_decel_radps2 = _positive(
            'turn_decel_radps2', self.decel_mps2 / circumradius if turn_decel_radps2 is None
            else turn_decel_radps2, 'rad/s^2')
        self.speed_cap = speed_cap
        self.turn_cap = turn_cap
        self.stops = tuple(stops)
        self.schedule = Schedule.from_config(config)
        if not self.schedule.cycle_s > 0.0:
            raise ValueError(f'the firing cycle must last > 0 s: {self.schedule.cycle_s!r}')
        if abs(math.sin(path.travel_offset_rad)) > 1e-9 and not config.robot.holonomic:
            raise ValueError('path.travel_rad must be 0 or pi (forward or reverse) unless '
                             f'robot.holonomic is true: {path.travel_rad!r} rad')
        off = path.travel_offset_rad
        cos_off, sin_off = math.cos(off), math.sin(off)
        self._direction = (cos_off if abs(cos_off) > 1e-12 else 0.0,
                           sin_off if abs(sin_off) > 1e-12 else 0.0)
        # per piece: speed-up and braking rate (m/s^2, or rad/s^2 in a turn) and top rate
        self._accel: list[float] = []
        self._decel: list[float] = []
        self._top: list[float] = []
        for piece in path._pieces:
            if piece.kind == 'turn':
                limits = (self.turn_accel_radps2, self.turn_decel_radps2, self.turn_rate_radps)
            elif piece.kind == 'arc':
                k = abs(piece.k)
                limits = (min(self.accel_mps2, self.turn_accel_radps2 / k),
                          min(self.decel_mps2, self.turn_decel_radps2 / k),
                          self.turn_rate_radps / k)
            else:
                limits = (self.accel_mps2, self.decel_mps2, math.inf)
            self._accel.append(limits[0])
            self._decel.append(limits[1])
            self._top.append(limits[2])

    def __repr__(self) -> str:
        """Return a short description: sensors, path length, odometry rate."""
        return (f'Run({len(self.config.sensors)} sensors, path {self.path.length:.2f} m, '
                f'odom {self.odom_rate_hz:g} Hz, seed {self.seed})')

    def _twist(self, i: int, q: float, rate: float) -> tuple[float, float, float]:
        """Return the body twist (vx m/s, vy m/s, wz rad/s) at ``rate`` in piece ``i``."""
        piece = self.path._pieces[i]
        if piece.kind == 'turn':
            return (0.0, 0.0, piece.k * rate)
        cos_off, sin_off = self._direction
        return (cos_off * rate, sin_off * rate, self.path._curvature(i, q) * rate)

    def _target(self, t: float, i: int, q: float, rate: float, dt: float) -> float:
        """Return the rate the robot aims for at ``t`` s in piece ``i`` (m/s; rad/s in a turn)."""
        pieces = self.path._pieces
        piece = pieces[i]
        _, _, wz = self._twist(i, q, rate)
        speed_cap = _ask(self.speed_cap, 'speed_cap', t, 0.0 if piece.kind == 'turn' else rate)
        turn_cap = _ask(self.turn_cap, 'turn_cap', t, wz)
        stopped = any(stop.covers(t) for stop in self.stops)
        if piece.kind == 'turn':
            target = 0.0 if stopped else min(self._top[i], turn_cap)
            room = piece.size - q - 0.5 * rate * dt
            return max(min(target, _reach(room, 0.0, self._decel[i], dt)), 0.0)
        target = 0.0 if stopped else min(self.profile.speed_at(piece.s0 + q), speed_cap,
                                         self._top[i])
        curvature = abs(self.path._curvature(i, q))
        if curvature > 0.0:
            target = min(target, turn_cap / curvature)
        # Brake in time for what lies ahead: the next arc's top speed, the next turn in place
        # or the path's end (speed 0), at the smallest braking rate on the way there.
        room = piece.size - q - 0.5 * rate * dt
        decel = self._decel[i]
        for j in range(i + 1, len(pieces) + 1):
            if j == len(pieces) or pieces[j].kind == 'turn':
                target = min(target, _reach(room, 0.0, decel, dt))
                break
            target = min(target, _reach(room, self._top[j], decel, dt))
            decel = min(decel, self._decel[j])
            room += pieces[j].size
        return max(target, 0.0)

    def _step(self, i: int, rate: float, target: float, dt: float) -> float:
        """Return the rate after ``dt`` s of speeding up or braking toward ``target``."""
        if target >= rate:
            return min(target, rate + self._accel[i] * dt)
        return max(target, rate - self._decel[i] * dt)

    def _advance(self, i: int, q: float, travel: float, rate: float
                 ) -> tuple[int, float, float]:
        """Return (piece, progress, rate) after ``travel`` m (or rad) more from piece ``i``.

        Lines and arcs run on into each other at the same speed; the robot stands still (rate
        0) at the end of a turn in place, before one, and at the path's end.
        """
        pieces = self.path._pieces
        q += travel
        while q >= pieces[i].size - _ARRIVED:
            if i + 1 == len(pieces):
                return (i, pieces[i].size, 0.0)
            if pieces[i].kind == 'turn' or pieces[i + 1].kind == 'turn':
                return (i + 1, 0.0, 0.0)
            q -= pieces[i].size
            i += 1
        return (i, q, rate)

    def _fire(self, sensors: Sequence[SensorConfig], t: float,
              pose: tuple[float, float, float], rng: np.random.Generator
              ) -> list[tuple[SensorConfig, float, float]]:
        """Fire ``sensors`` together at ``t`` s; return (sensor, range m, echo delay s) each."""
        scene = Scene.of(self.world, t)
        heard = _listen_all(scene, self.world, pose, sensors, self.physics)
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

        pending: list[tuple[float, int, tuple[str, str, float, Any]]] = []
        seq = 0
        k = 0  # next odometry tick
        n = 0  # next firing
        i, q, rate = 0, 0.0, 0.0  # piece, progress in it (m or rad), rate (m/s or rad/s)
        travel = 0.0  # progress from the latest tick to the next
        t_tick = 0.0
        ahead = (i, q, rate)  # state at the tick after the latest
        while True:
            t_odom = k * dt
            t_fire = (n // len(slots)) * cycle + offsets[n % len(slots)]
            t_pend = pending[0][0] if pending else math.inf
            if min(t_odom, t_fire, t_pend) > duration:
                return
            if t_pend <= t_odom and t_pend <= t_fire:
                yield heapq.heappop(pending)[2]
            elif t_odom <= t_fire:
                i, q, rate = ahead
                x, y, yaw = self.path._pose(i, q)
                vx, vy, wz = self._twist(i, q, rate)
                stamp = t0 + t_odom
                yield (odom_topic, _ODOM_TYPE, stamp,
                       odometry_msg(stamp, vx, vy, wz, x=x, y=y, yaw=yaw, distro=distro))
                target = self._target(t_odom, i, q, rate, dt)
                cx, cy, cw = self._twist(i, q, target)
                yield (CMD_VEL_TOPIC, _TWIST_TYPE, stamp, twist_msg(cx, cw, vy=cy, distro=distro))
                rate_next = self._step(i, rate, target, dt)
                travel = 0.5 * (rate + rate_next) * dt
                ahead = self._advance(i, q, travel, rate_next)
                t_tick = t_odom
                k += 1
            else:
                frac = min(max((t_fire - t_tick) / dt, 0.0), 1.0)
                pose = self.path._pose(*self._advance(i, q, frac * travel, rate)[:2])
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

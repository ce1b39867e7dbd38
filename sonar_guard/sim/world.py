"""An invented 2D world for the simulator: walls, round obstacles, movers and air.

Everything lives in the map frame (REP 103): x and y in metres, angles in radians measured
counter-clockwise from +x, times in seconds of simulation time (0 at the start of a run).
Shapes are straight surfaces (:class:`Wall`) and round obstacles (:class:`Disc`); a
:class:`Mover` gives the shapes of something that moves at a given time (a door, a trolley, a
person). Air zones set the temperature sound travels at (a cold loading dock, a warm kitchen);
outside every zone the air is at the world's default temperature.
"""
from __future__ import annotations

from bisect import bisect_right
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
import math
from typing import Protocol

from sonar_guard.core.arguments import finite

__all__ = [
    'AirZone',
    'Disc',
    'Mover',
    'MovingBox',
    'Point',
    'Shape',
    'SwingingDoor',
    'Walker',
    'Wall',
    'World',
    'interpolate_waypoints',
]


Point = tuple[float, float]
"""A point in the map frame, (x m, y m)."""




def _point(name: str, value: Sequence[float]) -> Point:
    """Return ``value`` as an (x, y) tuple of finite floats, or raise ValueError."""
    try:
        x, y = value
    except (TypeError, ValueError):
        raise ValueError(f'{name} must be an (x, y) pair in m: {value!r}') from None
    return (finite(f'{name}.x', x), finite(f'{name}.y', y))


@dataclass(frozen=True, slots=True)
class Wall:
    """A straight surface from ``a`` to ``b`` (m).

    ``smooth`` surfaces (glass, polished panels) reflect like a mirror; rough ones (plaster,
    fabric-covered panels) scatter the pulse in every direction. ``absorbs_db`` is the extra
    echo loss of the surface material, dB (soft materials).
    """

    a: Point
    b: Point
    smooth: bool = False
    absorbs_db: float = 0.0
    name: str = ''

    def __post_init__(self) -> None:
        """Check the end points are finite and distinct and the loss is >= 0 dB."""
        a = _point('a', self.a)
        b = _point('b', self.b)
        if a == b:
            raise ValueError(f'a wall needs two distinct end points: a={a!r}, b={b!r}')
        object.__setattr__(self, 'a', a)  # lists in, hashable tuples kept
        object.__setattr__(self, 'b', b)
        if not finite('absorbs_db', self.absorbs_db) >= 0.0:
            raise ValueError(f'absorbs_db must be >= 0 dB: {self.absorbs_db!r}')


@dataclass(frozen=True, slots=True)
class Disc:
    """A round obstacle: a person's legs or torso, a post (centre m, radius m)."""

    centre: Point
    radius: float
    absorbs_db: float = 0.0
    name: str = ''

    def __post_init__(self) -> None:
        """Check the centre is finite, the radius > 0 m and the loss >= 0 dB."""
        object.__setattr__(self, 'centre', _point('centre', self.centre))
        if not finite('radius', self.radius) > 0.0:
            raise ValueError(f'radius must be > 0 m: {self.radius!r}')
        if not finite('absorbs_db', self.absorbs_db) >= 0.0:
            raise ValueError(f'absorbs_db must be >= 0 dB: {self.absorbs_db!r}')


Shape = Wall | Disc
"""Anything a ray can hit."""


class Mover(Protocol):
    """Something whose shape depends on time."""

    def at(self, t: float) -> Sequence[Wall | Disc]:
        """Return the shapes at simulation time ``t`` s."""
        ...


def interpolate_waypoints(waypoints: Sequence[tuple[float, float, float]], t: float) -> Point:
    """Return the (x, y) in m at time ``t`` s from ``(t, x, y)`` waypoints, linearly.

    Before the first waypoint and after the last one the position holds still.
    """
    if not waypoints:
        raise ValueError('waypoints must hold at least one (t, x, y) entry: []')
    if t <= waypoints[0][0]:
        return (float(waypoints[0][1]), float(waypoints[0][2]))
    if t >= waypoints[-1][0]:
        return (float(waypoints[-1][1]), float(waypoints[-1][2]))
    i = bisect_right([w[0] for w in waypoints], t)
    t0, x0, y0 = waypoints[i - 1]
    t1, x1, y1 = waypoints[i]
    f = (t - t0) / (t1 - t0)
    return (x0 + f * (x1 - x0), y0 + f * (y1 - y0))


def _check_waypoints(waypoints: Sequence[tuple[float, float, float]]) -> None:
    """Raise ValueError unless waypoints are finite (t, x, y) with strictly increasing t."""
    if not waypoints:
        raise ValueError('waypoints must hold at least one (t, x, y) entry: []')
    last = -math.inf
    for i, w in enumerate(waypoints):
        if len(w) != 3:
            raise ValueError(f'waypoints[{i}] must be (t s, x m, y m): {w!r}')
        t = finite(f'waypoints[{i}].t', w[0])
        finite(f'waypoints[{i}].x', w[1])
        finite(f'waypoints[{i}].y', w[2])
        if t <= last:
            raise ValueError(f'waypoints times must increase: waypoints[{i}].t = {t!r} s')
        last = t


@dataclass(frozen=True)
class SwingingDoor:
    """A door on ``hinge`` (m) that swings linearly from ``closed_angle`` to ``open_angle``.

    The door leaf is ``length`` m long; its angle (rad, map frame) is ``closed_angle`` until
    ``t_open_start`` s, ``open_angle`` from ``t_open_end`` s, and in between changes linearly.
    """

    hinge: Point
    length: float
    closed_angle: float
    open_angle: float
    t_open_start: float
    t_open_end: float
    smooth: bool = False
    name: str = 'door'
    absorbs_db: float = 0.0

    def __post_init__(self) -> None:
        """Check the hinge, length, angles and times."""
        _point('hinge', self.hinge)
        if not finite('length', self.length) > 0.0:
            raise ValueError(f'length must be > 0 m: {self.length!r}')
        finite('closed_angle', self.closed_angle)
        finite('open_angle', self.open_angle)
        start = finite('t_open_start', self.t_open_start)
        if finite('t_open_end', self.t_open_end) < start:
            raise ValueError(f't_open_end must be >= t_open_start ({start!r} s): '
                             f'{self.t_open_end!r}')

    def angle_at(self, t: float) -> float:
        """Return the door leaf's angle at time ``t`` s, rad."""
        if t <= self.t_open_start:
            return float(self.closed_angle)
        if t >= self.t_open_end:
            return float(self.open_angle)
        f = (t - self.t_open_start) / (self.t_open_end - self.t_open_start)
        return self.closed_angle + f * (self.open_angle - self.closed_angle)

    def at(self, t: float) -> Sequence[Wall | Disc]:
        """Return the door leaf at time ``t`` s as one wall."""
        angle = self.angle_at(t)
        hx, hy = self.hinge
        tip = (hx + self.length * math.cos(angle), hy + self.length * math.sin(angle))
        return (Wall((float(hx), float(hy)), tip, smooth=self.smooth,
                     absorbs_db=self.absorbs_db, name=self.name),)


@dataclass(frozen=True)
class MovingBox:
    """A rectangular obstacle that moves: a trolley, a cart, a crate on a pallet jack.

    Give the centre either as ``centre_at``, a function of time (s) returning (x, y) in m, or
    as ``waypoints``, ``(t, x, y)`` entries followed linearly (the position holds outside
    their time range); ``centre_at`` also accepts such waypoints. ``size`` is (length along
    ``yaw``, width across it) in m; ``yaw`` is the box's heading in rad, a constant or a
    function of time.
    """

    centre_at: Callable[[float], Point] | Sequence[tuple[float, float, float]] | None = None
    size: tuple[float, float] = (0.8, 0.5)
    yaw: float | Callable[[float], float] = 0.0
    name: str = 'box'
    smooth: bool = False
    absorbs_db: float = 0.0
    waypoints: Sequence[tuple[float, float, float]] | None = None

    def __post_init__(self) -> None:
        """Check that exactly one of centre_at and waypoints is given, the path and the size."""
        if (self.centre_at is None) == (self.waypoints is None):
            raise ValueError('give the box centre as exactly one of centre_at or waypoints: '
                             f'centre_at={self.centre_at!r}, waypoints={self.waypoints!r}')
        if self.waypoints is not None:
            _check_waypoints(self.waypoints)
        elif not callable(self.centre_at):
            assert self.centre_at is not None
            _check_waypoints(self.centre_at)
        length, width = _point('size', self.size)
        if not (length > 0.0 and width > 0.0):
            raise ValueError(f'size must be (length, width) > 0 m: {self.size!r}')

    def centre(self, t: float) -> Point:
        """Return the box centre at time ``t`` s, m."""
        where = self.waypoints if self.waypoints is not None else self.centre_at
        if callable(where):
            x, y = where(t)
            return (float(x), float(y))
        assert where is not None
        return interpolate_waypoints(where, t)

    def corners(self, t: float) -> tuple[Point, Point, Point, Point]:
        """Return the four corners at time ``t`` s, counter-clockwise, m."""
        cx, cy = self.centre(t)
        yaw = float(self.yaw(t)) if callable(self.yaw) else float(self.yaw)
        c, s = math.cos(yaw), math.sin(yaw)
        hl, hw = 0.5 * self.size[0], 0.5 * self.size[1]
        local = ((hl, -hw), (hl, hw), (-hl, hw), (-hl, -hw))
        pts = tuple((cx + c * px - s * py, cy + s * px + c * py) for px, py in local)
        return pts[0], pts[1], pts[2], pts[3]

    def at(self, t: float) -> Sequence[Wall | Disc]:
        """Return the box at time ``t`` s as four walls."""
        p = self.corners(t)
        return tuple(Wall(p[i], p[(i + 1) % 4], smooth=self.smooth, absorbs_db=self.absorbs_db,
                          name=self.name) for i in range(4))


@dataclass(frozen=True)
class Walker:
    """A person walking through ``(t, x, y)`` waypoints (s, m), seen as one disc of ``radius``.

    The position holds still before the first and after the last waypoint. Clothing absorbs
    some of the pulse: ``absorbs_db`` dB.
    """

    waypoints: Sequence[tuple[float, float, float]]
    radius: float = 0.18
    name: str = 'person'
    absorbs_db: float = 0.0

    def __post_init__(self) -> None:
        """Check the waypoints, radius and loss."""
        _check_waypoints(self.waypoints)
        if not finite('radius', self.radius) > 0.0:
            raise ValueError(f'radius must be > 0 m: {self.radius!r}')

    def position(self, t: float) -> Point:
        """Return the walker's centre at time ``t`` s, m."""
        return interpolate_waypoints(self.waypoints, t)

    def at(self, t: float) -> Sequence[Wall | Disc]:
        """Return the walker at time ``t`` s as one disc."""
        return (Disc(self.position(t), self.radius, absorbs_db=self.absorbs_db,
                     name=self.name),)


@dataclass(frozen=True)
class AirZone:
    """A region of air at its own temperature (polygon vertices in m, temperature in degC)."""

    polygon: Sequence[Point]
    temperature_c: float
    name: str = ''

    def __post_init__(self) -> None:
        """Check the polygon has at least three finite vertices and the temperature is sane."""
        if len(self.polygon) < 3:
            raise ValueError(f'polygon must have at least 3 vertices: {self.polygon!r}')
        for i, p in enumerate(self.polygon):
            _point(f'polygon[{i}]', p)
        temp = finite('temperature_c', self.temperature_c)
        if not -90.0 <= temp <= 150.0:
            raise ValueError(f'temperature_c must be in [-90, 150] degC: {temp!r}')

    def contains(self, x: float, y: float) -> bool:
        """Return True when (x, y) m lies inside the polygon (even-odd rule)."""
        inside = False
        pts = self.polygon
        xj, yj = pts[-1]
        for xi, yi in pts:
            if (yi > y) != (yj > y):
                x_cross = xi + (y - yi) * (xj - xi) / (yj - yi)
                if x < x_cross:
                    inside = not inside
            xj, yj = xi, yi
        return inside


@dataclass
class World:
    """Static shapes, movers and air zones; the air elsewhere is at ``default_air_c`` degC.

    ``walls`` may hold discs too (posts, pillars): anything that does not move.
    """

    walls: Sequence[Wall | Disc] = field(default_factory=list)
    movers: Sequence[Mover] = field(default_factory=list)
    air: Sequence[AirZone] = field(default_factory=list)
    default_air_c: float = 21.0

    def shapes_at(self, t: float) -> list[Wall | Disc]:
        """Return every shape at simulation time ``t`` s: the static ones, then the movers'."""
        shapes: list[Wall | Disc] = list(self.walls)
        for mover in self.movers:
            shapes.extend(mover.at(t))
        return shapes

    def air_temperature(self, x: float, y: float) -> float:
        """Return the air temperature at (x, y) m, degC: the first zone holding it, or default."""
        for zone in self.air:
            if zone.contains(x, y):
                return float(zone.temperature_c)
        return float(self.default_air_c)

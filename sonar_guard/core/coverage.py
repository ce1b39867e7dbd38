"""Which travel headings each sonar watches, and where the robot meets a reading's arc.

A travel heading is the direction of the robot's velocity in ``base_link``: 0 forward, pi/2
left, pi reverse, -pi/2 (same as 3*pi/2) right. This runs once per configuration, not per
reading, so it favours plain, checkable geometry over speed.
"""
from __future__ import annotations

from collections.abc import Sequence
import math

import numpy as np
import numpy.typing as npt

from sonar_guard.core.arguments import count_at_least, finite
from sonar_guard.core.footprint import (
    Footprint,
    contains_points,
    cross2,
    last_hit,
    ray_boundary_hits,
)
from sonar_guard.core.mounts import Mount

__all__ = ['coverage', 'covers_heading', 'heading_index', 'heading_name', 'travel_to_arc',
           'uniform_headings']

FloatArray = npt.NDArray[np.float64]
BoolArray = npt.NDArray[np.bool_]

_TAU = 2.0 * math.pi
_PARALLEL_SIN = 1e-12
_AXIS_NAMES = ((0.0, 'forward'), (math.pi / 2, 'left'), (math.pi, 'reverse'),
               (-math.pi / 2, 'right'))
_AXIS_NAME_TOL_RAD = 1e-6


def covers_heading(mount: Mount, footprint: Footprint, heading_rad: float, *, rays: int = 9,
                   samples: int = 48) -> bool:
    """Tell whether the sonar hears the path the robot sweeps when travelling along a heading.

    The sensor covers travel heading ``h`` (rad, base_link) when its beam cone, out to
    ``max_range_m``, meets the corridor the footprint sweeps when translating along
    ``u = (cos h, sin h)``, ahead of the footprint: the points ``p`` outside the footprint for
    which ``p - s*u`` lies in the footprint for some ``s > 0``.

    Sampled: ``rays`` rays spread evenly across the cone (both edges included; one ray means
    the axis only). Along each ray, from where it leaves the footprint to ``max_range_m``, the
    test takes ``samples`` evenly spaced points plus the midpoint of every stretch between the
    places where the ray crosses a footprint edge or a line through a footprint vertex along
    ``u``: the corridor can only begin or end there, so a stretch of corridor along a ray is
    found however short it is (such as one just off a corner). A point is in the corridor when
    the ray from it along ``-u`` meets the footprint and the point is not inside the footprint.
    A corridor that only a sliver of cone narrower than the ray spacing reaches can be missed.
    """
    heading = finite('heading_rad', heading_rad)
    ray_count = count_at_least('rays', rays, 1)
    sample_count = count_at_least('samples', samples, 1)
    travel = np.array([math.cos(heading), math.sin(heading)])
    origin = np.array([mount.x_m, mount.y_m])
    half = mount.field_of_view_rad / 2.0
    spread = np.linspace(-half, half, ray_count) if ray_count > 1 else np.zeros(1)
    angles = mount.yaw_rad + spread
    directions = np.column_stack((np.cos(angles), np.sin(angles)))
    probes = [origin + distances[:, np.newaxis] * direction
              for direction in directions
              for distances in [_probe_distances(footprint.points, origin, direction, travel,
                                                 mount.max_range_m, sample_count)]]
    return bool(np.any(_in_corridor(footprint.points, np.concatenate(probes), travel)))


def coverage(mounts: Sequence[Mount], footprint: Footprint,
             headings_rad: Sequence[float] | FloatArray, *, rays: int = 9,
             samples: int = 48) -> BoolArray:
    """Return a bool array (len(headings), len(mounts)): which mount covers which heading (rad).

    Each entry is :func:`covers_heading` for that mount and heading.
    """
    headings = np.asarray(headings_rad, dtype=float)
    if headings.ndim != 1:
        raise ValueError(f'headings_rad must be a flat sequence of angles: got shape '
                         f'{headings.shape}')
    if not np.all(np.isfinite(headings)):
        raise ValueError(f'headings_rad must be finite: {headings.tolist()}')
    table = np.zeros((len(headings), len(mounts)), dtype=bool)
    for row, heading in enumerate(headings):
        for column, mount in enumerate(mounts):
            table[row, column] = covers_heading(mount, footprint, float(heading), rays=rays,
                                                samples=samples)
    return table


def travel_to_arc(mount: Mount, footprint: Footprint, heading_rad: float,
                  ranges_m: npt.ArrayLike, *, arc_points: int = 9) -> FloatArray:
    """Return, per range r, how far the robot can travel along a heading before it touches
    the beam's arc at r, m (inf where the arc lies outside the corridor the footprint sweeps).

    A reading r says the nearest echo lies somewhere on the arc of radius r across the cone.
    Only the part of the arc inside the swept corridor can stop the robot; of that part, the
    point the footprint reaches first bounds the travel. The arc is sampled with
    ``arc_points`` points spread evenly across the cone (both edges included); points inside
    the footprint give 0.
    """
    heading = finite('heading_rad', heading_rad)
    ranges = np.atleast_1d(np.asarray(ranges_m, dtype=np.float64))
    if np.isnan(ranges).any():
        raise ValueError('ranges_m must not be NaN')
    count = count_at_least('arc_points', arc_points, 1)
    half = mount.field_of_view_rad / 2.0
    angles = mount.yaw_rad + (np.linspace(-half, half, count) if count > 1 else np.zeros(1))
    rays = np.stack((np.cos(angles), np.sin(angles)), axis=-1)  # (A, 2)
    origin = np.array([mount.x_m, mount.y_m])
    reach = np.where(np.isfinite(ranges), ranges, 0.0)
    points = origin + reach[:, np.newaxis, np.newaxis] * rays[np.newaxis]  # (R, A, 2)
    flat = points.reshape(-1, 2)
    back = np.broadcast_to(-np.array([math.cos(heading), math.sin(heading)]), flat.shape)
    hits = ray_boundary_hits(footprint.points, flat, back)  # (R*A, edges)
    entry = np.where(np.isnan(hits), np.inf, hits).min(axis=1)
    entry[contains_points(footprint.points, flat)] = 0.0
    travel: FloatArray = entry.reshape(points.shape[:2]).min(axis=1)
    travel[~np.isfinite(ranges)] = np.inf
    return travel


def heading_index(heading_rad: float, count: int) -> int:
    """Return the index of the nearest of ``count`` evenly spaced headings from 0 rad (wraps)."""
    heading = finite('heading_rad', heading_rad)
    n = count_at_least('count', count, 1)
    # A heading exactly halfway between two goes to the counter-clockwise one.
    return math.floor(heading / (_TAU / n) + 0.5) % n


def uniform_headings(count: int) -> FloatArray:
    """Return ``count`` evenly spaced headings in [0, 2*pi) rad, starting at 0 (forward)."""
    n = count_at_least('count', count, 1)
    headings: FloatArray = _TAU * np.arange(n, dtype=float) / n
    return headings


def heading_name(heading_rad: float) -> str:
    """Name a heading (rad) for reports: 'forward', 'left', 'reverse', 'right' or 'heading N deg'.

    The four axis names apply within 1e-6 rad; other headings are given in degrees in
    (-180, 180], counter-clockwise from forward (so 'heading -45 deg' is forward and right).
    """
    heading = math.remainder(finite('heading_rad', heading_rad), _TAU)
    for axis, name in _AXIS_NAMES:
        if abs(math.remainder(heading - axis, _TAU)) <= _AXIS_NAME_TOL_RAD:
            return name
    degrees = round(math.degrees(heading), 2) + 0.0  # + 0.0 turns -0.0 into 0.0
    if degrees == -180.0:
        degrees = 180.0
    return f'heading {degrees:g} deg'


def _in_corridor(vertices: FloatArray, points: FloatArray, travel: FloatArray) -> BoolArray:
    """Return, for each (M, 2) point, whether it is outside the outline but swept by it."""
    back = np.broadcast_to(-travel, points.shape)
    swept = ~np.all(np.isnan(ray_boundary_hits(vertices, points, back)), axis=1)
    result: BoolArray = swept & ~contains_points(vertices, points)
    return result


def _probe_distances(vertices: FloatArray, origin: FloatArray, direction: FloatArray,
                     travel: FloatArray, max_range_m: float, samples: int) -> FloatArray:
    """Return distances (m) along one beam ray at which :func:`covers_heading` probes."""
    hits = ray_boundary_hits(vertices, origin[np.newaxis], direction[np.newaxis])[0]
    start = last_hit(hits)
    if start >= max_range_m:
        return np.zeros(0)
    breaks = [hits[~np.isnan(hits)]]
    denom = float(cross2(direction, travel))
    if abs(denom) > _PARALLEL_SIN:
        # Where the ray crosses the line through each vertex along the travel direction.
        breaks.append(cross2(vertices - origin, travel) / denom)
    inner = np.concatenate(breaks)
    inner = inner[(inner > start) & (inner < max_range_m)]
    bounds = np.unique(np.concatenate(([start], inner, [max_range_m])))
    midpoints = (bounds[:-1] + bounds[1:]) / 2.0
    even = start + (max_range_m - start) * np.arange(1, samples + 1) / samples
    distances: FloatArray = np.concatenate((even, midpoints))
    return distances

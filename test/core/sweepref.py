"""Brute-force reference of the swept footprint: how fast the robot may go and still stop.

Independent of the engine (importable as ``sweepref``): plain numpy plane geometry, sampled
finely, slow and meant to be obviously right. Nothing here comes from ``sonar_guard``.

* A path is what base_link does when the body moves along heading ``h`` (unit vector
  ``(cos h, sin h)`` in base_link) while turning at ``k`` rad per metre of travel; the pose is
  integrated numerically from that body velocity (midpoint rule), and the closed form of
  reference.md sec. 7 is only used to check it. Turning in place rotates about base_link.
* The footprint is the filled polygon; the distance of a point to it is exact (point to
  segment for every edge, 0 inside). Poses are sampled so that no footprint point moves more
  than ``step_m`` between two samples, and the exact end of every stopping path is evaluated
  too, so a first contact is never stepped over at the end of a path.
* The largest safe speed is found by bisection on the speed itself: the largest ``v`` for which
  every constraint point set ``i``, with its own time budget ``T_i``, stays at least ``margin``
  from the footprint over the stopping path ``v*T_i + v^2/(2a)`` (reference.md sec. 5).

Sampling only ever leaves points out (poses between samples, points between arc samples), so
the reference can only allow more than the exact answer, never less: a limit above it is
certainly above the exact one.

Units: metres, seconds, radians; poses are ``(x, y, yaw)`` rows.
"""
from __future__ import annotations

from collections.abc import Callable, Sequence
import math
from typing import NamedTuple

import numpy as np

__all__ = [
    'Beam',
    'arc_points',
    'arc_pose_closed_form',
    'circumradius',
    'clearance',
    'compose',
    'fastest_point_factor',
    'inside_polygon',
    'largest_safe_speed',
    'largest_safe_turn_rate',
    'max_safe_speed_closed_form',
    'nearest_echo',
    'path_grid',
    'path_pose',
    'path_poses',
    'polygon_depth',
    'polygon_distance',
    'reading_points',
    'sector_points',
    'sonar_range',
    'stopping_distance',
    'sweep_distances',
    'to_body',
    'turn_poses',
]

STEP_M = 0.002  # largest move of any footprint point between two sampled poses
SPACING_M = 0.005  # spacing of the points sampled along a reading's arc
_BISECTIONS = 60  # halvings of the speed interval: far below any tolerance used
_POSES_PER_BLOCK = 128  # poses handled at once: a short stretch of path, few points near it


class Beam(NamedTuple):
    """One sonar of the test world: mount in base_link (m, rad), full cone angle, ranges (m)."""

    x_m: float
    y_m: float
    yaw_rad: float
    fov_rad: float
    min_range_m: float
    max_range_m: float


# ------------------------------------------------------------------------- stopping physics

def stopping_distance(speed: float, latency_s: float, decel: float) -> float:
    """Return v*T + v^2/(2a), m: travel during the latency, then braking (reference.md sec. 5)."""
    return speed * latency_s + speed * speed / (2.0 * decel)


def max_safe_speed_closed_form(room_m: float, latency_s: float, decel: float) -> float:
    """Return -aT + sqrt((aT)^2 + 2a d), m/s; 0 for d <= 0, inf for d = inf (reference.md
    sec. 5)."""
    if room_m <= 0.0:
        return 0.0
    if math.isinf(room_m):
        return math.inf
    at = decel * latency_s
    return -at + math.sqrt(at * at + 2.0 * decel * room_m)


# ------------------------------------------------------------------------- plane geometry

def circumradius(polygon: np.ndarray) -> float:
    """Return the largest distance of a footprint vertex from base_link, m."""
    return float(np.hypot(polygon[:, 0], polygon[:, 1]).max())


def inside_polygon(points: np.ndarray, polygon: np.ndarray) -> np.ndarray:
    """Return, per (M, 2) point, whether it lies inside the polygon (even-odd crossing rule,
    W. R. Franklin's PNPOLY)."""
    x, y = points[:, 0], points[:, 1]
    inside = np.zeros(len(points), dtype=bool)
    for (x0, y0), (x1, y1) in zip(polygon, np.roll(polygon, -1, axis=0)):
        if y0 == y1:
            continue
        straddles = (y0 > y) != (y1 > y)
        x_cross = x0 + (y - y0) * (x1 - x0) / (y1 - y0)
        inside ^= straddles & (x < x_cross)
    return inside


def _outline_distance(points: np.ndarray, polygon: np.ndarray) -> np.ndarray:
    """Return the distance of each (M, 2) point to the polygon's outline, m: the projection
    clamped to each edge segment, the smallest over all edges (plane geometry)."""
    best = np.full(len(points), np.inf)
    for a, b in zip(polygon, np.roll(polygon, -1, axis=0)):
        edge = b - a
        rel = points - a
        t = np.clip((rel @ edge) / float(edge @ edge), 0.0, 1.0)
        gap = rel - t[:, None] * edge
        best = np.minimum(best, np.hypot(gap[:, 0], gap[:, 1]))
    return best


def polygon_distance(points: np.ndarray, polygon: np.ndarray) -> np.ndarray:
    """Return the distance of each (M, 2) point to the filled polygon, m (0 inside): the
    distance to its outline for points outside."""
    best = _outline_distance(points, polygon)
    best[inside_polygon(points, polygon)] = 0.0
    return best


def polygon_depth(points: np.ndarray, polygon: np.ndarray) -> np.ndarray:
    """Return how deep each (M, 2) point lies inside the polygon, m: the distance to its
    outline for points inside, 0 outside."""
    depth = _outline_distance(points, polygon)
    depth[~inside_polygon(points, polygon)] = 0.0
    return depth


def compose(pose: Sequence[float], local: np.ndarray) -> np.ndarray:
    """Return the (N, 3) poses ``local`` (given in the frame of ``pose``) in the outer frame."""
    x, y, yaw = pose
    c, s = math.cos(yaw), math.sin(yaw)
    local = np.atleast_2d(local)
    return np.column_stack((x + c * local[:, 0] - s * local[:, 1],
                            y + s * local[:, 0] + c * local[:, 1], yaw + local[:, 2]))


def to_body(points: np.ndarray, pose: Sequence[float]) -> np.ndarray:
    """Return (M, 2) world points in the body frame of ``pose``: R(-yaw) (q - position)."""
    x, y, yaw = pose
    c, s = math.cos(yaw), math.sin(yaw)
    dx, dy = points[:, 0] - x, points[:, 1] - y
    return np.column_stack((c * dx + s * dy, -s * dx + c * dy))


# ------------------------------------------------------------------------- paths

def path_grid(length: float, step: float) -> np.ndarray:
    """Return path parameters from 0 to ``length`` inclusive, never more than ``step`` apart."""
    if length <= 0.0:
        return np.zeros(1)
    count = max(1, math.ceil(length / step))
    return np.linspace(0.0, length, count + 1)


def path_poses(lengths: np.ndarray, heading: float, curvature: float) -> np.ndarray:
    """Return base_link poses (N, 3) after each path length of the sorted grid ``lengths``
    (starting at 0), integrating the body velocity numerically.

    Textbook kinematics: at path length s the body has turned by k*s, so base_link moves along
    the world direction h + k*s; each step moves ``ds`` along the direction at its midpoint
    (midpoint rule, error per step ds^3 k^2 / 24).
    """
    lengths = np.asarray(lengths, dtype=float)
    ds = np.diff(lengths)
    direction = heading + curvature * (lengths[:-1] + ds / 2)
    x = np.concatenate(([0.0], np.cumsum(ds * np.cos(direction))))
    y = np.concatenate(([0.0], np.cumsum(ds * np.sin(direction))))
    return np.column_stack((x, y, curvature * lengths))


def path_pose(length: float, heading: float, curvature: float, step: float = 1e-3) -> np.ndarray:
    """Return the base_link pose (x, y, yaw) after ``length`` m of the path, integrated in
    steps of at most ``step`` m."""
    return path_poses(path_grid(length, step), heading, curvature)[-1]


def turn_poses(angles: np.ndarray, direction: int) -> np.ndarray:
    """Return poses (N, 3) of turning in place by ``angles`` (rad, >= 0); direction +1 is
    counter-clockwise (REP 103), -1 clockwise."""
    angles = np.asarray(angles, dtype=float)
    return np.column_stack((np.zeros_like(angles), np.zeros_like(angles), direction * angles))


def arc_pose_closed_form(length: float, curvature: float) -> tuple[float, float, float]:
    """Return (sin(ks)/k, (1 - cos(ks))/k, ks), the forward arc pose of reference.md sec. 7."""
    if curvature == 0.0:
        return length, 0.0, 0.0
    ks = curvature * length
    return math.sin(ks) / curvature, (1.0 - math.cos(ks)) / curvature, ks


def fastest_point_factor(polygon: np.ndarray, heading: float, curvature: float) -> float:
    """Return how far the fastest footprint point moves per metre of base_link path.

    Rigid-body kinematics: a body point p moves with v + w x p, here u + k (-p_y, p_x) per
    metre; its norm is convex in p, so the fastest point of the polygon is a vertex.
    """
    ux, uy = math.cos(heading), math.sin(heading)
    vx = ux - curvature * polygon[:, 1]
    vy = uy + curvature * polygon[:, 0]
    return float(np.hypot(vx, vy).max())


# ------------------------------------------------------------------------- sweeping

def sweep_distances(poses: np.ndarray, polygon: np.ndarray, points: np.ndarray,
                    cap: float = math.inf) -> np.ndarray:
    """Return, for each pose, the smallest distance of any point to the footprint there,
    clipped at ``cap`` (m).

    A point farther than ``cap`` plus the circumradius from base_link is farther than ``cap``
    from every footprint point (triangle inequality), so only the others are measured.
    """
    out = np.full(len(poses), cap)
    if len(points) == 0 or len(poses) == 0:
        return out
    reach = circumradius(polygon) + cap
    for start in range(0, len(poses), _POSES_PER_BLOCK):
        block = poses[start:start + _POSES_PER_BLOCK]
        # only points near this stretch of the path can be within reach of it: a box test
        low = block[:, :2].min(axis=0) - reach
        high = block[:, :2].max(axis=0) + reach
        candidates = points[np.all((points >= low) & (points <= high), axis=1)]
        if len(candidates) == 0:
            continue
        c, s = np.cos(block[:, 2])[:, None], np.sin(block[:, 2])[:, None]
        dx = candidates[None, :, 0] - block[:, 0:1]
        dy = candidates[None, :, 1] - block[:, 1:2]
        bx, by = c * dx + s * dy, -s * dx + c * dy  # body frame of each pose
        near = np.hypot(bx, by) < reach
        if not near.any():
            continue
        which, _ = np.nonzero(near)
        d = polygon_distance(np.column_stack((bx[near], by[near])), polygon)
        part = np.full(len(block), cap)
        np.minimum.at(part, which, np.minimum(d, cap))
        out[start:start + len(block)] = part
    return out


def clearance(poses: np.ndarray, polygon: np.ndarray, points: np.ndarray) -> float:
    """Return the smallest distance of any point to the footprint over all poses, m."""
    if len(points) == 0:
        return math.inf
    return float(sweep_distances(poses, polygon, points).min())


def _largest_rate(polygon: np.ndarray, sets: Sequence[tuple[np.ndarray, float]],
                  poses_at: Callable[[np.ndarray], np.ndarray], *, full_sweep: float,
                  factor: float, margin: float, decel: float, cap: float,
                  step: float) -> float:
    """Bisect the largest rate (m/s or rad/s) up to ``cap`` whose stopping sweep keeps every
    point set at least ``margin`` from the footprint.

    ``poses_at`` maps path parameters (m or rad) to poses; beyond ``full_sweep`` the motion
    repeats poses already taken (a whole revolution), so longer stops sweep nothing new.
    ``factor`` is the largest footprint point motion per unit of path parameter.
    """
    sets = [(np.asarray(p, dtype=float).reshape(-1, 2), float(t)) for p, t in sets]
    sets = [(p, t) for p, t in sets if len(p)]
    if not sets:
        return cap
    longest = min(full_sweep, max(stopping_distance(cap, t, decel) for _, t in sets))
    grid = path_grid(longest, step / max(factor, 1e-12))
    poses = poses_at(grid)
    # only whether a distance is below the margin matters: clip far ones to save work
    clip = margin + 0.01
    prefix = [np.minimum.accumulate(sweep_distances(poses, polygon, p, clip)) for p, _ in sets]

    def keeps_clear(rate: float) -> bool:
        for (points, budget), best in zip(sets, prefix):
            length = min(full_sweep, stopping_distance(rate, budget, decel))
            last = int(np.searchsorted(grid, length, side='right')) - 1
            if best[last] < margin:
                return False
            # the exact end of the stopping path: one short step past the last sample (the
            # step's change of x, y and yaw is in the path's own frame, as the samples are)
            step_end = poses_at(np.array([grid[last], length]))
            end = poses[last] + (step_end[1] - step_end[0])
            if sweep_distances(end[None, :], polygon, points, clip)[0] < margin:
                return False
        return True

    if keeps_clear(cap):
        return cap
    if not keeps_clear(0.0):
        return 0.0
    lo, hi = 0.0, cap
    for _ in range(_BISECTIONS):
        mid = 0.5 * (lo + hi)
        if keeps_clear(mid):
            lo = mid
        else:
            hi = mid
    return hi


def largest_safe_speed(polygon: np.ndarray, sets: Sequence[tuple[np.ndarray, float]],
                       heading: float, curvature: float, *, margin: float, decel: float,
                       turn_decel: float, max_speed: float, step: float = STEP_M) -> float:
    """Return the largest speed (m/s, at most ``max_speed``) along the path (heading h,
    curvature k) from which the robot stops with every point set ``(points (M, 2) in base_link
    now, time budget T s)`` at least ``margin`` from its footprint.

    The robot keeps its path while braking, so the deceleration is the smaller of ``decel``
    and ``turn_decel / |k|`` (its turn rate k*v falls at most at ``turn_decel``).
    """
    polygon = np.asarray(polygon, dtype=float)
    decel_eff = decel if curvature == 0.0 else min(decel, turn_decel / abs(curvature))
    revolution = math.inf if curvature == 0.0 else 2 * math.pi / abs(curvature)
    return _largest_rate(
        polygon, sets, lambda lengths: path_poses(lengths, heading, curvature),
        full_sweep=revolution, factor=fastest_point_factor(polygon, heading, curvature),
        margin=margin, decel=decel_eff, cap=max_speed, step=step)


def largest_safe_turn_rate(polygon: np.ndarray, sets: Sequence[tuple[np.ndarray, float]],
                           direction: int, *, margin: float, turn_decel: float,
                           max_turn_rate: float, step: float = STEP_M) -> float:
    """Return the largest turn rate (rad/s, at most ``max_turn_rate``) for turning in place
    about base_link in ``direction`` (+1 counter-clockwise) that stops, braking at
    ``turn_decel``, after w*T + w^2/(2 alpha) rad with every point set at least ``margin`` from
    the footprint."""
    polygon = np.asarray(polygon, dtype=float)
    return _largest_rate(
        polygon, sets, lambda angles: turn_poses(angles, direction), full_sweep=2 * math.pi,
        factor=circumradius(polygon), margin=margin, decel=turn_decel, cap=max_turn_rate,
        step=step)


# ------------------------------------------------------------------------- readings

def arc_points(x: float, y: float, yaw: float, fov: float, radius: float,
               spacing: float = SPACING_M) -> np.ndarray:
    """Return points (M, 2) of the arc of ``radius`` about (x, y) across yaw +/- fov/2, both
    ends included, no two further apart than ``spacing`` along the arc."""
    count = max(1, math.ceil(radius * fov / spacing))
    angles = yaw + np.linspace(-fov / 2, fov / 2, count + 1)
    return np.column_stack((x + radius * np.cos(angles), y + radius * np.sin(angles)))


def sector_points(x: float, y: float, yaw: float, fov: float, radius: float,
                  spacing: float = SPACING_M) -> np.ndarray:
    """Return points (M, 2) filling the sector of ``radius`` about (x, y) across yaw +/-
    fov/2: the apex and arcs every ``spacing`` out to ``radius``."""
    rings = [np.array([[x, y]])]
    count = max(1, math.ceil(radius / spacing))
    for r in np.linspace(radius / count, radius, count):
        rings.append(arc_points(x, y, yaw, fov, float(r), spacing))
    return np.concatenate(rings)


def reading_points(beam: Beam, range_m: float, spacing: float = SPACING_M) -> np.ndarray:
    """Return the constraint points (M, 2, base_link at the reading) of one trusted reading, as
    the issue 17 engine interface defines them: an echo r is the arc of radius r across the
    cone; no echo (+inf or >= max_range) the arc at max_range; blind (-inf or < min_range) the
    whole sector of radius min_range. A NaN range says nothing: no points."""
    if math.isnan(range_m):
        return np.zeros((0, 2))
    if range_m < beam.min_range_m:
        return sector_points(beam.x_m, beam.y_m, beam.yaw_rad, beam.fov_rad, beam.min_range_m,
                             spacing)
    radius = min(range_m, beam.max_range_m)
    return arc_points(beam.x_m, beam.y_m, beam.yaw_rad, beam.fov_rad, radius, spacing)


def _in_cone(beam: Beam, pose: Sequence[float], obstacles: np.ndarray
             ) -> tuple[np.ndarray, np.ndarray]:
    """Return (distance from the mount, inside the cone) per obstacle point at ``pose``."""
    x, y, yaw = pose
    c, s = math.cos(yaw), math.sin(yaw)
    mx, my = x + c * beam.x_m - s * beam.y_m, y + s * beam.x_m + c * beam.y_m
    dx, dy = obstacles[:, 0] - mx, obstacles[:, 1] - my
    off_axis = np.angle(np.exp(1j * (np.arctan2(dy, dx) - (yaw + beam.yaw_rad))))
    return np.hypot(dx, dy), np.abs(off_axis) <= beam.fov_rad / 2


def nearest_echo(beam: Beam, pose: Sequence[float], obstacles: np.ndarray) -> int | None:
    """Return the index of the obstacle point that echoes (the nearest inside the cone and
    within max range) at ``pose``, or None."""
    if len(obstacles) == 0:
        return None
    distance, inside = _in_cone(beam, pose, obstacles)
    inside &= distance < beam.max_range_m
    if not inside.any():
        return None
    return int(np.flatnonzero(inside)[np.argmin(distance[inside])])


def sonar_range(beam: Beam, pose: Sequence[float], obstacles: np.ndarray) -> float:
    """Return what the test world's sonar reads at ``pose``: the distance to the nearest
    obstacle point inside the cone (angle within fov/2 of the axis), m; +inf when none lies
    within max range, -inf when it is nearer than min range (REP 117 special values)."""
    index = nearest_echo(beam, pose, obstacles)
    if index is None:
        return math.inf
    distance = float(_in_cone(beam, pose, obstacles[index:index + 1])[0][0])
    return -math.inf if distance < beam.min_range_m else distance

"""Place sonars on the robot and work out which travel headings each beam watches.

Frames and units follow REP 103: ``base_link`` has x forward, y left, z up (right-handed),
lengths in metres, angles in radians, yaw counter-clockwise from +x. A sonar looks along its own
+x axis (sensor_msgs/Range: "0 angle corresponds to the x-axis of the sensor") and hears echoes
from a cone of full angle ``field_of_view_rad``. A travel heading is the direction of the robot's
velocity in ``base_link``: 0 forward, pi/2 left, pi reverse, -pi/2 (same as 3*pi/2) right.

The footprint is a simple polygon in ``base_link`` given flat as ``[x0, y0, x1, y1, ...]``
(ROS 2 parameters cannot nest arrays). Edge ``i`` joins point ``i`` to the next point and the
last edge closes the outline back to point 0, so the first point is not repeated at the end.

This runs once per configuration, not per reading, so it favours plain, checkable geometry over
speed. Points within 1e-9 m of the outline count as on it.
"""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
import math

import numpy as np
import numpy.typing as npt
from transforms3d import affines, euler

from sonar_guard.core.arguments import count_at_least, finite

__all__ = [
    'Footprint',
    'Mount',
    'beam_axis',
    'coverage',
    'covers_heading',
    'edge_offset_m',
    'free_distance_m',
    'heading_index',
    'heading_name',
    'mount_quaternion',
    'mount_transform',
    'polygon_problems',
    'travel_to_arc',
    'uniform_headings',
]

FloatArray = npt.NDArray[np.float64]
BoolArray = npt.NDArray[np.bool_]

_TAU = 2.0 * math.pi
# Points this close to an edge count as on it; also the tolerance for "same point" (m).
_TOL_M = 1e-9
# Below this |sin| of the angle between a ray and an edge, they are treated as parallel.
_PARALLEL_SIN = 1e-12
_AXIS_NAMES = ((0.0, 'forward'), (math.pi / 2, 'left'), (math.pi, 'reverse'),
               (-math.pi / 2, 'right'))
_AXIS_NAME_TOL_RAD = 1e-6


@dataclass(frozen=True, slots=True)
class Mount:
    """Pose of one sonar on the robot, in base_link (m, rad), and its beam."""

    x_m: float
    y_m: float
    z_m: float
    yaw_rad: float
    field_of_view_rad: float  # full cone angle
    max_range_m: float

    def __post_init__(self) -> None:
        """Store every field as a float; raise ValueError listing every bad field."""
        problems: list[str] = []
        for name in ('x_m', 'y_m', 'z_m', 'yaw_rad', 'field_of_view_rad', 'max_range_m'):
            raw = getattr(self, name)
            try:
                value = float(raw)
            except (TypeError, ValueError):
                problems.append(f'Mount.{name} must be a number: {raw!r}')
                continue
            if not math.isfinite(value):
                problems.append(f'Mount.{name} must be finite: {value}')
                continue
            object.__setattr__(self, name, value)
        fov = self.field_of_view_rad
        if isinstance(fov, float) and math.isfinite(fov) and not 0.0 <= fov < _TAU:
            problems.append(f'Mount.field_of_view_rad must be in [0, 2*pi) rad: {fov}')
        reach = self.max_range_m
        if isinstance(reach, float) and math.isfinite(reach) and reach <= 0.0:
            problems.append(f'Mount.max_range_m must be > 0 m: {reach}')
        if problems:
            raise ValueError('; '.join(problems))


def mount_transform(mount: Mount) -> FloatArray:
    """Return the 4x4 homogeneous transform base_link <- sensor (metres; roll = pitch = 0)."""
    # transforms3d's default axes 'sxyz' take (roll, pitch, yaw) about static x, y, z.
    rotation = euler.euler2mat(0.0, 0.0, mount.yaw_rad)
    translation = [mount.x_m, mount.y_m, mount.z_m]
    matrix: FloatArray = affines.compose(translation, rotation, np.ones(3))
    return matrix


def mount_quaternion(mount: Mount) -> tuple[float, float, float, float]:
    """Return the sensor's orientation in base_link as (x, y, z, w), geometry_msgs order."""
    # transforms3d returns (w, x, y, z); geometry_msgs/Quaternion lists x, y, z, w.
    w, x, y, z = euler.euler2quat(0.0, 0.0, mount.yaw_rad)
    return (float(x), float(y), float(z), float(w))


def beam_axis(mount: Mount) -> FloatArray:
    """Return the beam axis (the sensor's +x) as a unit 2-vector in base_link."""
    axis: FloatArray = np.array(mount_transform(mount)[:2, 0], dtype=float)
    return axis


@dataclass(frozen=True, slots=True, eq=False)
class Footprint:
    """Outline of the robot in base_link: an (N, 2) read-only array of x, y points in metres."""

    points: FloatArray

    def __post_init__(self) -> None:
        """Copy the points into a read-only float array; raise ValueError if not a polygon."""
        points = np.array(self.points, dtype=float)  # a copy: the caller may change theirs
        if points.ndim != 2 or points.shape[1] != 2:
            raise ValueError(f'Footprint.points must have shape (N, 2): got {points.shape}')
        problems = polygon_problems(points.ravel().tolist(), name='Footprint.points')
        if problems:
            raise ValueError('; '.join(problems))
        points.setflags(write=False)
        object.__setattr__(self, 'points', points)

    @classmethod
    def from_flat(cls, values: Sequence[float], *, name: str = 'robot.footprint') -> Footprint:
        """Build a footprint from flat [x0, y0, x1, y1, ...] metres; ValueError names problems."""
        problems = polygon_problems(values, name=name)
        if problems:
            raise ValueError('; '.join(problems))
        return cls(np.asarray(values, dtype=float).reshape(-1, 2))

    def __repr__(self) -> str:
        """Show the points as (x, y) pairs in metres, on one line."""
        pairs = ', '.join(f'({float(x)!r}, {float(y)!r})' for x, y in self.points)
        return f'Footprint(points=[{pairs}])'

    def __eq__(self, other: object) -> bool:
        """Compare the points exactly, in order."""
        if not isinstance(other, Footprint):
            return NotImplemented
        return bool(np.array_equal(self.points, other.points))

    def __hash__(self) -> int:
        """Hash the points so equal footprints hash equally."""
        return hash(tuple(float(v) for v in self.points.ravel()))

    def contains(self, x: float, y: float) -> bool:
        """Tell whether base_link point (x, y) in metres is inside or on the outline."""
        point = _xy((x, y), 'point (x, y)')
        return bool(_contains_points(self.points, point[np.newaxis])[0])

    def exit_distance(self, origin_xy: npt.ArrayLike, direction_xy: npt.ArrayLike) -> float:
        """Return the distance (m) along the ray to where it leaves the outline for the last time.

        ``direction_xy`` need not be a unit vector; the result is in metres regardless. The ray
        from an inside origin always leaves; from an outside origin it may pass through the
        footprint (then the far side counts) or never meet it, which gives 0.0. An origin on the
        outline facing out also gives 0.0.
        """
        origin = _xy(origin_xy, 'origin_xy')
        direction = _unit(direction_xy, 'direction_xy')
        hits = _ray_boundary_hits(self.points, origin[np.newaxis], direction[np.newaxis])
        return _last_hit(hits[0])


def polygon_problems(values: Sequence[float], *, name: str = 'robot.footprint') -> list[str]:
    """List every reason a flat [x0, y0, x1, y1, ...] list (m) is not a usable footprint.

    Checks, in order: a flat list of numbers, an even count, at least 3 points, finite values,
    no point repeated right after itself (nor the first point repeated at the end), a non-zero
    area, and a simple outline (no two edges cross, touch or overlap; edge ``i`` starts at
    point ``i``). Returns an empty list when the footprint is fine. ``name`` is the parameter
    named in each message.
    """
    label = f"'{name}'"
    try:
        flat = np.asarray(values, dtype=float)
    except (TypeError, ValueError):
        return [f'{label} must be a flat list of numbers [x0, y0, x1, y1, ...]: {values!r}']
    if flat.ndim != 1:
        return [f'{label} must be a flat list [x0, y0, x1, y1, ...]: got shape {flat.shape}']
    problems: list[str] = []
    if flat.size % 2:
        problems.append(f'{label} must have an even number of values (x, y pairs): got '
                        f'{flat.size}')
    if flat.size // 2 < 3:
        problems.append(f'{label} must have at least 3 points: got {flat.size // 2}')
    bad = np.flatnonzero(~np.isfinite(flat))
    if bad.size:
        listed = ', '.join(f'{flat[i]} at index {i}' for i in bad)
        problems.append(f'{label} must hold finite numbers: {listed}')
    if problems:
        return problems

    points = flat.reshape(-1, 2)
    count = len(points)
    # repeats[i]: point i is the same as the point before it (point count-1 for point 0).
    repeats = np.hypot(*(points - np.roll(points, 1, axis=0)).T) <= _TOL_M
    for i in np.flatnonzero(repeats):
        before = (i - 1) % count
        if i == 0:
            problems.append(f'{label} must not repeat point 0 at the end (point {before}): '
                            'the outline closes by itself')
        else:
            problems.append(f'{label} repeats a point: points {before} and {i} are both '
                            f'({points[i, 0]:g}, {points[i, 1]:g})')
    kept = np.flatnonzero(~repeats)
    distinct = points[kept]
    if len(distinct) < 3 or _spread_across_line(distinct) <= _TOL_M:
        problems.append(f'{label} must enclose an area: all points lie on one line')
        return problems
    problems.extend(f'{label} must be a simple polygon: {clash}'
                    for clash in _edge_clashes(distinct, kept))
    return problems


def edge_offset_m(mount: Mount, footprint: Footprint) -> float:
    """Return the distance (m) from the mount along its beam axis to the footprint's edge.

    It is 0.0 when the mount sits on or outside the outline facing out. A mount set inside the
    outline (a padded footprint) gets the stretch of beam still over the robot.
    """
    return footprint.exit_distance((mount.x_m, mount.y_m), beam_axis(mount))


def free_distance_m(range_m: float, mount: Mount, footprint: Footprint) -> float:
    """Return range minus the beam-axis edge offset (m), floored at 0.0; +inf stays +inf.

    -inf (REP 117: too close to measure) gives 0.0; NaN (an invalid reading) raises ValueError,
    because deciding what an invalid reading means is the validator's job. The offset is taken
    along the beam axis: an echo from the edge of the cone may sit nearer the outline than this.
    """
    reading = float(range_m)
    if math.isnan(reading):
        raise ValueError('range_m must not be NaN (REP 117: an invalid reading)')
    if reading == math.inf:
        return math.inf
    return max(reading - edge_offset_m(mount, footprint), 0.0)


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
    hits = _ray_boundary_hits(footprint.points, flat, back)  # (R*A, edges)
    entry = np.where(np.isnan(hits), np.inf, hits).min(axis=1)
    entry[_contains_points(footprint.points, flat)] = 0.0
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


# --- private helpers -----------------------------------------------------------------------






def _xy(value: npt.ArrayLike, name: str) -> FloatArray:
    """Return ``value`` as a finite float array of shape (2,) or raise ValueError."""
    try:
        array = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise ValueError(f'{name} must be two numbers (x, y): {value!r}') from None
    if array.shape != (2,):
        raise ValueError(f'{name} must be two numbers (x, y): got shape {array.shape}')
    if not np.all(np.isfinite(array)):
        raise ValueError(f'{name} must be finite: {array.tolist()}')
    return array


def _unit(value: npt.ArrayLike, name: str) -> FloatArray:
    """Return ``value`` scaled to unit length or raise ValueError if it is zero or not finite."""
    array = _xy(value, name)
    length = float(np.hypot(array[0], array[1]))
    if length == 0.0:
        raise ValueError(f'{name} must not be the zero vector')
    return array / length


def _cross(a: FloatArray, b: FloatArray) -> FloatArray:
    """Return the z component of a x b over the last axis (2-vectors, broadcast)."""
    result: FloatArray = a[..., 0] * b[..., 1] - a[..., 1] * b[..., 0]
    return result


def _ray_boundary_hits(vertices: FloatArray, origins: FloatArray,
                       directions: FloatArray) -> FloatArray:
    """Return (M, N) distances at which ray m meets edge n of the outline; NaN where it misses.

    ``origins`` and ``directions`` are (M, 2), directions of unit length. A ray running along an
    edge needs no case of its own: it meets the neighbouring edges at that edge's ends.
    """
    start = vertices[np.newaxis, :, :]
    edge = (np.roll(vertices, -1, axis=0) - vertices)[np.newaxis, :, :]
    edge_length = np.hypot(edge[..., 0], edge[..., 1])
    origin = origins[:, np.newaxis, :]
    direction = directions[:, np.newaxis, :]
    to_start = start - origin
    # Solve origin + t*direction = start + s*edge with 2-D cross products.
    denom = _cross(direction, edge)
    parallel = np.abs(denom) <= _PARALLEL_SIN * edge_length
    safe = np.where(parallel, 1.0, denom)
    t = _cross(to_start, edge) / safe
    s = _cross(to_start, direction) / safe
    slack = _TOL_M / edge_length
    crossing = ~parallel & (s >= -slack) & (s <= 1.0 + slack) & (t >= -_TOL_M)
    result: FloatArray = np.where(crossing, np.maximum(t, 0.0), np.nan)
    return result


def _last_hit(hits: FloatArray) -> float:
    """Return the largest non-NaN distance in ``hits``, or 0.0 when there is none."""
    found = hits[~np.isnan(hits)]
    return float(found.max()) if found.size else 0.0


def _contains_points(vertices: FloatArray, points: FloatArray) -> BoolArray:
    """Return, for each (M, 2) point, whether it lies inside or on the outline."""
    start = vertices[np.newaxis, :, :]
    edge = (np.roll(vertices, -1, axis=0) - vertices)[np.newaxis, :, :]
    point = points[:, np.newaxis, :]
    # On the outline: within tolerance of the nearest point of some edge.
    along = np.clip(np.sum((point - start) * edge, axis=-1) / np.sum(edge * edge, axis=-1),
                    0.0, 1.0)
    gap = point - (start + along[..., np.newaxis] * edge)
    on_outline = np.any(np.hypot(gap[..., 0], gap[..., 1]) <= _TOL_M, axis=1)
    # Inside: a ray towards +x crosses the outline an odd number of times (even-odd rule).
    y0 = start[..., 1]
    y1 = y0 + edge[..., 1]
    py = point[..., 1]
    straddles = (y0 > py) != (y1 > py)
    rise = np.where(straddles, edge[..., 1], 1.0)
    x_at = start[..., 0] + (py - y0) * edge[..., 0] / rise
    crossings = np.sum(straddles & (point[..., 0] < x_at), axis=1)
    result: BoolArray = on_outline | (crossings % 2 == 1)
    return result


def _in_corridor(vertices: FloatArray, points: FloatArray, travel: FloatArray) -> BoolArray:
    """Return, for each (M, 2) point, whether it is outside the outline but swept by it."""
    back = np.broadcast_to(-travel, points.shape)
    swept = ~np.all(np.isnan(_ray_boundary_hits(vertices, points, back)), axis=1)
    result: BoolArray = swept & ~_contains_points(vertices, points)
    return result


def _probe_distances(vertices: FloatArray, origin: FloatArray, direction: FloatArray,
                     travel: FloatArray, max_range_m: float, samples: int) -> FloatArray:
    """Return distances (m) along one beam ray at which :func:`covers_heading` probes."""
    hits = _ray_boundary_hits(vertices, origin[np.newaxis], direction[np.newaxis])[0]
    start = _last_hit(hits)
    if start >= max_range_m:
        return np.zeros(0)
    breaks = [hits[~np.isnan(hits)]]
    denom = float(_cross(direction, travel))
    if abs(denom) > _PARALLEL_SIN:
        # Where the ray crosses the line through each vertex along the travel direction.
        breaks.append(_cross(vertices - origin, travel) / denom)
    inner = np.concatenate(breaks)
    inner = inner[(inner > start) & (inner < max_range_m)]
    bounds = np.unique(np.concatenate(([start], inner, [max_range_m])))
    midpoints = (bounds[:-1] + bounds[1:]) / 2.0
    even = start + (max_range_m - start) * np.arange(1, samples + 1) / samples
    distances: FloatArray = np.concatenate((even, midpoints))
    return distances


def _spread_across_line(points: FloatArray) -> float:
    """Return how far (m, RMS-like) the points stray from their best-fit line; 0 if collinear."""
    centred = points - points.mean(axis=0)
    singular = np.linalg.svd(centred, compute_uv=False)
    return float(singular[1]) if len(singular) > 1 else 0.0


def _edge_clashes(points: FloatArray, labels: npt.NDArray[np.intp]) -> list[str]:
    """Describe every pair of edges that cross, touch or overlap; edge i starts at labels[i]."""
    count = len(points)
    clashes: list[str] = []
    for i in range(count):
        a, b = points[i], points[(i + 1) % count]
        for j in range(i + 1, count):
            c, d = points[j], points[(j + 1) % count]
            names = f'edges {labels[i]} and {labels[j]}'
            if j == i + 1 or (i == 0 and j == count - 1):
                # Neighbours share one point; they clash only by doubling back over each other.
                if _doubles_back(*_shared_corner(a, b, c, d, b_is_c=j == i + 1)):
                    clashes.append(f'{names} overlap')
                continue
            contact = _segment_contact(a, b, c, d)
            if contact:
                clashes.append(f'{names} {contact}')
    return clashes


def _shared_corner(a: FloatArray, b: FloatArray, c: FloatArray, d: FloatArray, *,
                   b_is_c: bool) -> tuple[FloatArray, FloatArray, FloatArray]:
    """Return (before, corner, after) for neighbouring edges a-b and c-d (b is c, or d is a)."""
    return (a, b, d) if b_is_c else (c, a, b)


def _doubles_back(before: FloatArray, corner: FloatArray, after: FloatArray) -> bool:
    """Tell whether the outline reverses along one line at ``corner``."""
    incoming = corner - before
    outgoing = after - corner
    scale = float(np.hypot(*incoming) * np.hypot(*outgoing))
    return (abs(float(_cross(incoming, outgoing))) <= _PARALLEL_SIN * scale
            and float(np.dot(incoming, outgoing)) < 0.0)


def _side(a: FloatArray, b: FloatArray, p: FloatArray) -> int:
    """Return +1, -1 or 0 as p lies left of, right of, or on the line through a and b."""
    length = float(np.hypot(*(b - a)))
    area = float(_cross(b - a, p - a))
    if abs(area) <= _TOL_M * length:
        return 0
    return 1 if area > 0.0 else -1


def _within_box(a: FloatArray, b: FloatArray, p: FloatArray) -> bool:
    """Tell whether p lies in the axis-aligned box spanned by a and b (with tolerance)."""
    low = np.minimum(a, b) - _TOL_M
    high = np.maximum(a, b) + _TOL_M
    return bool(np.all(low <= p) and np.all(p <= high))


def _segment_contact(a: FloatArray, b: FloatArray, c: FloatArray, d: FloatArray) -> str:
    """Return 'cross', 'touch' or '' for segments a-b and c-d."""
    s1, s2 = _side(a, b, c), _side(a, b, d)
    s3, s4 = _side(c, d, a), _side(c, d, b)
    if s1 * s2 < 0 and s3 * s4 < 0:
        return 'cross'
    touching = ((s1 == 0 and _within_box(a, b, c)) or (s2 == 0 and _within_box(a, b, d))
                or (s3 == 0 and _within_box(c, d, a)) or (s4 == 0 and _within_box(c, d, b)))
    return 'touch' if touching else ''

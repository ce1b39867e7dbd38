"""The robot's outline in base_link: a simple polygon, its checks and plane geometry on it.

The footprint is given flat as ``[x0, y0, x1, y1, ...]`` metres (ROS 2 parameters cannot nest
arrays). Edge ``i`` joins point ``i`` to the next point and the last edge closes the outline
back to point 0, so the first point is not repeated at the end. Points within 1e-9 m of the
outline count as on it.
"""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

__all__ = ['Footprint', 'polygon_problems']

FloatArray = npt.NDArray[np.float64]
BoolArray = npt.NDArray[np.bool_]

# Points this close to an edge count as on it; also the tolerance for "same point" (m).
_TOL_M = 1e-9
# Below this |sin| of the angle between a ray and an edge, they are treated as parallel.
_PARALLEL_SIN = 1e-12


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
        return bool(contains_points(self.points, point[np.newaxis])[0])

    def exit_distance(self, origin_xy: npt.ArrayLike, direction_xy: npt.ArrayLike) -> float:
        """Return the distance (m) along the ray to where it leaves the outline for the last time.

        ``direction_xy`` need not be a unit vector; the result is in metres regardless. The ray
        from an inside origin always leaves; from an outside origin it may pass through the
        footprint (then the far side counts) or never meet it, which gives 0.0. An origin on the
        outline facing out also gives 0.0.
        """
        origin = _xy(origin_xy, 'origin_xy')
        direction = _unit(direction_xy, 'direction_xy')
        hits = ray_boundary_hits(self.points, origin[np.newaxis], direction[np.newaxis])
        return last_hit(hits[0])


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


def cross2(a: FloatArray, b: FloatArray) -> FloatArray:
    """Return the z component of a x b over the last axis (2-vectors, broadcast)."""
    result: FloatArray = a[..., 0] * b[..., 1] - a[..., 1] * b[..., 0]
    return result


def ray_boundary_hits(vertices: FloatArray, origins: FloatArray,
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
    denom = cross2(direction, edge)
    parallel = np.abs(denom) <= _PARALLEL_SIN * edge_length
    safe = np.where(parallel, 1.0, denom)
    t = cross2(to_start, edge) / safe
    s = cross2(to_start, direction) / safe
    slack = _TOL_M / edge_length
    crossing = ~parallel & (s >= -slack) & (s <= 1.0 + slack) & (t >= -_TOL_M)
    result: FloatArray = np.where(crossing, np.maximum(t, 0.0), np.nan)
    return result


def last_hit(hits: FloatArray) -> float:
    """Return the largest non-NaN distance in ``hits``, or 0.0 when there is none."""
    found = hits[~np.isnan(hits)]
    return float(found.max()) if found.size else 0.0


def contains_points(vertices: FloatArray, points: FloatArray) -> BoolArray:
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
    return (abs(float(cross2(incoming, outgoing))) <= _PARALLEL_SIN * scale
            and float(np.dot(incoming, outgoing)) < 0.0)


def _side(a: FloatArray, b: FloatArray, p: FloatArray) -> int:
    """Return +1, -1 or 0 as p lies left of, right of, or on the line through a and b."""
    length = float(np.hypot(*(b - a)))
    area = float(cross2(b - a, p - a))
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

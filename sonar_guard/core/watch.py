"""What no sonar cone watches: the path of straight travel and the ring that turning sweeps.

Frames and units as in :mod:`sonar_guard.core.geometry` (REP 103): ``base_link`` x forward,
y left, metres, radians counter-clockwise from +x; a travel heading is the direction of the
robot's velocity (0 forward, pi reverse).

A *cone* here is the closed sector of full angle ``field_of_view_rad`` about the mount's yaw,
with its apex at the mount and radius ``max_range_m``; a point on its edge counts as inside.
Two things are deliberately not cut out of it: the blind range (the engine takes a blind
reading as an obstacle at 0 m, so the near part of a cone does bound the limit) and the
footprint (it is a keep-out outline, often padded, with sensors on or just inside it, not the
body that would shadow a beam).

Everything is exact plane geometry, up to 1e-9 m. Whether a line (a cross-section of the path,
a ray from base_link) is watched is decided from the intervals in which it meets each cone
(a disc intersected with two half-planes). The answer can only change where the line passes
a point at which two boundary curves cross, a cone's apex or corner, or where it touches a
circle: a sweep over those *events* (the plane-sweep argument, de Berg et al.,
Computational Geometry, ch. 2) tests the open stretch between two events at its middle and
is exact for the whole stretch. Single lines at events do not count either way: a watched
stretch, or an unwatched sector, has positive length.
"""
from __future__ import annotations

from collections.abc import Callable, Iterable, Sequence
import math
from typing import NamedTuple

import numpy as np
import numpy.typing as npt

from sonar_guard.core.config import Config
from sonar_guard.core.geometry import (
    Footprint,
    Mount,
    beam_axis,
    coverage,
    heading_name,
    uniform_headings,
)

__all__ = [
    'SweptBand',
    'full_width_from_m',
    'full_width_stretches',
    'in_some_cone',
    'swept_band',
    'turn_annulus_m',
    'unwatched_lines',
    'unwatched_turn_sectors',
    'watch_headings',
]

FloatArray = npt.NDArray[np.float64]
BoolArray = npt.NDArray[np.bool_]
Point = tuple[float, float]
Interval = tuple[float, float]

_TAU = 2.0 * math.pi
_TOL_M = 1e-9  # gaps and lengths this small (m or rad) count as none, as in geometry
_PARALLEL = 1e-12  # |sin| below which two directions are taken as parallel
_LINE_HEADINGS = 72  # 5 degree steps for "which headings does nothing watch" (as plots.py)


class SweptBand(NamedTuple):
    """The corridor straight travel along one heading sweeps, in its own coordinates (m).

    ``lead_m`` is where the footprint's leading edge sits along the heading (the support line:
    the largest projection of a footprint point onto the heading's unit vector ``u``);
    ``low_m`` and ``high_m`` bound the swept width along ``n = (-sin h, cos h)`` (u turned
    +90 deg, to the robot's left for forward travel). A point p lies ``p.u - lead_m`` ahead of
    the leading edge and at ``p.n`` across.
    """

    lead_m: float
    low_m: float
    high_m: float

    @property
    def width_m(self) -> float:
        """Return the swept width (m)."""
        return self.high_m - self.low_m


class _Cone(NamedTuple):
    apex: Point
    low: Point  # unit vector of the clockwise edge (yaw - fov/2)
    high: Point  # unit vector of the counter-clockwise edge (yaw + fov/2)
    range_m: float
    reflex: bool  # fov > pi: the wedge is the union of the two half-planes, not the meet


# ------------------------------------------------------------------ public functions


def swept_band(footprint: Footprint, heading_rad: float) -> SweptBand:
    """Return the leading edge and the swept width of straight travel along a heading (m)."""
    u, n = _heading_frame(heading_rad)
    points = np.asarray(footprint.points, dtype=float)
    along = points @ np.array(u)
    across = points @ np.array(n)
    return SweptBand(float(along.max()), float(across.min()), float(across.max()))


def full_width_stretches(mounts: Sequence[Mount], footprint: Footprint,
                         heading_rad: float) -> list[Interval]:
    """Return the stretches (start, end), m ahead of the leading edge, watched across the width.

    Straight travel along ``heading_rad`` sweeps the band between the two support lines of
    the footprint parallel to the heading (:func:`swept_band`). The cross-section at distance
    ``d >= 0`` ahead of the leading edge is the segment across that band; it is *watched* when
    every point of it lies inside some cone. The stretches are the maximal intervals of ``d``
    whose cross-sections are all watched, nearest first, each of positive length. Beyond the
    last one no cross-section is watched: the cones' range has ended.
    """
    u, n = _heading_frame(heading_rad)
    band = swept_band(footprint, heading_rad)
    cones = _cones(mounts)
    if not cones:
        return []
    reach = max(_dot(c.apex, u) + c.range_m for c in cones) - band.lead_m
    if reach <= 0.0:
        return []
    points = list(_cone_points(cones, extreme_along=u))
    lines = [*_cone_lines(cones),
             ((band.low_m * n[0], band.low_m * n[1]), u),
             ((band.high_m * n[0], band.high_m * n[1]), u)]
    points += _crossings(lines, [(c.apex, c.range_m) for c in cones])
    cuts = [_dot(p, u) - band.lead_m for p in points]
    events = _sorted_events([0.0, reach, *[d for d in cuts if 0.0 < d < reach]])

    def watched(d: float) -> bool:
        base = _add(_scale(u, band.lead_m + d), _scale(n, band.low_m))
        pieces = [piece for cone in cones for piece in _line_in_cone(cone, base, n)]
        return _covers(pieces, 0.0, band.width_m)

    return _runs(events, watched)


def full_width_from_m(mounts: Sequence[Mount], footprint: Footprint,
                      heading_rad: float) -> float | None:
    """Return the distance (m) ahead of the leading edge from which on the full width is watched.

    Definition: the start of the last (farthest) stretch of :func:`full_width_stretches`.
    From there on every cross-section of the swept band lies inside the cones, out to where
    the sensors' range ends (the end of that stretch: the cones end at different ranges, so
    "out to max range" means until no cone combination covers the width any more, not the
    farthest point any single cone reaches, which a cone only touches with its tip). None when
    no cross-section within max range is watched.

    Conservative: a gap anywhere before the end, where some cross-section is not watched,
    starts the count again after it, so the answer is never nearer than the true start of
    uninterrupted watching; the stretches are exact (see the module docstring), not sampled.
    """
    stretches = full_width_stretches(mounts, footprint, heading_rad)
    return stretches[-1][0] if stretches else None


def turn_annulus_m(footprint: Footprint) -> tuple[float, float]:
    """Return the inner and outer radius (m) of the ring that turning in place sweeps.

    Outer: the circumscribed circle about base_link (the farthest footprint vertex). Inner: the
    inscribed circle about base_link (its distance to the outline), 0 when base_link lies
    outside the footprint. Nothing within the inner radius ever leaves the footprint.
    """
    points = np.asarray(footprint.points, dtype=float)
    outer = float(np.hypot(points[:, 0], points[:, 1]).max())
    if not footprint.contains(0.0, 0.0):
        return 0.0, outer
    ends = np.roll(points, -1, axis=0)
    edge = ends - points
    along = np.clip(-(points * edge).sum(axis=1) / (edge * edge).sum(axis=1), 0.0, 1.0)
    nearest = points + along[:, np.newaxis] * edge
    return float(np.hypot(nearest[:, 0], nearest[:, 1]).min()), outer


def unwatched_turn_sectors(mounts: Sequence[Mount], footprint: Footprint) -> list[Interval]:
    """Return the sectors (start, end) in rad about base_link of the turning ring no cone watches.

    The ring lies between :func:`turn_annulus_m`'s radii; its part outside the footprint is
    what turning in place sweeps into. A direction ``phi`` is watched when the ray from
    base_link along it meets, within the ring and outside the footprint, a stretch of positive
    length inside some cone; the sectors returned are the directions that are not. A watched
    direction may still have points near the body between cones that no cone sees (cones are
    narrow near their apex): this lists only directions nothing looks into at all.

    Each sector runs counter-clockwise from ``start`` in [-pi, pi) to ``end > start``; one that
    crosses the rear (+-pi) is a single sector with ``end > pi``. ``[(-pi, pi)]`` when no cone
    looks into the ring anywhere; sorted by start.
    """
    inner, outer = turn_annulus_m(footprint)
    cones = _cones(mounts)
    if not cones:
        return [(-math.pi, math.pi)]
    vertices = [(float(x), float(y)) for x, y in np.asarray(footprint.points, dtype=float)]
    edges = list(zip(vertices, vertices[1:] + vertices[:1]))
    circles = [(c.apex, c.range_m) for c in cones] + [((0.0, 0.0), outer)]
    if inner > 0.0:
        circles.append(((0.0, 0.0), inner))
    lines = _cone_lines(cones) + [(a, _unit(_sub(b, a))) for a, b in edges]
    points = list(_cone_points(cones)) + vertices + _crossings(lines, circles)
    angles = [math.atan2(y, x) for x, y in points if math.hypot(x, y) > _TOL_M]
    for _, (dx, dy) in lines:  # a ray parallel to a line stops meeting it there
        angles += [math.atan2(dy, dx), math.atan2(-dy, -dx)]
    for (cx, cy), radius in circles:  # a ray from base_link touching a circle
        centre = math.hypot(cx, cy)
        if centre > _TOL_M:
            spread = math.asin(min(radius / centre, 1.0))
            angles += [math.atan2(cy, cx) + spread, math.atan2(cy, cx) - spread]
    wrapped = [math.remainder(a, _TAU) for a in angles]
    events = _sorted_events([-math.pi, math.pi,
                             *[a for a in wrapped if -math.pi < a < math.pi]])

    def blind(phi: float) -> bool:
        return not _ray_watched(cones, footprint, edges, phi, inner, outer)

    sectors = _runs(events, blind)
    if len(sectors) > 1 and sectors[0][0] == -math.pi and sectors[-1][1] == math.pi:
        first, last = sectors.pop(0), sectors.pop()
        sectors.append((last[0], first[1] + _TAU))
    return sorted(sectors)


def in_some_cone(mounts: Sequence[Mount], points_xy: npt.ArrayLike) -> BoolArray:
    """Return, for each (N, 2) base_link point (m), whether it lies inside some cone."""
    points = np.asarray(points_xy, dtype=float).reshape(-1, 2)
    inside = np.zeros(len(points), dtype=bool)
    for mount in mounts:
        if mount.field_of_view_rad <= 0.0:
            continue
        offset = points - np.array([mount.x_m, mount.y_m])
        distance = np.hypot(offset[:, 0], offset[:, 1])
        # the angle to the axis is at most fov/2 exactly when its cosine is at least cos(fov/2)
        # (acos falls monotonically on [-1, 1]; this holds for cones wider than half a turn too)
        cos_half = math.cos(mount.field_of_view_rad / 2.0)
        inside |= ((distance <= mount.max_range_m + _TOL_M)
                   & (offset @ beam_axis(mount) >= distance * cos_half - _TOL_M))
    return inside


def watch_headings(config: Config) -> tuple[float, ...]:
    """Return the headings (rad) a base drives: forward and reverse; every 45 deg if holonomic."""
    if config.robot.holonomic:
        return tuple(float(h) for h in uniform_headings(8))
    return (0.0, math.pi)


def unwatched_lines(config: Config) -> list[str]:
    """Return plain sentences on what no cone watches, for a once-at-startup log.

    Which driven headings no sensor covers at all; per heading of :func:`watch_headings`, from
    which distance the full swept width is watched (and what is not); which directions of the
    turning ring no cone looks into; and what each means for the speed limit.
    """
    mounts = [Mount(s.x_m, s.y_m, s.z_m, s.yaw_rad, s.field_of_view_rad, s.max_range_m)
              for s in config.sensors]
    footprint = config.robot.footprint
    fallback = min(config.limits.fallback_speed_mps, config.limits.max_speed_mps)
    lines: list[str] = []
    headings = watch_headings(config)
    covered = _covered(mounts, footprint, headings)
    if config.robot.holonomic:
        every = uniform_headings(_LINE_HEADINGS)
        gaps = [float(h) for h, c in zip(every, _covered(mounts, footprint, every)) if not c]
        if gaps:
            spans = _degree_spans(_runs_of(gaps, _TAU / _LINE_HEADINGS))
            lines.append(f'no sensor covers travel headings {spans} '
                         f'({360 // _LINE_HEADINGS} deg steps): the engine allows only '
                         f'limits.fallback_speed ({fallback:.2f} m/s) along them.')
    for heading, seen in zip(headings, covered):
        name = heading_name(heading)
        if not seen:
            lines.append(f'{name}: no sensor covers this heading at all: the engine allows '
                         f'only limits.fallback_speed ({fallback:.2f} m/s) along it.')
            continue
        lines.append(_full_width_line(name, _EDGES.get(name, 'leading edge'),
                                      swept_band(footprint, heading).width_m,
                                      full_width_stretches(mounts, footprint, heading)))
    inner, outer = turn_annulus_m(footprint)
    sectors = unwatched_turn_sectors(mounts, footprint)
    ring = f'the ring between {inner:.2f} m and {outer:.2f} m from base_link'
    if sectors:
        where = ('in any direction' if sectors[0][1] - sectors[0][0] >= _TAU - _TOL_M
                 else f'at {_degree_spans(sectors)}')
        lines.append(f'turning in place: no cone looks into {ring} (what the footprint sweeps) '
                     f'{where}: an obstacle there is hit without being seen; the turn limit '
                     f'cannot account for it.')
    else:
        lines.append(f'turning in place: some cone looks into {ring} in every direction; '
                     f'points near the body between cones may still go unseen.')
    return lines


# ------------------------------------------------------------------ sentences

_EDGES = {'forward': 'front edge', 'reverse': 'rear edge', 'left': 'left side',
          'right': 'right side'}


def _full_width_line(name: str, edge: str, width_m: float, stretches: list[Interval]) -> str:
    """Return the sentence on where the full width of one heading's path is watched."""
    what = ('an obstacle there is seen only once it is inside a cone; the limit cannot '
            'account for it.')
    if not stretches:
        return (f'{name}: the cones together never span the full {width_m:.2f} m width of '
                f'the path within max range: an obstacle in the path may be seen late or not '
                f'at all; the limit cannot account for it.')
    spans = ' and '.join(f'from {a:.2f} m to {b:.2f} m' for a, b in stretches)
    said = (f'{name}: the full {width_m:.2f} m width of the path is watched {spans} beyond '
            f"the footprint's {edge}")
    gaps = [f'between {b:.2f} m and {a:.2f} m' for (_, b), (a, _) in zip(stretches, stretches[1:])]
    near = stretches[0][0]
    missing = []
    if f'{near:.2f}' != '0.00':
        missing.append(f'the {near:.2f} m nearest it')
    if gaps:
        missing.append(', '.join(gaps))
    if not missing:
        return f'{said}.'
    return f"{said}; nothing watches {' nor '.join(missing)} across the full width: {what}"


def _degree_spans(sectors: Iterable[Interval]) -> str:
    """Return sectors (rad) as 'a to b deg' pieces, a in [-180, 180] and b = a + width.

    Whole degrees; tenths where whole degrees would show a sector as a single angle; a
    sector of no width (a single heading) as 'a deg'.
    """
    parts = []
    for start, end in sectors:
        a = math.degrees(math.remainder(start, _TAU))
        b = a + math.degrees(end - start)
        if end - start <= _TOL_M:
            parts.append(f'{a:.0f} deg')
            continue
        digits = 0 if f'{a:.0f}' != f'{b:.0f}' else 1
        parts.append(f'{a:.{digits}f} to {b:.{digits}f} deg')
    return ', '.join(parts)


def _runs_of(headings: list[float], step: float) -> list[Interval]:
    """Group evenly spaced headings (rad, ascending) into (first, last) runs; wraps at 2*pi."""
    runs: list[list[float]] = []
    for h in headings:
        if runs and h - runs[-1][1] <= step * 1.5:
            runs[-1][1] = h
        else:
            runs.append([h, h])
    if len(runs) > 1 and runs[0][0] <= _TOL_M and runs[-1][1] >= _TAU - step * 1.5:
        last = runs.pop()
        runs[0][0] = last[0] - _TAU
    return [(a, b) for a, b in runs]


def _covered(mounts: Sequence[Mount], footprint: Footprint,
             headings: Sequence[float] | FloatArray) -> list[bool]:
    """Tell per heading whether some sensor covers it (geometry.coverage)."""
    if not mounts:
        return [False] * len(headings)
    table = coverage(list(mounts), footprint, np.asarray(headings, dtype=float))
    return [bool(row.any()) for row in table]


# ------------------------------------------------------------------ exact plane geometry


def _heading_frame(heading_rad: float) -> tuple[Point, Point]:
    """Return the unit vector along a heading (rad) and the one 90 deg counter-clockwise."""
    heading = float(heading_rad)
    if not math.isfinite(heading):
        raise ValueError(f'heading_rad must be finite: {heading_rad!r}')
    c, s = math.cos(heading), math.sin(heading)
    return (c, s), (-s, c)


def _cones(mounts: Sequence[Mount]) -> list[_Cone]:
    """Return the cones of the mounts; a zero field of view watches no area and is left out."""
    cones = []
    for m in mounts:
        if m.field_of_view_rad <= 0.0:
            continue
        half = m.field_of_view_rad / 2.0
        low = (math.cos(m.yaw_rad - half), math.sin(m.yaw_rad - half))
        high = (math.cos(m.yaw_rad + half), math.sin(m.yaw_rad + half))
        cones.append(_Cone((m.x_m, m.y_m), low, high, m.max_range_m,
                           m.field_of_view_rad > math.pi))
    return cones


def _cone_lines(cones: Sequence[_Cone]) -> list[tuple[Point, Point]]:
    """Return each cone's two edges as whole lines (point, unit direction)."""
    return [(c.apex, e) for c in cones for e in (c.low, c.high)]


def _cone_points(cones: Sequence[_Cone], extreme_along: Point | None = None) -> Iterable[Point]:
    """Yield each cone's apex and corners, and its circle's extremes along a direction."""
    for c in cones:
        yield c.apex
        yield _add(c.apex, _scale(c.low, c.range_m))
        yield _add(c.apex, _scale(c.high, c.range_m))
        if extreme_along is not None:
            yield _add(c.apex, _scale(extreme_along, c.range_m))
            yield _add(c.apex, _scale(extreme_along, -c.range_m))


def _crossings(lines: Sequence[tuple[Point, Point]],
               circles: Sequence[tuple[Point, float]]) -> list[Point]:
    """Return every point where two of the lines and circles cross or touch."""
    found: list[Point] = []
    for i, (p, v) in enumerate(lines):
        for q, w in lines[i + 1:]:
            denom = _cross(v, w)
            if abs(denom) > _PARALLEL:
                found.append(_add(p, _scale(v, _cross(_sub(q, p), w) / denom)))
        for centre, radius in circles:
            found += [_add(p, _scale(v, t)) for t in _line_circle(p, v, centre, radius)]
    for i, (c1, r1) in enumerate(circles):
        for c2, r2 in circles[i + 1:]:
            found += _circle_circle(c1, r1, c2, r2)
    return found


def _line_circle(p: Point, v: Point, centre: Point, radius: float) -> list[float]:
    """Return the parameters t at which p + t*v (v unit) meets the circle (touching included)."""
    w = _sub(p, centre)
    b = _dot(w, v)
    disc = b * b - (_dot(w, w) - radius * radius)
    if disc < -_PARALLEL:
        return []
    root = math.sqrt(max(disc, 0.0))
    return [-b - root, -b + root]


def _circle_circle(c1: Point, r1: float, c2: Point, r2: float) -> list[Point]:
    """Return the points where two circles cross or touch (none for concentric circles)."""
    gap = _sub(c2, c1)
    d = math.hypot(*gap)
    if d <= _TOL_M or d > r1 + r2 + _TOL_M or d < abs(r1 - r2) - _TOL_M:
        return []
    a = (r1 * r1 - r2 * r2 + d * d) / (2.0 * d)
    h = math.sqrt(max(r1 * r1 - a * a, 0.0))
    mid = _add(c1, _scale(gap, a / d))
    across = (-gap[1] / d, gap[0] / d)
    return [_add(mid, _scale(across, h)), _add(mid, _scale(across, -h))]


def _line_in_cone(cone: _Cone, p: Point, v: Point) -> list[Interval]:
    """Return the intervals of t at which p + t*v (v unit) lies inside the cone."""
    w = _sub(p, cone.apex)
    disc = _line_circle(p, v, cone.apex, cone.range_m)
    if not disc:
        return []
    lo, hi = disc
    # left of the clockwise edge: cross(low, q - apex) >= 0; right of the other: the reverse
    left = _half_line(_cross(cone.low, w), _cross(cone.low, v))
    right = _half_line(_cross(w, cone.high), _cross(v, cone.high))
    if cone.reflex:
        pieces = [h for h in (left, right) if h is not None]
    elif left is None or right is None:
        pieces = []
    else:
        pieces = [(max(left[0], right[0]), min(left[1], right[1]))]
    return [(max(lo, a), min(hi, b)) for a, b in pieces if max(lo, a) <= min(hi, b)]


def _half_line(alpha: float, beta: float) -> Interval | None:
    """Return the interval of t with alpha + beta*t >= 0 (None when empty)."""
    if abs(beta) <= _PARALLEL:
        return (-math.inf, math.inf) if alpha >= -_TOL_M else None
    root = -alpha / beta
    return (root, math.inf) if beta > 0.0 else (-math.inf, root)


def _covers(pieces: Sequence[Interval], lo: float, hi: float) -> bool:
    """Tell whether the union of the intervals covers [lo, hi], gaps up to 1e-9 forgiven."""
    reach = lo
    for a, b in sorted(pieces):
        if a > reach + _TOL_M:
            break
        reach = max(reach, b)
    return reach >= hi - _TOL_M


def _ray_watched(cones: Sequence[_Cone], footprint: Footprint,
                 edges: Sequence[tuple[Point, Point]], phi: float, inner: float,
                 outer: float) -> bool:
    """Tell whether the ray from base_link along phi meets a cone in the ring, off the body."""
    v = (math.cos(phi), math.sin(phi))
    origin = (0.0, 0.0)
    pieces = [(max(a, inner), min(b, outer)) for cone in cones
              for a, b in _line_in_cone(cone, origin, v)]
    pieces = [(a, b) for a, b in pieces if b - a > _TOL_M]
    if not pieces:
        return False
    cuts = [inner, outer, *[x for piece in pieces for x in piece]]
    for start, end in edges:  # where the ray crosses the outline
        edge = _sub(end, start)
        denom = _cross(v, edge)
        if abs(denom) > _PARALLEL:
            along = _cross(start, v) / denom  # 0..1 along the edge; the ray starts at (0, 0)
            if -_TOL_M <= along <= 1.0 + _TOL_M:
                cuts.append(_cross(start, edge) / denom)
    cuts = sorted(x for x in cuts if inner <= x <= outer)
    for near, far in zip(cuts, cuts[1:]):
        if far - near <= _TOL_M:
            continue
        mid = (near + far) / 2.0
        if (any(lo <= mid <= hi for lo, hi in pieces)
                and not footprint.contains(mid * v[0], mid * v[1])):
            return True
    return False


def _sorted_events(values: Iterable[float]) -> list[float]:
    """Return the values sorted, with values within 1e-9 of the one before dropped."""
    events: list[float] = []
    for x in sorted(values):
        if not events or x - events[-1] > _TOL_M:
            events.append(x)
    return events


def _runs(events: Sequence[float], holds: Callable[[float], bool]) -> list[Interval]:
    """Return the maximal runs of open intervals between events where ``holds(middle)``."""
    runs: list[Interval] = []
    for a, b in zip(events, events[1:]):
        if not holds((a + b) / 2.0):
            continue
        if runs and runs[-1][1] == a:
            runs[-1] = (runs[-1][0], b)
        else:
            runs.append((a, b))
    return runs


def _unit(v: Point) -> Point:
    length = math.hypot(*v)
    return (v[0] / length, v[1] / length)


def _add(a: Point, b: Point) -> Point:
    return (a[0] + b[0], a[1] + b[1])


def _sub(a: Point, b: Point) -> Point:
    return (a[0] - b[0], a[1] - b[1])


def _scale(a: Point, k: float) -> Point:
    return (a[0] * k, a[1] * k)


def _dot(a: Point, b: Point) -> float:
    return a[0] * b[0] + a[1] * b[1]


def _cross(a: Point, b: Point) -> float:
    return a[0] * b[1] - a[1] * b[0]

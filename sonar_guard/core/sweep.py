"""How far the robot can move along its path before its footprint comes near a point.

The robot moves along a path given in ``base_link`` (REP 103: x forward, y left): its body
velocity points along heading ``h`` (0 forward, pi reverse; any heading for a holonomic base)
and it turns at ``k`` rad per metre of base_link path (signed curvature, k > 0 turns left). A
point fixed in the world then moves, seen from the robot, on a circle about the
instantaneous centre of rotation ``c = (1/k) * (-sin h, cos h)`` (reference.md sec. 7 for
h = 0), or on a straight line against the heading when k = 0. Turning in place rotates the
world about base_link's origin.

:func:`contact_path_length` and :func:`contact_turn_angle` return, per point, the base_link
path length (m) or the rotation angle (rad) at which the point first comes within ``margin``
(Euclidean) of the footprint polygon: 0 when it is within already, inf when never (within one
full turn). Within ``margin`` of the polygon is the union of capsules around its edges, so
the first contact is the first crossing of a capsule's boundary: one of its two offset sides
or one of its two end circles. Everything is solved in closed form (line or circle against
segment or circle) and vectorised over points and edges.
"""
from __future__ import annotations

import math

import numpy as np
import numpy.typing as npt

__all__ = ['STRAIGHT_CURVATURE_1PM', 'contact_path_length', 'contact_turn_angle',
           'distance_to_polygon']

FloatArray = npt.NDArray[np.float64]

STRAIGHT_CURVATURE_1PM = 1e-6
"""Below this |curvature| (1/m) a path is solved as straight (4 m off by < 0.01 mm)."""

_TAU = 2.0 * math.pi
_EPS = 1e-12
_SLACK = 1e-9  # grazing contacts (a circle through a vertex) count, despite rounding


def distance_to_polygon(points: FloatArray, vertices: FloatArray) -> FloatArray:
    """Return each point's distance (m) to the polygon: 0 inside or on it, else to its edges."""
    p = np.asarray(points, dtype=np.float64).reshape(-1, 2)
    a = vertices[np.newaxis, :, :]
    edge = (np.roll(vertices, -1, axis=0) - vertices)[np.newaxis, :, :]
    rel = p[:, np.newaxis, :] - a
    t = np.clip(np.sum(rel * edge, axis=-1) / np.sum(edge * edge, axis=-1), 0.0, 1.0)
    gap = rel - t[..., np.newaxis] * edge
    dist = np.sqrt(np.min(np.sum(gap * gap, axis=-1), axis=1))
    y0, y1 = a[..., 1], a[..., 1] + edge[..., 1]
    py = p[:, np.newaxis, 1]
    straddle = (y0 > py) != (y1 > py)
    rise = np.where(straddle, edge[..., 1], 1.0)
    x_at = a[..., 0] + (py - y0) * edge[..., 0] / rise
    inside = np.sum(straddle & (p[:, np.newaxis, 0] < x_at), axis=1) % 2 == 1
    result: FloatArray = np.where(inside, 0.0, dist)
    return result


def _margins(margin: float | FloatArray, count: int) -> FloatArray:
    m = np.broadcast_to(np.asarray(margin, dtype=np.float64), (count,))
    return np.asarray(m, dtype=np.float64)


def _edges(vertices: FloatArray) -> tuple[FloatArray, FloatArray, FloatArray, FloatArray]:
    """Return edge starts (E, 2), unit directions (E, 2), unit left normals (E, 2), lengths."""
    start = np.asarray(vertices, dtype=np.float64)
    edge = np.roll(start, -1, axis=0) - start
    length = np.hypot(edge[:, 0], edge[:, 1])
    unit = edge / length[:, np.newaxis]
    normal = np.stack((-unit[:, 1], unit[:, 0]), axis=1)
    return start, unit, normal, length


def contact_path_length(points: FloatArray, vertices: FloatArray, margin: float | FloatArray,
                        heading_rad: float, curvature_1pm: float) -> FloatArray:
    """Return the base_link path length (m) until each point comes within ``margin`` of the
    footprint, for the path of ``heading_rad`` and ``curvature_1pm`` (see the module doc).

    ``points`` (N, 2) m in base_link now; ``vertices`` (E, 2) the footprint polygon;
    ``margin`` m, one for all or one per point. 0 for points within margin now; inf for points
    the path never brings within margin (an arc is followed for one full turn at most).
    """
    p = np.asarray(points, dtype=np.float64).reshape(-1, 2)
    m = _margins(margin, len(p))
    if len(p) == 0:
        return np.zeros(0)
    k = float(curvature_1pm)
    if abs(k) < STRAIGHT_CURVATURE_1PM:
        direction = np.array([math.cos(heading_rad), math.sin(heading_rad)])
        s = _straight_entry(p, direction, vertices, m)
    else:
        centre = np.array([-math.sin(heading_rad), math.cos(heading_rad)]) / k
        s = _circle_entry(p, centre, k > 0.0, vertices, m) / abs(k)
    s[distance_to_polygon(p, vertices) <= m] = 0.0
    return s


def contact_turn_angle(points: FloatArray, vertices: FloatArray, margin: float | FloatArray,
                       direction: int) -> FloatArray:
    """Return the rotation angle (rad) of a turn in place about base_link's origin until each
    point comes within ``margin`` of the footprint; ``direction`` +1 turns left
    (counter-clockwise), -1 right. 0 within margin now; inf when never."""
    p = np.asarray(points, dtype=np.float64).reshape(-1, 2)
    m = _margins(margin, len(p))
    if len(p) == 0:
        return np.zeros(0)
    phi = _circle_entry(p, np.zeros(2), direction > 0, vertices, m)
    phi[distance_to_polygon(p, vertices) <= m] = 0.0
    return phi


def _straight_entry(p: FloatArray, u: FloatArray, vertices: FloatArray,
                    m: FloatArray) -> FloatArray:
    """Smallest s >= 0 with p - s*u on the boundary of an edge capsule (inf if none)."""
    start, unit, normal, length = _edges(vertices)
    mm = m[:, np.newaxis]
    best = np.full(len(p), np.inf)
    # offset sides: p - s*u = start + side*mm*normal + t*unit, 0 <= t <= length
    denom = u[0] * unit[:, 1] - u[1] * unit[:, 0]  # cross(u, unit), per edge
    ok = np.abs(denom) > _EPS
    safe = np.where(ok, denom, 1.0)
    for side in (1.0, -1.0):
        base = start[np.newaxis] + side * mm[..., np.newaxis] * normal[np.newaxis]  # (N,E,2)
        rel = base - p[:, np.newaxis, :]  # = -s*u - t*unit
        # solve -s*u - t*unit = rel: cross both sides with unit and with u
        s = -(rel[..., 0] * unit[:, 1] - rel[..., 1] * unit[:, 0]) / safe
        t = (rel[..., 0] * u[1] - rel[..., 1] * u[0]) / safe
        hit = ok & (s >= 0.0) & (t >= -_SLACK) & (t <= length + _SLACK)
        best = np.minimum(best, np.where(hit, s, np.inf).min(axis=1))
    # end circles at every vertex: |p - s*u - v|^2 = m^2
    rel = p[:, np.newaxis, :] - start[np.newaxis]  # (N,E,2)
    b = rel[..., 0] * u[0] + rel[..., 1] * u[1]
    c = np.sum(rel * rel, axis=-1) - mm * mm
    disc = b * b - c
    root = np.sqrt(np.maximum(disc, 0.0))
    s1, s2 = b - root, b + root
    first = np.where(s1 >= 0.0, s1, np.where(s2 >= 0.0, 0.0, np.inf))  # s2 >= 0 > s1: inside
    result: FloatArray = np.minimum(best, np.where(disc >= -_SLACK, first, np.inf).min(axis=1))
    return result


def _circle_entry(p: FloatArray, centre: FloatArray, clockwise: bool, vertices: FloatArray,
                  m: FloatArray) -> FloatArray:
    """Smallest rotation angle in [0, 2pi) that brings p, turning about ``centre`` (clockwise
    or counter-clockwise), onto the boundary of an edge capsule (inf if none)."""
    start, unit, normal, length = _edges(vertices)
    mm = m[:, np.newaxis]
    q = p - centre  # (N, 2)
    rho2 = np.sum(q * q, axis=1)[:, np.newaxis]
    alpha0 = np.arctan2(q[:, 1], q[:, 0])[:, np.newaxis]
    candidates: list[FloatArray] = []
    # offset sides: points c + rho*(cos b, sin b) on the line base + t*unit, 0 <= t <= length
    for side in (1.0, -1.0):
        base = start[np.newaxis] + side * mm[..., np.newaxis] * normal[np.newaxis] - centre
        t_mid = -(base[..., 0] * unit[:, 0] + base[..., 1] * unit[:, 1])  # foot of centre
        foot = base + t_mid[..., np.newaxis] * unit
        d2 = np.sum(foot * foot, axis=-1)
        half2 = rho2 - d2
        half = np.sqrt(np.maximum(half2, 0.0))
        for sign in (1.0, -1.0):
            t = t_mid + sign * half
            x = foot + sign * half[..., np.newaxis] * unit
            ok = (half2 >= -_SLACK) & (t >= -_SLACK) & (t <= length + _SLACK)
            candidates.append(np.where(ok, np.arctan2(x[..., 1], x[..., 0]), np.nan))
    # end circles: |c + rho*e(b) - v| = m, v at every vertex
    w = start[np.newaxis] - centre  # (1,E,2) broadcast to (N,E,2) below
    dw2 = np.sum(w * w, axis=-1)
    dw = np.sqrt(dw2)
    beta_v = np.arctan2(w[..., 1], w[..., 0])
    # law of cosines: m^2 = rho^2 + dw^2 - 2 rho dw cos(b - beta_v)
    rho = np.sqrt(rho2)
    with np.errstate(divide='ignore', invalid='ignore'):
        cosine = (rho2 + dw2 - mm * mm) / (2.0 * rho * dw)
    ok = np.isfinite(cosine) & (np.abs(cosine) <= 1.0 + _SLACK)
    spread = np.arccos(np.clip(cosine, -1.0, 1.0))
    for sign in (1.0, -1.0):
        candidates.append(np.where(ok, beta_v + sign * spread, np.nan))
    angles = np.stack(candidates, axis=-1)  # (N, E, C)
    travelled = (alpha0[..., np.newaxis] - angles) if clockwise else (
        angles - alpha0[..., np.newaxis])
    travelled = np.mod(travelled, _TAU)
    best: FloatArray = np.asarray(
        np.min(np.where(np.isnan(angles), np.inf, travelled), axis=(1, 2)), dtype=np.float64)
    return best

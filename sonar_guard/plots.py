"""Draw the sensor layout and safe speed by heading; shared figure helpers and colours.

A recording's series (range, speed, timing) are drawn by :mod:`sonar_guard.recording_plots`.

Top views are in ``base_link`` (REP 103) seen from above: x forward to the right, y left up
the page, metres, equal aspect; headings are counter-clockwise from forward, as in the polar
plot. Figures are built with :class:`matplotlib.figure.Figure` directly, never through pyplot,
so no display and no global backend are needed and nothing stays registered after use.
Text that comes from data (names, paths) is drawn literally: ``$`` never starts mathtext.
"""
from __future__ import annotations

import base64
import functools
import io
import math
from pathlib import Path
from typing import NamedTuple

from matplotlib.axes import Axes
from matplotlib.colors import to_rgba
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch, PathPatch, Polygon, Wedge
from matplotlib.path import Path as DrawnPath
import numpy as np
import numpy.typing as npt

from sonar_guard.core.braking import max_safe_speed
from sonar_guard.core.config import Config
from sonar_guard.core.geometry import coverage, uniform_headings
from sonar_guard.core.monitor import EVENT_KINDS, mount_of
from sonar_guard.core.schedule import Schedule
from sonar_guard.core.watch import (
    full_width_from_m,
    in_some_cone,
    swept_band,
    turn_annulus_m,
    unwatched_turn_sectors,
    watch_headings,
)

__all__ = [
    'COLOURS',
    'EVENT_COLOURS',
    'FloatArray',
    'HeadingSpeeds',
    'UNKNOWN_COLOUR',
    'VERDICT_COLOURS',
    'draw_layout',
    'draw_near_body',
    'draw_speed_polar',
    'figure_png_base64',
    'figure_png_bytes',
    'layout_figure',
    'literal_text',
    'mark_no_data',
    'safe_speed_by_heading',
    'save_layout_png',
    'uncovered_headings',
    'unwatched_path_mask',
]

FloatArray = npt.NDArray[np.float64]

COLOURS: dict[str, str] = {
    'trusted': '#2f9e44',     # sensing that may bound the free distance
    'caution': '#f08c00',     # usable, but look closer
    'untrusted': '#c92a2a',   # sensing that must not bound the free distance
    'silent': '#868e96',      # nothing heard
    'uncovered': '#d6336c',   # a travel heading no beam watches
    'unwatched': '#e8590c',   # path ahead not watched across its full width
    'turn_unwatched': '#862e9c',  # directions of the turning ring no cone looks into
    'beam': '#1c7ed6',        # a sonar's cone
    'body': '#495057',        # the robot's outline and mounts
    'limit': '#1864ab',       # the allowed speed
    'speed': '#212529',       # the measured speed
}
"""Colours named after what they mean in every figure of a report."""

VERDICT_COLOURS: dict[str, str] = {
    'ok': '#2f9e44',        # green
    'no_echo': '#74c0fc',   # light blue
    'blind': '#f59f00',     # amber
    'late': '#a07c1a',      # yellow-brown
    'jump': '#7048e8',      # purple
    'invalid': '#e03131',   # red
    'stale': '#868e96',     # grey
    'stuck': '#8b1a1a',     # dark red
}
"""One colour per reading verdict (``Verdict.value``), shared by every plot and table."""

EVENT_COLOURS: dict[str, str] = {
    **{k: VERDICT_COLOURS[k] for k in EVENT_KINDS if k in VERDICT_COLOURS},
    'slot_clash': '#e64980',
    'overspeed': '#c92a2a',
}
"""One colour per event kind: a verdict's own colour where the kind is a verdict."""

UNKNOWN_COLOUR = '#adb5bd'
_NO_DATA = 'no data'
_HEADINGS = 72  # 5 degree steps, as the engine uses for a holonomic robot
_PATH_HATCH = '////'
_TURN_HATCH = 'xxx'
_MASK_CELLS = 500  # grid cells across the top view for the unwatched path region


# ------------------------------------------------------------------ helpers


def literal_text(text: object) -> str:
    """Return text that matplotlib draws literally (a ``$`` never opens mathtext)."""
    # without an unescaped '$' matplotlib never parses mathtext and shows '\$' as '$'
    return str(text).replace('$', r'\$')


def mark_no_data(ax: Axes, what: str = _NO_DATA) -> None:
    """Write 'no data' across an empty axes."""
    ax.text(0.5, 0.5, what, transform=ax.transAxes, ha='center', va='center',
            color=COLOURS['silent'], fontsize=11, gid='no-data')
    ax.set_yticks([])  # y is never shared between rows, so this hides nothing elsewhere


@functools.lru_cache(maxsize=16)
def _coverage_table(config: Config, count: int) -> npt.NDArray[np.bool_]:
    """Return the (count, sensors) coverage table of ``count`` uniform headings, cached."""
    table = coverage([mount_of(s) for s in config.sensors], config.robot.footprint,
                     uniform_headings(count))
    table.setflags(write=False)
    return table


def uncovered_headings(config: Config, count: int = _HEADINGS) -> FloatArray:
    """Return the headings (rad) of ``uniform_headings(count)`` that no sensor covers."""
    headings = uniform_headings(count)
    if not config.sensors:
        return headings
    return headings[~_coverage_table(config, count).any(axis=1)]


class HeadingSpeeds(NamedTuple):
    """Largest safe speed by travel heading at one free distance."""

    headings_rad: FloatArray  # uniform, counter-clockwise from forward
    speeds_mps: FloatArray  # capped by limits.max_speed; fallback_speed where uncovered
    covered: npt.NDArray[np.bool_]
    latency_s: FloatArray  # worst configured detection latency + reaction time; NaN uncovered


def safe_speed_by_heading(config: Config, free_distance_m: float,
                          count: int = _HEADINGS) -> HeadingSpeeds:
    """Return the largest safe speed (m/s) along each of ``count`` headings at one free distance.

    A covered heading gets ``max_safe_speed(free, worst detection latency of the covering
    sensors + reaction time, decel, margin)`` capped by ``max_speed``; an uncovered one gets
    ``fallback_speed`` (also capped), as the engine does.
    """
    headings = uniform_headings(count)
    robot, lim = config.robot, config.limits
    fallback = min(lim.fallback_speed_mps, lim.max_speed_mps)
    speeds = np.full(count, fallback, dtype=float)
    latency = np.full(count, math.nan, dtype=float)
    covered = np.zeros(count, dtype=bool)
    if not config.sensors:
        return HeadingSpeeds(headings, speeds, covered, latency)
    schedule = Schedule.from_config(config)
    sensor_latency = np.array([schedule.timing(s.name).detection_latency_s
                               for s in config.sensors])
    table = _coverage_table(config, count)
    for i, row in enumerate(table):
        if not row.any():
            continue
        covered[i] = True
        latency[i] = float(sensor_latency[row].max()) + robot.reaction_time_s
        v = max_safe_speed(free_distance_m, latency[i], robot.decel_mps2, lim.margin_m)
        speeds[i] = min(v, lim.max_speed_mps)
    return HeadingSpeeds(headings, speeds, covered, latency)


def _driven_uncovered(config: Config) -> tuple[bool, bool]:
    """Tell whether forward (0 rad) and reverse (pi rad) have no covering sensor."""
    if not config.sensors:
        return (True, True)
    table = _coverage_table(config, 2)  # uniform_headings(2) is (0, pi)
    return (not bool(table[0].any()), not bool(table[1].any()))


# ------------------------------------------------------------------ layout


def unwatched_path_mask(config: Config, x_m: npt.ArrayLike,
                        y_m: npt.ArrayLike) -> npt.NDArray[np.bool_]:
    """Return, on the grid of base_link x and y (m), what straight travel meets unwatched.

    A point is marked when it lies in the path of a driven heading (forward and reverse, every
    45 deg for a holonomic base; :func:`sonar_guard.core.watch.watch_headings`), beyond the
    footprint's leading edge but nearer than where that path starts being watched across its
    full width (``full_width_from_m``; out to the farthest cone when that is None), and in no
    cone. Shape (len(y_m), len(x_m)).
    """
    xs = np.asarray(x_m, dtype=float)
    ys = np.asarray(y_m, dtype=float)
    grid_x, grid_y = np.meshgrid(xs, ys)
    points = np.column_stack((grid_x.ravel(), grid_y.ravel()))
    mounts = [mount_of(s) for s in config.sensors]
    footprint = config.robot.footprint
    in_path = np.zeros(len(points), dtype=bool)
    for heading in watch_headings(config):
        u = np.array([math.cos(heading), math.sin(heading)])
        n = np.array([-u[1], u[0]])
        band = swept_band(footprint, heading)
        upto = full_width_from_m(mounts, footprint, heading)
        if upto is None:  # watched nowhere: the whole path as far as any cone reaches
            upto = max((float(np.dot([m.x_m, m.y_m], u)) + m.max_range_m - band.lead_m
                        for m in mounts), default=math.inf)
        ahead = points @ u - band.lead_m
        across = points @ n
        in_path |= ((ahead >= 0.0) & (ahead <= upto)
                    & (across >= band.low_m) & (across <= band.high_m))
    unseen = in_path.copy()
    unseen[in_path] = ~in_some_cone(mounts, points[in_path])
    mask: npt.NDArray[np.bool_] = unseen.reshape(grid_x.shape)
    return mask


def _cells_path(mask: npt.NDArray[np.bool_], xs: FloatArray, ys: FloatArray,
                step: float) -> DrawnPath | None:
    """Return one path of the marked grid cells (runs along x merged), None when none is."""
    vertices: list[tuple[float, float]] = []
    for row, y in enumerate(ys):
        marked = np.flatnonzero(mask[row])
        if not marked.size:
            continue
        breaks = np.flatnonzero(np.diff(marked) > 1)
        starts = np.concatenate(([marked[0]], marked[breaks + 1]))
        ends = np.concatenate((marked[breaks], [marked[-1]]))
        for a, b in zip(starts, ends):
            x0, x1 = xs[a] - step / 2, xs[b] + step / 2
            y0, y1 = y - step / 2, y + step / 2
            vertices += [(x0, y0), (x1, y0), (x1, y1), (x0, y1), (x0, y0)]
    if not vertices:
        return None
    codes = [DrawnPath.MOVETO, *[DrawnPath.LINETO] * 3, DrawnPath.CLOSEPOLY] * (len(vertices) // 5)
    return DrawnPath(vertices, codes)


def _draw_unwatched(ax: Axes, config: Config, pad: float) -> list[Patch]:
    """Shade the path no cone watches across and the turning ring's unwatched sectors.

    Returns the legend entries of what was drawn.
    """
    handles: list[Patch] = []
    step = 2.0 * pad / _MASK_CELLS
    grid = -pad + step * (np.arange(_MASK_CELLS) + 0.5)
    path = _cells_path(unwatched_path_mask(config, grid, grid), grid, grid, step)
    colour = COLOURS['unwatched']
    if path is not None:
        ax.add_patch(PathPatch(path, facecolor=to_rgba(colour, 0.10), edgecolor=colour,
                               hatch=_PATH_HATCH, linewidth=0.0, zorder=2, gid='unwatched-path'))
        handles.append(Patch(facecolor=to_rgba(colour, 0.10), edgecolor=colour,
                             hatch=_PATH_HATCH, linewidth=0.0,
                             label='path not watched across its full width'))
    mounts = [mount_of(s) for s in config.sensors]
    footprint = config.robot.footprint
    inner, outer = turn_annulus_m(footprint)
    sectors = unwatched_turn_sectors(mounts, footprint)
    colour = COLOURS['turn_unwatched']
    for start, end in sectors:
        ax.add_patch(Wedge((0.0, 0.0), outer, math.degrees(start), math.degrees(end),
                           width=outer - inner, facecolor=to_rgba(colour, 0.10),
                           edgecolor=colour, hatch=_TURN_HATCH, linewidth=0.0, zorder=2,
                           gid='turn-unwatched'))
    if sectors:
        handles.append(Patch(facecolor=to_rgba(colour, 0.10), edgecolor=colour,
                             hatch=_TURN_HATCH, linewidth=0.0,
                             label='turning in place: no cone looks this way'))
    return handles


def draw_layout(ax: Axes, config: Config, *, heading_count: int = _HEADINGS) -> None:
    """Draw the top view: footprint, mounts and beam cones, and the uncovered headings (m).

    x forward points to the right, y left points up. Uncovered travel headings are thin
    wedges on a ring around the footprint. For a robot that only drives forward and reverse,
    those two are marked with arrows and the other headings are drawn faint. Hatched: the
    stretch of each driven heading's path that no cone watches across its full width
    (:func:`unwatched_path_mask`) and the sectors of the ring turning in place sweeps that
    no cone looks into (``core.watch.unwatched_turn_sectors``).
    """
    points = np.asarray(config.robot.footprint.points, dtype=float)
    ax.add_patch(Polygon(points, closed=True, facecolor='#e9ecef', edgecolor=COLOURS['body'],
                         linewidth=1.5, zorder=3, gid='footprint'))
    extent = float(np.abs(points).max())
    for s in config.sensors:
        theta = math.degrees(s.yaw_rad)
        half = math.degrees(s.field_of_view_rad) / 2
        ax.add_patch(Wedge((s.x_m, s.y_m), s.max_range_m, theta - half, theta + half,
                           facecolor=to_rgba(COLOURS['beam'], 0.10),
                           edgecolor=to_rgba(COLOURS['beam'], 0.6), linewidth=0.8, zorder=1,
                           gid='beam'))
        extent = max(extent, abs(s.x_m) + s.max_range_m, abs(s.y_m) + s.max_range_m)
    if config.sensors:
        xs = [s.x_m for s in config.sensors]
        ys = [s.y_m for s in config.sensors]
        ax.plot(xs, ys, 'o', color=COLOURS['body'], markersize=4, zorder=5, gid='mounts')
    for s in config.sensors:
        # the name sits along the beam axis, clear of the crowded mounts at the body edge
        along = 0.85 * s.max_range_m
        lx = s.x_m + along * math.cos(s.yaw_rad)
        ly = s.y_m + along * math.sin(s.yaw_rad)
        ax.annotate(literal_text(s.name), (s.x_m, s.y_m), (lx, ly), fontsize=7, ha='center',
                    va='center', color=COLOURS['body'], zorder=6,
                    bbox={'boxstyle': 'round,pad=0.15', 'facecolor': 'white', 'alpha': 0.8,
                          'edgecolor': 'none'},
                    arrowprops={'arrowstyle': '-', 'color': COLOURS['body'], 'lw': 0.5,
                                'alpha': 0.6})

    radius = float(np.hypot(points[:, 0], points[:, 1]).max())
    ring_in = radius * 1.12
    ring_w = max(0.08 * extent, 0.25 * radius)
    holonomic = config.robot.holonomic
    width = 360.0 / heading_count
    gaps = uncovered_headings(config, heading_count)
    for h in gaps:
        centre = math.degrees(float(h))
        ax.add_patch(Wedge((0.0, 0.0), ring_in + ring_w, centre - width / 2, centre + width / 2,
                           width=ring_w, facecolor=COLOURS['uncovered'], edgecolor='none',
                           alpha=0.85 if holonomic else 0.3, zorder=2, gid='uncovered'))
    handles: list[Patch | Line2D] = [
        Patch(facecolor='#e9ecef', edgecolor=COLOURS['body'], label='footprint'),
        Line2D([], [], marker='o', linestyle='', color=COLOURS['body'], label='sonar mount'),
        Patch(facecolor=to_rgba(COLOURS['beam'], 0.15), edgecolor=COLOURS['beam'],
              label='beam cone (max range)'),
    ]
    if len(gaps):
        faint = '' if holonomic else ' (faint: not driven)'
        handles.append(Patch(facecolor=COLOURS['uncovered'], alpha=0.85 if holonomic else 0.3,
                             label=f'heading no sensor covers{faint}'))
    if not holonomic:
        # exactly the two headings the engine checks for such a robot: 0 and pi
        driven = _driven_uncovered(config)
        for h, label, uncovered in ((0.0, 'forward', driven[0]),
                                    (math.pi, 'reverse', driven[1])):
            colour = COLOURS['uncovered'] if uncovered else COLOURS['trusted']
            cos_h, sin_h = math.cos(h), math.sin(h)
            tip = ring_in + ring_w * 1.8
            ax.annotate('', (tip * cos_h, tip * sin_h), (ring_in * cos_h, ring_in * sin_h),
                        zorder=4, gid=f'heading-{label}',
                        arrowprops={'arrowstyle': '-|>', 'color': colour, 'lw': 2.2})
            ax.text(tip * cos_h, tip * sin_h + 0.04 * extent, label, color=colour, ha='center',
                    va='bottom', fontsize=8, fontweight='bold', zorder=6,
                    gid=f'heading-{label}-text')
        if not all(driven):
            handles.append(Line2D([], [], color=COLOURS['trusted'], lw=2.2, marker='>',
                                  label='driven heading, covered'))
        if any(driven):
            handles.append(Line2D([], [], color=COLOURS['uncovered'], lw=2.2, marker='>',
                                  label='driven heading, NOT covered'))
    pad = 1.08 * max(extent, ring_in + ring_w * 2.2)
    handles += _draw_unwatched(ax, config, pad)
    ax.set_xlim(-pad, pad)
    ax.set_ylim(-pad, pad)
    ax.set_aspect('equal')
    ax.set_xlabel('x forward (m)')
    ax.set_ylabel('y left (m)')
    ax.grid(True, color='#dee2e6', linewidth=0.5)
    ax.set_axisbelow(True)
    ax.set_title('Top view, base_link (x forward to the right)', fontsize=10)
    ax.legend(handles=handles, loc='lower left', fontsize=7, framealpha=0.9)


def draw_near_body(ax: Axes, config: Config) -> None:
    """Draw a close top view of the body and what no cone watches next to it (m).

    Same frame as :func:`draw_layout`, zoomed to the footprint, the ring turning in place
    sweeps and each driven heading's path up to where its full width is watched; that
    distance is marked with a dashed line across the path and its value.
    """
    footprint = config.robot.footprint
    points = np.asarray(footprint.points, dtype=float)
    mounts = [mount_of(s) for s in config.sensors]
    inner, outer = turn_annulus_m(footprint)
    for s in config.sensors:
        theta = math.degrees(s.yaw_rad)
        half = math.degrees(s.field_of_view_rad) / 2
        ax.add_patch(Wedge((s.x_m, s.y_m), s.max_range_m, theta - half, theta + half,
                           facecolor=to_rgba(COLOURS['beam'], 0.10),
                           edgecolor=to_rgba(COLOURS['beam'], 0.6), linewidth=0.8, zorder=1,
                           gid='beam'))
    ax.add_patch(Polygon(points, closed=True, facecolor='#e9ecef', edgecolor=COLOURS['body'],
                         linewidth=1.5, zorder=3, gid='footprint'))
    if config.sensors:
        ax.plot([m.x_m for m in mounts], [m.y_m for m in mounts], 'o', color=COLOURS['body'],
                markersize=4, zorder=5, gid='mounts')
    circle = np.linspace(0.0, 2.0 * math.pi, 241)
    for radius in (inner, outer):
        if radius > 0.0:
            ax.plot(radius * np.cos(circle), radius * np.sin(circle), linestyle=':',
                    linewidth=0.8, color=COLOURS['body'], zorder=2, gid='turn-ring')
    corners = [*points, (-outer, -outer), (outer, outer)]
    labels: list[tuple[FloatArray, FloatArray, float]] = []
    for heading in watch_headings(config):
        u = np.array([math.cos(heading), math.sin(heading)])
        n = np.array([-u[1], u[0]])
        band = swept_band(footprint, heading)
        start = full_width_from_m(mounts, footprint, heading)
        if start is None:
            continue
        at = (band.lead_m + start) * u
        ends = [at + band.low_m * n, at + band.high_m * n]
        corners += ends
        ax.plot([ends[0][0], ends[1][0]], [ends[0][1], ends[1][1]], linestyle='--',
                linewidth=1.2, color=COLOURS['unwatched'], zorder=4, gid='full-width-from')
        labels.append((at + (band.low_m + band.high_m) / 2.0 * n, u, start))
    low, high = np.min(corners, axis=0), np.max(corners, axis=0)
    half = 0.6 * float(np.max(high - low)) + 0.1
    corners += [middle + u * 0.25 * half for middle, u, _ in labels]  # room for the values
    low, high = np.min(corners, axis=0), np.max(corners, axis=0)
    centre = (low + high) / 2.0
    half = 0.55 * float(np.max(high - low)) + 0.1
    for middle, u, start in labels:  # the value just beyond the middle of its dashed line
        spot = middle + u * 0.09 * half
        ax.text(spot[0], spot[1], f'{start:.2f} m', color=COLOURS['unwatched'], fontsize=8,
                fontweight='bold', zorder=6, gid='full-width-from-text', ha='center',
                va='center', bbox={'boxstyle': 'round,pad=0.15', 'facecolor': 'white',
                                   'alpha': 0.85, 'edgecolor': 'none'})
    handles = _draw_unwatched(ax, config, max(float(np.abs(centre).max()) + half, 1e-3))
    ax.set_xlim(centre[0] - half, centre[0] + half)
    ax.set_ylim(centre[1] - half, centre[1] + half)
    ax.set_aspect('equal')
    ax.set_xlabel('x forward (m)')
    ax.grid(True, color='#dee2e6', linewidth=0.5)
    ax.set_axisbelow(True)
    ax.set_title('Near the body: what no cone watches', fontsize=10)
    handles.append(Line2D([], [], linestyle='--', color=COLOURS['unwatched'],
                          label='full width watched from here on'))
    handles.append(Line2D([], [], linestyle=':', color=COLOURS['body'],
                          label='ring turning in place sweeps'))
    ax.legend(handles=handles, loc='upper center', bbox_to_anchor=(0.5, -0.13), ncol=2,
              fontsize=7, framealpha=0.9)


def draw_speed_polar(ax: Axes, config: Config, free_distance_m: float) -> None:
    """Draw the largest safe speed by travel heading (m/s) at one free distance (m).

    ``ax`` must be a polar axes; heading 0 (forward) points right, counter-clockwise, as in
    :func:`draw_layout`. Uncovered headings get ``fallback_speed`` and are marked.
    """
    if getattr(ax, 'name', '') != 'polar':
        raise ValueError("draw_speed_polar needs a polar axes (projection='polar')")
    result = safe_speed_by_heading(config, free_distance_m)
    theta = np.append(result.headings_rad, result.headings_rad[:1])
    speeds = np.append(result.speeds_mps, result.speeds_mps[:1])
    lim = config.limits
    ax.plot(theta, speeds, color=COLOURS['limit'], linewidth=1.6, gid='safe-speed',
            label='largest safe speed')
    ax.fill(theta, speeds, color=COLOURS['limit'], alpha=0.12)
    gaps = ~result.covered
    if gaps.any():
        ax.plot(result.headings_rad[gaps], result.speeds_mps[gaps], 'o', markersize=3.5,
                color=COLOURS['uncovered'], gid='fallback',
                label=f'uncovered: fallback {min(lim.fallback_speed_mps, lim.max_speed_mps):g}'
                      ' m/s')
    top = max(lim.max_speed_mps, float(result.speeds_mps.max())) * 1.1
    circle = np.linspace(0, 2 * math.pi, 181)
    ax.plot(circle, np.full_like(circle, lim.max_speed_mps), linestyle='--', linewidth=0.8,
            color=COLOURS['silent'], label=f'max speed {lim.max_speed_mps:g} m/s')
    if not config.robot.holonomic:
        for index, name in ((0, 'forward'), (len(result.headings_rad) // 2, 'reverse')):
            v = float(result.speeds_mps[index])
            colour = COLOURS['trusted'] if result.covered[index] else COLOURS['uncovered']
            ax.plot([result.headings_rad[index]], [v], marker='D', markersize=6,
                    color=colour, zorder=5, gid=f'heading-{name}')
            ax.annotate(f'{name}\n{v:.2f} m/s', (result.headings_rad[index], v),
                        textcoords='offset points', xytext=(0, 10), ha='center', fontsize=8,
                        color=colour, fontweight='bold')
    ax.set_ylim(0, top if top > 0 else 1.0)
    names = ['fwd', '45', 'left', '135', 'rev', '-135', 'right', '-45']
    ax.set_thetagrids(range(0, 360, 45), names)  # type: ignore[attr-defined]
    ax.set_rlabel_position(67.5)  # type: ignore[attr-defined]  # clear of the fwd/rev notes
    ax.tick_params(labelsize=7)
    ax.set_title(f'Largest safe speed by heading (m/s)\nat {free_distance_m:g} m free, '
                 f'decel {config.robot.decel_mps2:g} m/s^2, margin {lim.margin_m:g} m',
                 fontsize=9)
    ax.legend(loc='lower left', bbox_to_anchor=(-0.12, -0.16), fontsize=7, framealpha=0.9)


def layout_figure(config: Config, free_distance_m: float = 1.0) -> Figure:
    """Return a figure with the top view, the body close up and the safe speed by heading."""
    fig = Figure(figsize=(16.0, 5.4), layout='constrained')
    draw_layout(fig.add_subplot(1, 3, 1), config)
    draw_near_body(fig.add_subplot(1, 3, 2), config)
    draw_speed_polar(fig.add_subplot(1, 3, 3, projection='polar'), config, free_distance_m)
    kind = 'holonomic' if config.robot.holonomic else 'forward and reverse only'
    fig.suptitle(f'Sensor layout: {len(config.sensors)} sonars, {kind}', fontsize=11)
    return fig


def save_layout_png(config: Config, path: str | Path, free_distance_m: float = 1.0) -> None:
    """Write :func:`layout_figure` to ``path`` as a PNG (100 dpi), whole or not at all."""
    from sonar_guard.offline.atomic import write_bytes_atomic
    write_bytes_atomic(path, figure_png_bytes(layout_figure(config, free_distance_m)))


def _close(fig: Figure) -> None:
    """Release a figure; also unregister it from pyplot if pyplot made it."""
    if getattr(fig.canvas, 'manager', None) is not None:
        import matplotlib.pyplot as plt  # only reached for figures pyplot already owns
        plt.close(fig)
    fig.clear()


def figure_png_bytes(fig: Figure, dpi: int = 100) -> bytes:
    """Return the figure as PNG bytes; the figure is closed."""
    buffer = io.BytesIO()
    try:
        fig.savefig(buffer, format='png', dpi=dpi)
    finally:
        _close(fig)
    return buffer.getvalue()


def figure_png_base64(fig: Figure, dpi: int = 100) -> str:
    """Return the figure as PNG, base64 text (for a data: URI); the figure is closed."""
    return base64.b64encode(figure_png_bytes(fig, dpi)).decode('ascii')

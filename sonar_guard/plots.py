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
from matplotlib.patches import Patch, Polygon, Wedge
import numpy as np
import numpy.typing as npt

from sonar_guard.core.braking import max_safe_speed
from sonar_guard.core.config import Config
from sonar_guard.core.geometry import coverage, uniform_headings
from sonar_guard.core.monitor import EVENT_KINDS, mount_of
from sonar_guard.core.schedule import Schedule

__all__ = [
    'COLOURS',
    'EVENT_COLOURS',
    'FloatArray',
    'HeadingSpeeds',
    'UNKNOWN_COLOUR',
    'VERDICT_COLOURS',
    'draw_layout',
    'draw_speed_polar',
    'figure_png_base64',
    'figure_png_bytes',
    'layout_figure',
    'literal_text',
    'mark_no_data',
    'safe_speed_by_heading',
    'save_layout_png',
    'uncovered_headings',
]

FloatArray = npt.NDArray[np.float64]

COLOURS: dict[str, str] = {
    'trusted': '#2f9e44',     # sensing that may bound the free distance
    'caution': '#f08c00',     # usable, but look closer
    'untrusted': '#c92a2a',   # sensing that must not bound the free distance
    'silent': '#868e96',      # nothing heard
    'uncovered': '#d6336c',   # a travel heading no beam watches
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


def draw_layout(ax: Axes, config: Config, *, heading_count: int = _HEADINGS) -> None:
    """Draw the top view: footprint, mounts and beam cones, and the uncovered headings (m).

    x forward points to the right, y left points up. Uncovered travel headings are thin
    wedges on a ring around the footprint. For a robot that only drives forward and reverse,
    those two are marked with arrows and the other headings are drawn faint.
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
    ax.set_xlim(-pad, pad)
    ax.set_ylim(-pad, pad)
    ax.set_aspect('equal')
    ax.set_xlabel('x forward (m)')
    ax.set_ylabel('y left (m)')
    ax.grid(True, color='#dee2e6', linewidth=0.5)
    ax.set_axisbelow(True)
    ax.set_title('Top view, base_link (x forward to the right)', fontsize=10)
    ax.legend(handles=handles, loc='lower left', fontsize=7, framealpha=0.9)


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
    """Return a figure with the top view and the safe speed by heading side by side."""
    fig = Figure(figsize=(11.0, 5.4), layout='constrained')
    draw_layout(fig.add_subplot(1, 2, 1), config)
    draw_speed_polar(fig.add_subplot(1, 2, 2, projection='polar'), config, free_distance_m)
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

"""Draw the figures of reports: the sensor layout, safe speed by heading, and a recording's series.

Top views are in ``base_link`` (REP 103) seen from above: x forward to the right, y left up
the page, metres, equal aspect; headings are counter-clockwise from forward, as in the polar
plot. Figures are built with :class:`matplotlib.figure.Figure` directly, never through pyplot,
so no display and no global backend are needed and nothing stays registered after use.
Text that comes from data (names, paths) is drawn literally: ``$`` never starts mathtext.
"""
from __future__ import annotations

import base64
from collections.abc import Sequence
import functools
import io
import math
from pathlib import Path
from typing import TYPE_CHECKING, NamedTuple

from matplotlib.axes import Axes
from matplotlib.collections import PolyCollection
from matplotlib.colors import to_rgba
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch, Polygon, Wedge
from matplotlib.ticker import MaxNLocator
import numpy as np
import numpy.typing as npt

from sonar_guard.core.braking import max_safe_speed
from sonar_guard.core.config import Config
from sonar_guard.core.geometry import coverage, uniform_headings
from sonar_guard.core.monitor import EVENT_KINDS, Event, mount_of
from sonar_guard.core.readings import Verdict
from sonar_guard.core.schedule import Schedule

if TYPE_CHECKING:
    from sonar_guard.offline.results import BagResult, Histogram

__all__ = [
    'COLOURS',
    'EVENT_COLOURS',
    'HeadingSpeeds',
    'VERDICT_COLOURS',
    'draw_layout',
    'draw_speed_polar',
    'figure_png_base64',
    'figure_png_bytes',
    'layout_figure',
    'range_figure',
    'safe_speed_by_heading',
    'save_layout_png',
    'speed_figure',
    'timing_figure',
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

_UNKNOWN_COLOUR = '#adb5bd'
_NO_DATA = 'no data'
_HEADINGS = 72  # 5 degree steps, as the engine uses for a holonomic robot


# ------------------------------------------------------------------ helpers


def _plain(text: object) -> str:
    """Return text that matplotlib draws literally (a ``$`` never opens mathtext)."""
    # without an unescaped '$' matplotlib never parses mathtext and shows '\$' as '$'
    return str(text).replace('$', r'\$')


def _no_data(ax: Axes, what: str = _NO_DATA) -> None:
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
        ax.annotate(_plain(s.name), (s.x_m, s.y_m), (lx, ly), fontsize=7, ha='center',
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


# ------------------------------------------------------------------ recordings


def _verdict_palette() -> npt.NDArray[np.float64]:
    """Return an RGBA row per verdict code (the order of the Verdict enum)."""
    return np.array([to_rgba(VERDICT_COLOURS.get(v.value, _UNKNOWN_COLOUR)) for v in Verdict])


def _shade_events(ax: Axes, events: Sequence[Event], t0: float) -> set[str]:
    """Shade event spans (s since ``t0``) across the full height of ``ax``; return the kinds."""
    spans: dict[str, list[list[tuple[float, float]]]] = {}
    instants: dict[str, list[float]] = {}
    for e in events:
        a, b = e.t_start - t0, e.t_end - t0
        if not (math.isfinite(a) and math.isfinite(b)):
            continue
        if b > a:
            spans.setdefault(e.kind, []).append([(a, 0.0), (b, 0.0), (b, 1.0), (a, 1.0)])
        else:
            instants.setdefault(e.kind, []).append(a)
    # one collection per kind keeps thousands of events cheap to draw
    for kind, boxes in spans.items():
        ax.add_collection(PolyCollection(
            boxes, transform=ax.get_xaxis_transform(), facecolors=EVENT_COLOURS.get(
                kind, _UNKNOWN_COLOUR), edgecolors='none', alpha=0.18, zorder=0,
            gid=f'event-{kind}'), autolim=False)
    for kind, xs in instants.items():
        ax.vlines(xs, 0.0, 1.0, transform=ax.get_xaxis_transform(), linewidth=0.8,
                  colors=EVENT_COLOURS.get(kind, _UNKNOWN_COLOUR), alpha=0.6, zorder=0,
                  gid=f'event-{kind}')
    return set(spans) | set(instants)


def _event_handles(kinds: set[str]) -> list[Patch]:
    order = list(EVENT_KINDS) + sorted(kinds - set(EVENT_KINDS))
    return [Patch(facecolor=EVENT_COLOURS.get(k, _UNKNOWN_COLOUR), alpha=0.35,
                  label=f'{_plain(k)} event') for k in order if k in kinds]


def range_figure(result: BagResult) -> Figure:
    """Return range over time (m vs s since bag start), one row per sensor, dots by verdict.

    Non-finite readings (no echo as +inf, too close as -inf, NaN) sit at the top edge as
    markers; each sensor's events are shaded behind its row.
    """
    sensors = list(result.sensors)
    rows = max(1, len(sensors))
    fig = Figure(figsize=(10.0, 1.0 + 1.35 * rows), layout='constrained')
    axes = fig.subplots(rows, 1, sharex=True, squeeze=False)[:, 0]
    t0 = result.t_start
    palette = _verdict_palette()
    seen_codes: set[int] = set()
    kinds: set[str] = set()
    markers_used: set[str] = set()
    any_data = False
    if not sensors:
        _no_data(axes[0], 'no data: no sensors')
    for ax, s in zip(axes, sensors):
        t, r, code = s.ranges.arrays()
        configured = {c.name: c for c in result.config.sensors}.get(s.name)
        ax.set_ylabel(_plain(s.name), fontsize=8, rotation=0, ha='right', va='center')
        if t.size == 0 or math.isnan(t0):
            _no_data(ax)
            ax.set_yticks([])
            continue
        any_data = True
        rel = t - t0
        finite = np.isfinite(r)
        reach = (configured.max_range_m if configured is not None
                 else (float(r[finite].max()) if finite.any() else 1.0))
        top = reach * 1.08
        beyond = finite & (r > top)
        inside = finite & ~beyond
        code = np.clip(code, 0, len(palette) - 1)
        seen_codes.update(int(c) for c in np.unique(code))
        ax.scatter(rel[inside], r[inside], c=palette[code[inside]], s=4, linewidths=0,
                   zorder=3, rasterized=True)
        edge = ((r == math.inf) | beyond, '^'), (r == -math.inf, 'v'), (np.isnan(r), 'x')
        for mask, marker in edge:
            if mask.any():
                markers_used.add(marker)
                ax.scatter(rel[mask], np.full(int(mask.sum()), top), c=palette[code[mask]],
                           marker=marker, s=10, linewidths=0.8, zorder=3, clip_on=False)
        if configured is not None:
            for y in (configured.min_range_m, configured.max_range_m):
                ax.axhline(y, color=COLOURS['silent'], linewidth=0.6, linestyle=':', zorder=1)
        kinds |= _shade_events(ax, [e for e in result.events if e.sensor == s.name], t0)
        ax.set_ylim(0.0, top * 1.04)
        ax.tick_params(labelsize=7)
        ax.grid(True, axis='y', color='#e9ecef', linewidth=0.5)
    axes[-1].set_xlabel('time since bag start (s)', fontsize=8)
    if any_data:
        names = [v.value for v in Verdict]
        handles: list[Patch | Line2D] = [
            Line2D([], [], marker='o', linestyle='', markersize=5,
                   color=VERDICT_COLOURS.get(names[c], _UNKNOWN_COLOUR), label=names[c])
            for c in sorted(seen_codes)]
        labels = {'^': '+inf or beyond range', 'v': '-inf (too close)', 'x': 'NaN'}
        handles += [Line2D([], [], marker=m, linestyle='', color=COLOURS['body'],
                           label=f'{labels[m]} at top edge') for m in sorted(markers_used)]
        handles += _event_handles(kinds)
        fig.legend(handles=handles, loc='outside lower center', ncol=min(6, len(handles)),
                   fontsize=7, frameon=False)
    fig.suptitle('Range over time (m); dotted: configured min and max range', fontsize=10)
    return fig


def _kinds_of(events: Sequence[Event]) -> list[str]:
    """Return the event kinds present, contract kinds first (EVENT_KINDS order), then others."""
    seen = {e.kind for e in events}
    return [k for k in EVENT_KINDS if k in seen] + sorted(seen - set(EVENT_KINDS))


def _draw_findings(ax: Axes, events: Sequence[Event], kinds: list[str], t0: float) -> None:
    """Mark every finding on a time strip (s since ``t0``): one row per kind, top down.

    A tick marks each start, so one-reading findings show however short; a bar spans each
    stretch.
    """
    for row, kind in enumerate(kinds):
        colour = EVENT_COLOURS.get(kind, _UNKNOWN_COLOUR)
        mine = [(e.t_start - t0, e.t_end - t0) for e in events if e.kind == kind]
        mine = [(a, b) for a, b in mine if math.isfinite(a) and math.isfinite(b)]
        bars = [(a, b - a) for a, b in mine if b > a]
        if bars:
            ax.broken_barh(bars, (row - 0.3, 0.6), facecolors=colour, alpha=0.55,
                           edgecolors='none', gid=f'finding-{kind}')
        ax.plot([a for a, _ in mine], [row] * len(mine), '|', color=colour, markersize=9,
                markeredgewidth=1.4, gid=f'finding-{kind}-start')
    ax.set_yticks(range(len(kinds)), [_plain(k) for k in kinds], fontsize=7)
    for label, kind in zip(ax.get_yticklabels(), kinds):
        label.set_color(EVENT_COLOURS.get(kind, _UNKNOWN_COLOUR))
    ax.set_ylim(len(kinds) - 0.5, -0.5)  # first kind on top
    ax.tick_params(labelsize=7)
    ax.grid(True, axis='x', color='#e9ecef', linewidth=0.5)
    ax.set_title('findings by kind (all sensors and the robot)', fontsize=8, loc='left')


def speed_figure(result: BagResult) -> Figure:
    """Return measured and allowed speed (m/s) over time (s since bag start), findings below.

    Measured speed is a solid line (highest per time bucket), the allowed speed a dashed step
    (lowest per bucket), the configured max speed dotted; robot events (overspeed) are shaded.
    A strip under the plot marks every finding, one row per kind. With no allowed-speed series
    (a recording checked without a parameter file) only the measured speed is drawn and the
    figure says the allowed speed was not computed.
    """
    t0 = result.t_start
    ts, speed, _ = result.speed.arrays()
    tl, limit, _ = result.limit.arrays()
    empty = (ts.size == 0 and tl.size == 0) or math.isnan(t0)
    kinds = [] if empty else _kinds_of(result.events)
    if kinds:
        fig = Figure(figsize=(10.0, 3.4 + 0.2 * len(kinds)), layout='constrained')
        ax, strip = fig.subplots(2, 1, sharex=True,
                                 height_ratios=[3.0, 0.35 + 0.2 * len(kinds)])
        _draw_findings(strip, result.events, kinds, t0)
        strip.set_xlabel('time since bag start (s)', fontsize=8)
    else:
        fig = Figure(figsize=(10.0, 3.2), layout='constrained')
        ax = fig.add_subplot(1, 1, 1)
        ax.set_xlabel('time since bag start (s)', fontsize=8)
    title = 'Measured speed against the allowed speed'
    if empty:
        _no_data(ax)
    else:
        if ts.size:
            ax.plot(ts - t0, speed, color=COLOURS['speed'], linewidth=1.0, linestyle='-',
                    label='measured speed (highest per bucket)', gid='speed')
        if tl.size:
            ax.step(tl - t0, limit, where='post', color=COLOURS['limit'], linewidth=1.4,
                    linestyle='--', label='allowed speed (lowest per bucket)', gid='limit')
            ax.axhline(result.config.limits.max_speed_mps, color=COLOURS['silent'],
                       linestyle=':', linewidth=1.0, label='configured max speed')
        else:
            title = 'Measured speed (allowed speed not computed)'
            ax.text(0.01, 0.95, 'allowed speed not computed for this recording',
                    transform=ax.transAxes, ha='left', va='top', fontsize=8,
                    color=COLOURS['untrusted'], gid='no-limit')
            ax.plot([], [], linestyle='none', label='allowed speed: not computed')
        robot = _shade_events(ax, [e for e in result.events if e.sensor is None], t0)
        handles, _ = ax.get_legend_handles_labels()
        ax.legend(handles=handles + _event_handles(robot), fontsize=7, loc='lower left',
                  bbox_to_anchor=(0.0, 1.0), ncol=4, frameon=False, borderaxespad=0.2)
        ax.set_ylim(bottom=0.0)
    ax.set_ylabel('speed (m/s)', fontsize=8)
    ax.tick_params(labelsize=7)
    ax.grid(True, color='#e9ecef', linewidth=0.5)
    fig.suptitle(title, fontsize=10)
    return fig


_DISPLAY_BINS = 60  # at most this many bars per histogram, however wide the data spread


def _display_bins(edges_s: FloatArray, counts: FloatArray, bin_s: float
                  ) -> tuple[FloatArray, FloatArray, float]:
    """Merge fine bins into at most ``_DISPLAY_BINS`` bars; return (lefts s, counts, width s)."""
    span = float(edges_s.max() - edges_s.min()) + bin_s
    factor = max(1, math.ceil(span / (_DISPLAY_BINS * bin_s)))
    width = factor * bin_s
    index = np.floor(edges_s / width + 1e-9).astype(np.int64)
    keys, inverse = np.unique(index, return_inverse=True)
    merged: FloatArray = np.zeros(keys.size, dtype=np.float64)
    np.add.at(merged, inverse, counts)
    lefts: FloatArray = keys.astype(np.float64) * width
    return lefts, merged, width


def _draw_histogram(ax: Axes, hist: Histogram, colour: str) -> None:
    """Draw a fixed-bin histogram of durations in ms: bars, a tick under every bar, p99 dashed."""
    data = hist.to_dict()
    edges = np.asarray(data['edges_s'], dtype=float)
    counts = np.asarray(data['counts'], dtype=float)
    ax.set_yticks([])  # the shape matters here, not the counts
    if not counts.size and not data['beyond']:
        _no_data(ax)
        return
    if counts.size:
        left, merged, width = _display_bins(edges, counts, float(data['bin_s']))
        left_ms, width_ms = left * 1e3, width * 1e3
        ax.bar(left_ms, merged, width=width_ms, align='edge', color=colour, linewidth=0)
        # a lone value next to hundreds is a bar one pixel high: a tick shows it is there
        ax.plot(left_ms + width_ms / 2, np.zeros_like(left_ms), '|', color=colour,
                markersize=6, clip_on=False)
        lo, hi = float(left_ms.min()), float(left_ms.max()) + width_ms
        span = max(hi - lo, 10 * width_ms)
        ax.set_xlim(lo - 0.05 * span, hi + 0.05 * span)
    p99 = hist.quantile(0.99)
    if math.isfinite(p99):
        ax.axvline(p99 * 1e3, color=COLOURS['body'], linestyle='--', linewidth=0.8)
        ax.set_title(f'p99 {p99 * 1e3:.0f}', loc='right', fontsize=6.5, pad=2,
                     color=COLOURS['body'])
    if data['beyond']:
        ax.text(0.98, 0.95, f'+{data["beyond"]} > {hist.max_s * 1e3:g}',
                transform=ax.transAxes, ha='right', va='top', fontsize=6.5,
                color=COLOURS['untrusted'])


_TIMING_COLUMNS = 4  # sensors side by side in the histogram grid
_CELL_IN = (1.55, 0.8)  # width and height of one histogram, inches


def timing_figure(result: BagResult) -> Figure:
    """Return small histograms per sensor (ms): time between readings, detection latency.

    A compact grid, at most four sensors wide: each sensor has its period
    histogram above its latency histogram; dashed and labelled: the 99th percentile. The
    figure is meant to sit smaller than the full-width time plots.
    """
    sensors = list(result.sensors)
    cols = max(1, min(_TIMING_COLUMNS, len(sensors)))
    rows = max(1, math.ceil(len(sensors) / cols))
    fig = Figure(figsize=(0.7 + _CELL_IN[0] * cols, 0.45 + 2 * _CELL_IN[1] * rows + 0.25 * rows),
                 layout='constrained')
    axes = fig.subplots(2 * rows, cols, squeeze=False)
    if not sensors:
        for ax in axes[:, 0]:
            _no_data(ax, 'no data: no sensors')
    for i, s in enumerate(sensors):
        r, c = divmod(i, cols)
        per_ax, lat_ax = axes[2 * r, c], axes[2 * r + 1, c]
        _draw_histogram(per_ax, s.periods, COLOURS['trusted'])
        _draw_histogram(lat_ax, s.latencies, COLOURS['beam'])
        per_ax.set_title(_plain(s.name), loc='left', fontsize=8, pad=2, fontweight='bold')
        for ax in (per_ax, lat_ax):
            ax.tick_params(labelsize=6.5, pad=1)
            ax.xaxis.set_major_locator(MaxNLocator(nbins=4))
    for r in range(rows):
        axes[2 * r, 0].set_ylabel('period', fontsize=7)
        axes[2 * r + 1, 0].set_ylabel('latency', fontsize=7)
    for i in range(len(sensors), rows * cols):  # empty cells of the last grid row
        r, c = divmod(i, cols)
        axes[2 * r, c].set_visible(False)
        axes[2 * r + 1, c].set_visible(False)
    fig.suptitle('Timing per sensor (ms); dashed: p99', fontsize=9)
    return fig

"""Draw a checked recording's series for the report: range over time, speed, timing.

Figures are built with :class:`matplotlib.figure.Figure` directly, never through pyplot, like
every figure of :mod:`sonar_guard.plots`, whose colours and helpers they share. Text from
data is drawn literally. Times are s since the bag start; ranges m; speeds m/s.
"""
from __future__ import annotations

from collections.abc import Sequence
import math
from typing import TYPE_CHECKING

from matplotlib.axes import Axes
from matplotlib.collections import PolyCollection
from matplotlib.colors import to_rgba
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.ticker import MaxNLocator
import numpy as np
import numpy.typing as npt

from sonar_guard.core.monitor import EVENT_KINDS, Event
from sonar_guard.core.readings import Verdict
from sonar_guard.plots import (
    COLOURS,
    EVENT_COLOURS,
    UNKNOWN_COLOUR,
    VERDICT_COLOURS,
    FloatArray,
    literal_text,
    mark_no_data,
)

if TYPE_CHECKING:
    from sonar_guard.offline.results import BagResult, Histogram

__all__ = ['range_figure', 'speed_figure', 'timing_figure']


def _verdict_palette() -> npt.NDArray[np.float64]:
    """Return an RGBA row per verdict code (the order of the Verdict enum)."""
    return np.array([to_rgba(VERDICT_COLOURS.get(v.value, UNKNOWN_COLOUR)) for v in Verdict])


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
                kind, UNKNOWN_COLOUR), edgecolors='none', alpha=0.18, zorder=0,
            gid=f'event-{kind}'), autolim=False)
    for kind, xs in instants.items():
        ax.vlines(xs, 0.0, 1.0, transform=ax.get_xaxis_transform(), linewidth=0.8,
                  colors=EVENT_COLOURS.get(kind, UNKNOWN_COLOUR), alpha=0.6, zorder=0,
                  gid=f'event-{kind}')
    return set(spans) | set(instants)


def _event_handles(kinds: set[str]) -> list[Patch]:
    order = list(EVENT_KINDS) + sorted(kinds - set(EVENT_KINDS))
    return [Patch(facecolor=EVENT_COLOURS.get(k, UNKNOWN_COLOUR), alpha=0.35,
                  label=f'{literal_text(k)} event') for k in order if k in kinds]


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
        mark_no_data(axes[0], 'no data: no sensors')
    for ax, s in zip(axes, sensors):
        t, r, code = s.ranges.arrays()
        configured = {c.name: c for c in result.config.sensors}.get(s.name)
        ax.set_ylabel(literal_text(s.name), fontsize=8, rotation=0, ha='right', va='center')
        if t.size == 0 or math.isnan(t0):
            mark_no_data(ax)
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
                   color=VERDICT_COLOURS.get(names[c], UNKNOWN_COLOUR), label=names[c])
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
        colour = EVENT_COLOURS.get(kind, UNKNOWN_COLOUR)
        mine = [(e.t_start - t0, e.t_end - t0) for e in events if e.kind == kind]
        mine = [(a, b) for a, b in mine if math.isfinite(a) and math.isfinite(b)]
        bars = [(a, b - a) for a, b in mine if b > a]
        if bars:
            ax.broken_barh(bars, (row - 0.3, 0.6), facecolors=colour, alpha=0.55,
                           edgecolors='none', gid=f'finding-{kind}')
        ax.plot([a for a, _ in mine], [row] * len(mine), '|', color=colour, markersize=9,
                markeredgewidth=1.4, gid=f'finding-{kind}-start')
    ax.set_yticks(range(len(kinds)), [literal_text(k) for k in kinds], fontsize=7)
    for label, kind in zip(ax.get_yticklabels(), kinds):
        label.set_color(EVENT_COLOURS.get(kind, UNKNOWN_COLOUR))
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
        mark_no_data(ax)
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
        mark_no_data(ax)
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
            mark_no_data(ax, 'no data: no sensors')
    for i, s in enumerate(sensors):
        r, c = divmod(i, cols)
        per_ax, lat_ax = axes[2 * r, c], axes[2 * r + 1, c]
        _draw_histogram(per_ax, s.periods, COLOURS['trusted'])
        _draw_histogram(lat_ax, s.latencies, COLOURS['beam'])
        per_ax.set_title(literal_text(s.name), loc='left', fontsize=8, pad=2, fontweight='bold')
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

"""Render the results of ``sonar-guard check`` as one self-contained HTML page.

The page needs nothing but itself: styles are inline, figures are PNG ``data:`` URIs, there
are no scripts and no outside links, and a Content-Security-Policy forbids loading any. It
prints on paper as it shows on screen. Every piece of text taken from a recording or a
parameter file (paths, topics, names, frame ids, details, notes, errors) is HTML-escaped: a
recording may hold anything. Times are shown in seconds since the bag start, with the bag
time itself in a tooltip and in its own column.
"""
from __future__ import annotations

from collections.abc import Iterable, Sequence
import datetime
import html
import math
from pathlib import Path

from sonar_guard import SAFETY_CAUTION, __version__
from sonar_guard.core.config import Config
from sonar_guard.core.monitor import EVENT_KINDS, Event
from sonar_guard.core.readings import Verdict
from sonar_guard.offline.atomic import write_text_atomic
from sonar_guard.offline.results import BagResult, SensorSummary
from sonar_guard.plots import (
    EVENT_COLOURS,
    VERDICT_COLOURS,
    figure_png_base64,
    layout_figure,
    range_figure,
    speed_figure,
    timing_figure,
)

__all__ = ['MAX_EVENT_ROWS', 'render_html', 'write_html_atomic']

MAX_EVENT_ROWS = 500
"""Events listed per recording; the rest are counted (the JSON report has them all)."""

_DASH = '\u2013'
_EPOCH_MIN_S, _EPOCH_MAX_S = 9.0e8, 4.0e9  # bag times in this span are taken as Unix time

_VERDICT_MEANING: dict[str, str] = {
    'ok': 'a range that may bound the free distance',
    'blind': 'something nearer than the sensor can measure',
    'no_echo': 'nothing returned within max range',
    'invalid': 'NaN, negative, wrong metadata or out of order: discarded',
    'stale': 'too old on arrival to say anything about now',
    'late': 'usable, but arrived later than the budget allows',
    'stuck': 'unchanged although the robot moved enough to change it',
    'jump': 'changed faster than any plausible closing speed',
}

_EVENT_MEANING: dict[str, str] = {
    'blind': 'a stretch of blind readings',
    'no_echo': 'an echo lost while closing in (kept as an obstacle until a trusted reading)',
    'invalid': 'a stretch of invalid readings (or non-finite odometry)',
    'stale': 'a sensor (or odometry) silent or too old',
    'stuck': 'a stretch of stuck readings',
    'jump': 'one reading that jumped',
    'late': 'a stretch of late readings',
    'slot_clash': 'two sensors of different slots firing within an echo timeout',
    'overspeed': 'the robot above the limit for longer than its braking allowance',
}

_CSS = """
:root { --ink: #212529; --muted: #6c757d; --rule: #dee2e6; --shade: #f8f9fa; }
* { box-sizing: border-box; }
body { font: 14px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, sans-serif;
       color: var(--ink); margin: 0 auto; padding: 1.2em 1.6em; max-width: 1200px; }
h1 { font-size: 1.6em; margin: 0 0 .2em; }
h2 { font-size: 1.3em; margin: 1.6em 0 .4em; border-bottom: 2px solid var(--rule);
     padding-bottom: .2em; overflow-wrap: anywhere; }
h3 { font-size: 1.05em; margin: 1.2em 0 .4em; }
.meta, .muted { color: var(--muted); }
.caution { border: 2px solid #c92a2a; background: #fff5f5; padding: .7em 1em;
           margin: .8em 0; border-radius: 4px; }
.scope { font-size: 1.02em; }
.error { border-left: 5px solid #c92a2a; background: #fff5f5; padding: .5em .8em; }
.notes li { margin: .15em 0; }
table { border-collapse: collapse; margin: .4em 0 .8em; font-size: 12.5px; }
th, td { border: 1px solid var(--rule); padding: .25em .5em; text-align: right;
         vertical-align: top; }
th { background: var(--shade); font-weight: 600; }
td.text, th.text { text-align: left; overflow-wrap: anywhere; }
td.zero { color: #ced4da; }
td.bad { color: #c92a2a; font-weight: 600; }
td.good { color: #2b8a3e; }
tr:nth-child(even) td { background: #fcfcfd; }
.swatch { display: inline-block; width: .8em; height: .8em; border-radius: 2px;
          margin-right: .3em; vertical-align: -.05em; border: 1px solid rgba(0,0,0,.15); }
figure { margin: .6em 0 1.2em; }
figure img { max-width: 100%; height: auto; border: 1px solid var(--rule); }
figcaption { color: var(--muted); font-size: 12.5px; margin-top: .2em; }
.key { display: grid; grid-template-columns: repeat(auto-fill, minmax(260px, 1fr));
       gap: .1em 1.2em; font-size: 12.5px; margin: .3em 0 .8em; }
nav ol { margin: .2em 0; }
footer { margin-top: 2em; color: var(--muted); font-size: 12px;
         border-top: 1px solid var(--rule); padding-top: .5em; }
@media print {
  body { max-width: none; padding: 0; font-size: 11px; }
  section.bag { break-before: page; }
  figure, table, .caution { break-inside: avoid; }
  nav { display: none; }
}
"""

# No scripts, no outside requests: only inline styles and data: images may load.
_CSP = "default-src 'none'; img-src data:; style-src 'unsafe-inline'"


def _e(value: object) -> str:
    """Return ``value`` as text safe inside HTML content and quoted attributes."""
    return html.escape(str(value), quote=True)


def _finite(x: float | None) -> bool:
    return x is not None and math.isfinite(x)


def _num(x: float | None, fmt: str = '.3f', scale: float = 1.0) -> str:
    """Format a number (times ``scale``), or a dash when it is missing or not finite."""
    return format(x * scale, fmt) if x is not None and _finite(x) else _DASH


def _abs_time(t: float) -> str:
    """Describe a bag time (s): the number, and the UTC date when it looks like Unix time."""
    if not math.isfinite(t):
        return _DASH
    text = f'{t:.3f} s'
    if _EPOCH_MIN_S <= t <= _EPOCH_MAX_S:
        when = datetime.datetime.fromtimestamp(round(t, 3), tz=datetime.timezone.utc)
        text += f' ({when.strftime("%Y-%m-%d %H:%M:%S.%f")[:-3]} UTC)'
    return text


def _rel_cell(t: float, t0: float) -> str:
    """Return a table cell with time since bag start (s), bag time in the tooltip."""
    if not math.isfinite(t):
        return f'<td>{_DASH}</td>'
    if not math.isfinite(t0):
        return f'<td title="bag time">{t:.3f}</td>'
    return f'<td title="bag time {_e(_abs_time(t))}">{t - t0:.3f}</td>'


def _swatch(colour: str) -> str:
    return f'<span class="swatch" style="background:{_e(colour)}"></span>'


def _kinds_in(results: Iterable[BagResult]) -> list[str]:
    """Return the event kinds that occur, contract kinds first, then any others."""
    seen = {e.kind for r in results for e in r.events}
    return [k for k in EVENT_KINDS if k in seen] + sorted(seen - set(EVENT_KINDS))


def _img(b64: str, alt: str, caption: str) -> str:
    return (f'<figure><img src="data:image/png;base64,{b64}" alt="{_e(alt)}">'
            f'<figcaption>{caption}</figcaption></figure>')


# ------------------------------------------------------------------ parts


def _header(results: Sequence[BagResult], title: str, generated: str) -> str:
    sensors = sorted({s.name for r in results for s in r.sensors})
    readings = sum(s.readings for r in results for s in r.sensors)
    verdicts = ', '.join(v.value for v in Verdict)
    meta = f'sonar_guard {_e(__version__)}'
    if generated:
        meta = f'{_e(generated)} · {meta}'
    scope = (f'Checked {len(results)} recording{"s" if len(results) != 1 else ""}: '
             f'{readings} range readings from {len(sensors)} sensor'
             f'{"s" if len(sensors) != 1 else ""} were each judged ({_e(verdicts)}), the '
             'speed limit was replayed from them and the odometry, and findings were '
             'collected as events.')
    return (f'<header><h1>{_e(title)}</h1><p class="meta">{meta}</p>'
            f'<div class="caution" role="note"><strong>Caution.</strong> '
            f'{_e(SAFETY_CAUTION)}</div>'
            f'<p class="scope">{scope}</p></header>')


def _summary(results: Sequence[BagResult]) -> str:
    kinds = _kinds_in(results)
    head = ''.join(f'<th>{_swatch(EVENT_COLOURS.get(k, "#adb5bd"))}{_e(k)}</th>'
                   for k in kinds)
    rows = []
    for i, r in enumerate(results, 1):
        _, limits, _ = r.limit.arrays()
        lowest = float(limits.min()) if limits.size else None
        counts = {k: 0 for k in kinds}
        for e in r.events:
            counts[e.kind] += 1
        cells = ''.join(f'<td class="{"bad" if counts[k] else "zero"}">{counts[k]}</td>'
                        for k in kinds)
        readings = sum(s.readings for s in r.sensors)
        if r.error is None:
            status = '<td class="text good">complete</td>'
        else:
            status = f'<td class="text bad">stopped early: {_e(r.error)}</td>'
        span = f'from {_abs_time(r.t_start)} to {_abs_time(r.t_end)}'
        rows.append(
            f'<tr><td>{i}</td><td class="text"><a href="#bag-{i}">{_e(r.path)}</a></td>'
            f'<td title="{_e(span)}">{_num(r.duration_s, ".1f")}</td><td>{readings}</td>'
            f'<td>{len(r.events)}</td>{cells}<td>{_num(lowest, ".2f")}</td>{status}</tr>')
    return ('<section id="summary"><h2>Summary</h2><table><thead><tr><th>#</th>'
            '<th class="text">recording</th><th>duration (s)</th><th>readings</th>'
            f'<th>events</th>{head}<th>lowest limit (m/s)</th><th class="text">status</th>'
            f'</tr></thead><tbody>{"".join(rows)}</tbody></table></section>')


def _key(results: Sequence[BagResult]) -> str:
    verdicts = ''.join(f'<div>{_swatch(VERDICT_COLOURS[v.value])}<b>{_e(v.value)}</b>: '
                       f'{_e(_VERDICT_MEANING.get(v.value, ""))}</div>' for v in Verdict)
    kinds = _kinds_in(results)
    events = ''.join(f'<div>{_swatch(EVENT_COLOURS.get(k, "#adb5bd"))}<b>{_e(k)}</b>: '
                     f'{_e(_EVENT_MEANING.get(k, ""))}</div>' for k in kinds)
    out = f'<h3>Reading verdicts</h3><div class="key">{verdicts}</div>'
    if events:
        out += f'<h3>Event kinds found</h3><div class="key">{events}</div>'
    return f'<section id="key"><h2>How to read this report</h2>{out}</section>'


def _sensor_table(result: BagResult) -> str:
    verdicts = [v.value for v in Verdict]
    head = ''.join(f'<th>{_swatch(VERDICT_COLOURS[v])}{_e(v)} %</th>' for v in verdicts)
    frames = {s.name: s.frame_id for s in result.config.sensors}
    rows = []
    for s in result.sensors:
        rows.append(_sensor_row(s, verdicts, frames.get(s.name, '')))
    if not rows:
        rows.append(f'<tr><td class="text muted" colspan="{9 + len(verdicts)}">no sensors'
                    '</td></tr>')
    return ('<table><thead><tr><th class="text">sensor</th><th class="text">topic</th>'
            f'<th class="text">frame</th><th>readings</th>{head}'
            '<th>period p50 (ms)</th><th>period p99 (ms)</th>'
            '<th>latency p50 (ms)</th><th>latency p99 (ms)</th><th>range seen (m)</th>'
            f'</tr></thead><tbody>{"".join(rows)}</tbody></table>')


def _sensor_row(s: SensorSummary, verdicts: list[str], frame: str) -> str:
    n = s.readings
    shares = []
    for v in verdicts:
        count = s.counts.get(v, 0)
        if not count:
            shares.append('<td class="zero">0</td>')
            continue
        css = '' if v in ('ok', 'no_echo') else ' class="bad"'
        label = f'{count} reading{"s" if count != 1 else ""}'
        shares.append(f'<td{css} title="{label}">{100.0 * count / max(n, 1):.1f}</td>')
    seen = (f'{s.range_min_m:.2f}{_DASH}{s.range_max_m:.2f}'
            if math.isfinite(s.range_min_m) and math.isfinite(s.range_max_m) else _DASH)
    return (f'<tr><td class="text">{_e(s.name)}</td><td class="text">{_e(s.topic)}</td>'
            f'<td class="text">{_e(frame) or _DASH}</td><td>{n}</td>{"".join(shares)}'
            f'<td>{_num(s.periods.quantile(0.5), ".1f", 1e3)}</td>'
            f'<td>{_num(s.periods.quantile(0.99), ".1f", 1e3)}</td>'
            f'<td>{_num(s.latencies.quantile(0.5), ".1f", 1e3)}</td>'
            f'<td>{_num(s.latencies.quantile(0.99), ".1f", 1e3)}</td><td>{seen}</td></tr>')


def _events_table(result: BagResult, max_rows: int) -> str:
    events = sorted(result.events, key=lambda e: (e.t_start, e.t_end, e.kind, e.sensor or ''))
    if not events:
        return '<p class="muted">No events.</p>'
    shown = events[:max_rows]
    t0 = result.t_start
    rows = [_event_row(i, e, t0) for i, e in enumerate(shown, 1)]
    more = ''
    if len(events) > len(shown):
        rest = len(events) - len(shown)
        more = (f'<p class="more muted">{rest} more event{"s" if rest != 1 else ""} not '
                f'shown (the first {len(shown)} by start time are listed; the JSON report '
                'has them all).</p>')
    return ('<table class="events"><thead><tr><th>#</th><th class="text">kind</th>'
            '<th class="text">sensor</th><th>start (s)</th><th>end (s)</th>'
            '<th>duration (s)</th><th class="text">start, bag time</th>'
            '<th class="text">detail</th></tr></thead>'
            f'<tbody>{"".join(rows)}</tbody></table>{more}')


def _event_row(i: int, e: Event, t0: float) -> str:
    who = 'robot' if e.sensor is None else e.sensor
    duration = e.t_end - e.t_start
    return (f'<tr><td>{i}</td><td class="text">{_swatch(EVENT_COLOURS.get(e.kind, "#adb5bd"))}'
            f'{_e(e.kind)}</td><td class="text">{_e(who)}</td>{_rel_cell(e.t_start, t0)}'
            f'{_rel_cell(e.t_end, t0)}<td>{_num(duration, ".3f")}</td>'
            f'<td class="text">{_e(_abs_time(e.t_start))}</td>'
            f'<td class="text">{_e(e.detail)}</td></tr>')


def _figures(result: BagResult, layouts: dict[Config, str]) -> str:
    has_ranges = any(len(s.ranges) for s in result.sensors)
    has_speed = len(result.speed) > 0 or len(result.limit) > 0
    has_timing = any(s.latencies.count or s.periods.count for s in result.sensors)
    empty = ' (no data)'
    parts = [
        '<h3>Range over time</h3>',
        _img(figure_png_base64(range_figure(result)), 'range over time per sensor',
             'Each dot is the nearest reading of its time bucket, coloured by verdict; '
             'readings without a finite range are drawn at the top edge. Shaded: the '
             "sensor's events. Time in seconds since the bag start."
             + ('' if has_ranges else empty)),
        '<h3>Speed and limit</h3>',
        _img(figure_png_base64(speed_figure(result)), 'measured speed against the limit',
             'Measured speed (highest per time bucket) against the allowed limit (lowest '
             'per bucket); robot events such as overspeed are shaded.'
             + ('' if has_speed else empty)),
        '<h3>Timing</h3>',
        _img(figure_png_base64(timing_figure(result)), 'latency and period histograms',
             'Left: worst-case detection latency of each reading (measured firing cycle '
             'when known, else the configured one). Right: time between usable readings. '
             'Dashed: 99th percentile.' + ('' if has_timing else empty)),
        '<h3>Sensor layout</h3>',
        _img(_layout_png(result.config, layouts), 'sensor layout, top view',
             'The configuration this recording was checked with. Left: top view in '
             'base_link, x forward to the right; shaded ring segments mark travel headings '
             'that no beam covers. Right: the largest safe speed by heading at 1 m of free '
             'distance, from the configured detection latency, reaction time, deceleration '
             'and margin.'),
    ]
    return ''.join(parts)


def _layout_png(config: Config, layouts: dict[Config, str]) -> str:
    """Return the layout figure of ``config`` as base64 PNG, drawn once per configuration."""
    if config not in layouts:
        layouts[config] = figure_png_base64(layout_figure(config))
    return layouts[config]


def _bag_section(i: int, result: BagResult, max_events: int, layouts: dict[Config, str]
                 ) -> str:
    parts = [f'<section class="bag" id="bag-{i}"><h2>{i}. {_e(result.path)}</h2>']
    span = (f'Bag time {_e(_abs_time(result.t_start))} to {_e(_abs_time(result.t_end))}, '
            f'{_num(result.duration_s, ".1f")} s, {result.messages} messages.')
    parts.append(f'<p>{span}</p>')
    parts.append(f'<p><b>Parameters:</b> {_e(result.config_source or "not stated")}</p>')
    if result.error is not None:
        parts.append('<p class="error"><b>The recording could not be read to its end:</b> '
                     f'{_e(result.error)}. What was readable is reported.</p>')
    if result.notes:
        notes = ''.join(f'<li>{_e(n)}</li>' for n in result.notes)
        parts.append(f'<h3>Notes</h3><ul class="notes">{notes}</ul>')
    parts.append('<h3>Sensors</h3>')
    parts.append(_sensor_table(result))
    parts.append(_figures(result, layouts))
    count = len(result.events)
    parts.append(f'<h3>Events ({count})</h3>')
    parts.append(_events_table(result, max_events))
    parts.append('</section>')
    return ''.join(parts)


def _nav(results: Sequence[BagResult]) -> str:
    if len(results) < 2:
        return ''
    items = ''.join(f'<li><a href="#bag-{i}">{_e(r.path)}</a></li>'
                    for i, r in enumerate(results, 1))
    return f'<nav><b>Recordings</b><ol>{items}</ol></nav>'


def render_html(results: Sequence[BagResult], *, title: str = 'sonar_guard check',
                generated: str = '', max_events: int = MAX_EVENT_ROWS) -> str:
    """Return one self-contained HTML page reporting ``results`` (no outside resources).

    ``generated`` is shown under the title as given (e.g. when the report was made);
    ``max_events`` caps the rows of each recording's event table.
    """
    body = [_header(results, title, generated), _summary(results), _nav(results),
            _key(results)]
    layouts: dict[Config, str] = {}  # recordings checked with one configuration share a figure
    body.extend(_bag_section(i, r, max_events, layouts) for i, r in enumerate(results, 1))
    body.append(f'<footer>{_e(SAFETY_CAUTION)}</footer>')
    return ('<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
            f'<meta http-equiv="Content-Security-Policy" content="{_e(_CSP)}">'
            '<meta name="viewport" content="width=device-width, initial-scale=1">'
            f'<title>{_e(title)}</title><style>{_CSS}</style></head>\n<body>\n'
            + '\n'.join(body) + '\n</body></html>\n')


def write_html_atomic(text: str, path: Path) -> None:
    """Write the report whole or not at all; refuse a symbolic link at ``path``.

    The text goes to a temporary file in the same folder, which then replaces ``path``
    (``os.replace``), so no reader sees half a report. Failures raise
    :class:`~sonar_guard.errors.SonarGuardError` with a one-line message.
    """
    write_text_atomic(path, text)

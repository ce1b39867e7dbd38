"""Render the results of ``sonar-guard check`` as one self-contained HTML page.

The page needs nothing but itself: styles are inline, figures are PNG ``data:`` URIs, there
are no scripts and no outside links, and a Content-Security-Policy forbids loading any. It
prints on paper as it shows on screen. Every piece of text taken from a recording or a
parameter file (paths, topics, names, frame ids, details, notes, errors) is HTML-escaped: a
recording may hold anything. Times are shown in seconds since the bag start, with the bag
time itself in a tooltip.

The page reads as a diagnosis: the caution once at the top, then any checks that did not run,
then per recording a status line for each sensor (:mod:`sonar_guard.offline.health`) with
what to check next, before the tables and plots that back it. Tables and their look live in
``html_parts`` and ``html_style``.
"""
from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

from sonar_guard import SAFETY_CAUTION, __version__
from sonar_guard.core.config import Config
from sonar_guard.core.readings import Verdict
from sonar_guard.offline import health as rules
from sonar_guard.offline.atomic import write_text_atomic
from sonar_guard.offline.health import SensorHealth, assess_recording
from sonar_guard.offline.html_parts import (
    abs_time,
    esc,
    events_table,
    health_lines,
    kinds_in,
    num,
    sensor_tables,
    summary_table,
    swatch,
)
from sonar_guard.offline.html_style import CSP, CSS
from sonar_guard.offline.results import BagResult
from sonar_guard.plots import EVENT_COLOURS, VERDICT_COLOURS, figure_png_base64, layout_figure
from sonar_guard.recording_plots import range_figure, speed_figure, timing_figure

__all__ = ['MAX_EVENT_ROWS', 'render_html', 'write_html_atomic']

MAX_EVENT_ROWS = 500
"""Events listed per recording; the rest are counted (the JSON report has them all)."""

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


def _pct(share: float) -> str:
    return f'{100 * share:g}\u00a0%'


_LEVEL_MEANING: dict[str, str] = {
    'unusable': ('no readings, or at least '
                 f'{_pct(rules.UNUSABLE_DISCARDED)} of readings discarded (invalid, stale or '
                 f'stuck), or silent for {_pct(rules.UNUSABLE_SILENT)} of the recording'),
    'degraded': (f'at least {_pct(rules.DEGRADED_DISCARDED)} discarded, silent for '
                 f'{_pct(rules.DEGRADED_SILENT)}, no echo in {_pct(rules.DEGRADED_NO_ECHO)}, '
                 f'blind in {_pct(rules.DEGRADED_BLIND)}, jumps in '
                 f'{_pct(rules.DEGRADED_JUMP)} or late in {_pct(rules.DEGRADED_LATE)} of '
                 'readings'),
    'fine': 'none of these; the number shown is the share of ok readings',
}


def _img(b64: str, alt: str, caption: str, css: str = '') -> str:
    klass = f' class="{css}"' if css else ''
    return (f'<figure{klass}><img src="data:image/png;base64,{b64}" alt="{esc(alt)}">'
            f'<figcaption>{caption}</figcaption></figure>')


# ------------------------------------------------------------------ parts


def _skipped(results: Sequence[BagResult]) -> str:
    """Return the notice of checks not run, each distinct sentence once, or ''."""
    where: dict[str, list[int]] = {}
    for i, r in enumerate(results, 1):
        if r.skipped_notice:
            where.setdefault(r.skipped_notice, []).append(i)
    if not where:
        return ''
    items = []
    for notice, numbers in where.items():
        which = ''
        if len(results) > 1:
            which = (' (recording ' if len(numbers) == 1 else ' (recordings ') + ', '.join(
                f'<a href="#bag-{n}">{n}</a>' for n in numbers) + ')'
        items.append(f'<li>{esc(notice)}{which}</li>')
    return ('<div class="skipped" role="note"><strong>Not every check ran.</strong>'
            f'<ul>{"".join(items)}</ul></div>')


def _header(results: Sequence[BagResult], title: str, generated: str) -> str:
    sensors = sorted({s.name for r in results for s in r.sensors})
    readings = sum(s.readings for r in results for s in r.sensors)
    verdicts = ', '.join(v.value for v in Verdict)
    meta = f'sonar_guard {esc(__version__)}'
    if generated:
        meta = f'{esc(generated)} · {meta}'
    limits = sum(1 for r in results if len(r.limit))
    replayed = ('the allowed speed was replayed from them and the odometry' if limits
                else 'the allowed speed was not computed')
    if 0 < limits < len(results):
        replayed += f' (for {limits} of the {len(results)} recordings)'
    scope = (f'Checked {len(results)} recording{"s" if len(results) != 1 else ""}: '
             f'{readings} range readings from {len(sensors)} sensor'
             f'{"s" if len(sensors) != 1 else ""} were each judged ({esc(verdicts)}), '
             f'{replayed}, and findings were collected as events.')
    return (f'<header><h1>{esc(title)}</h1><p class="meta">{meta}</p>'
            f'<div class="caution" role="note"><strong>Caution.</strong> '
            f'{esc(SAFETY_CAUTION)}</div>{_skipped(results)}'
            f'<p class="scope">{scope}</p></header>')


def _summary(results: Sequence[BagResult], health: Sequence[Sequence[SensorHealth]]) -> str:
    parts = ['<section id="summary"><h2>Summary</h2>', summary_table(results)]
    if results:
        parts.append('<h3>Sensor status</h3>')
    for i, (r, h) in enumerate(zip(results, health), 1):
        if len(results) > 1:
            parts.append(f'<h4 class="rec"><a href="#bag-{i}">{i}. {esc(r.path)}</a></h4>')
        parts.append(health_lines(h, compact=True))
    parts.append('</section>')
    return ''.join(parts)


def _key(results: Sequence[BagResult]) -> str:
    levels = ''.join(f'<div><b>{esc(level)}</b>: {esc(_LEVEL_MEANING[level])}</div>'
                     for level in reversed(rules.LEVELS))
    verdicts = ''.join(f'<div>{swatch(VERDICT_COLOURS[v.value])}<b>{esc(v.value)}</b>: '
                       f'{esc(_VERDICT_MEANING.get(v.value, ""))}</div>' for v in Verdict)
    kinds = kinds_in(results)
    events = ''.join(f'<div>{swatch(EVENT_COLOURS.get(k, "#adb5bd"))}<b>{esc(k)}</b>: '
                     f'{esc(_EVENT_MEANING.get(k, ""))}</div>' for k in kinds)
    out = (f'<h3>Sensor status</h3><div class="key">{levels}</div><p class="muted">These '
           'thresholds are our own first-look choices for sorting sensors (see '
           'sonar_guard/offline/health.py); they do not change the speed limit.</p>'
           f'<h3>Reading verdicts</h3><div class="key">{verdicts}</div>')
    if events:
        out += f'<h3>Event kinds found</h3><div class="key">{events}</div>'
    return f'<section id="key"><h2>How to read this report</h2>{out}</section>'


def _figures(result: BagResult, layouts: dict[Config, str]) -> str:
    has_ranges = any(len(s.ranges) for s in result.sensors)
    has_speed = len(result.speed) > 0 or len(result.limit) > 0
    has_limit = len(result.limit) > 0
    has_timing = any(s.latencies.count or s.periods.count for s in result.sensors)
    empty = ' (no data)'
    if not has_speed:
        speed_caption = 'Measured and allowed speed.' + empty
    elif has_limit:
        speed_caption = ('Measured speed (solid, highest per time bucket) against the allowed '
                         'speed (dashed step, lowest per bucket); overspeed shaded. Below: '
                         'every finding on the same time axis, one row per kind.')
    else:
        speed_caption = ('Measured speed only (highest per time bucket): <b>the allowed speed '
                         'was not computed for this recording</b>'
                         + (' (see the notice at the top)' if result.skipped_notice else '')
                         + '. Below: every finding on the same time axis, one row per kind.')
    layout_caption = ('The configuration this recording was checked with. Left: top view in '
                      'base_link, x forward to the right; shaded ring segments mark travel '
                      'headings that no beam covers. Right: the largest safe speed by heading '
                      'at 1 m of free distance, from the configured detection latency, '
                      'reaction time, deceleration and margin.')
    parts = [
        '<h3>Range over time</h3>',
        _img(figure_png_base64(range_figure(result)), 'range over time per sensor',
             'Each dot is the nearest reading of its time bucket, coloured by verdict; '
             'readings without a finite range are drawn at the top edge. Shaded: the '
             "sensor's events. Time in seconds since the bag start."
             + ('' if has_ranges else empty)),
        '<h3>Speed</h3>',
        _img(figure_png_base64(speed_figure(result)), 'measured speed against the limit',
             speed_caption),
        '<h3>Timing</h3>',
        _img(figure_png_base64(timing_figure(result)), 'period and latency histograms',
             'Per sensor, top: time between readings; bottom: worst-case detection latency '
             '(measured firing cycle when known, else the configured one). Dashed and '
             'labelled: the 99th percentile.' + ('' if has_timing else empty), 'small'),
    ]
    if result.skipped_checks:  # the mounts were made up: a drawing of them would mislead
        parts.append('<h3>Sensor layout</h3><p class="muted">Not drawn: the sensor poses and '
                     'the footprint are unknown without a parameter file.</p>')
    else:
        parts += ['<h3>Sensor layout</h3>',
                  _img(_layout_png(result.config, layouts), 'sensor layout, top view',
                       layout_caption)]
    return ''.join(parts)


def _layout_png(config: Config, layouts: dict[Config, str]) -> str:
    """Return the layout figure of ``config`` as base64 PNG, drawn once per configuration."""
    if config not in layouts:
        layouts[config] = figure_png_base64(layout_figure(config))
    return layouts[config]


def _bag_section(i: int, result: BagResult, health: Sequence[SensorHealth], max_events: int,
                 layouts: dict[Config, str]) -> str:
    parts = [f'<section class="bag" id="bag-{i}"><h2>{i}. {esc(result.path)}</h2>',
             health_lines(health)]
    if result.error is not None:
        parts.append('<p class="error"><b>The recording could not be read to its end:</b> '
                     f'{esc(result.error)}. What was readable is reported.</p>')
    span = (f'Bag time {esc(abs_time(result.t_start))} to {esc(abs_time(result.t_end))}, '
            f'{num(result.duration_s, ".1f")} s, {result.messages} messages.')
    parts.append(f'<p>{span}</p>')
    parts.append(f'<p><b>Parameters:</b> {esc(result.config_source or "not stated")}</p>')
    if result.skipped_checks:
        parts.append(f'<p><b>Checks not run:</b> {esc(", ".join(result.skipped_checks))} '
                     '(see the notice at the top).</p>')
    if result.notes:
        notes = ''.join(f'<li>{esc(n)}</li>' for n in result.notes)
        parts.append(f'<h3>Notes</h3><ul class="notes">{notes}</ul>')
    parts.append('<h3>Sensors</h3>')
    parts.append(sensor_tables(result))
    parts.append(_figures(result, layouts))
    parts.append(f'<h3>Events ({len(result.events)})</h3>')
    parts.append(events_table(result, max_events))
    parts.append('</section>')
    return ''.join(parts)


def _nav(results: Sequence[BagResult]) -> str:
    if len(results) < 2:
        return ''
    items = ''.join(f'<li><a href="#bag-{i}">{esc(r.path)}</a></li>'
                    for i, r in enumerate(results, 1))
    return f'<nav><b>Recordings</b><ol>{items}</ol></nav>'


def render_html(results: Sequence[BagResult], *, title: str = 'sonar_guard check',
                generated: str = '', max_events: int = MAX_EVENT_ROWS) -> str:
    """Return one self-contained HTML page reporting ``results`` (no outside resources).

    ``generated`` is shown under the title as given (e.g. when the report was made);
    ``max_events`` caps the rows of each recording's event table.
    """
    health = [assess_recording(r) for r in results]
    body = [_header(results, title, generated), _summary(results, health), _nav(results),
            _key(results)]
    layouts: dict[Config, str] = {}  # recordings checked with one configuration share a figure
    body.extend(_bag_section(i, r, h, max_events, layouts)
                for i, (r, h) in enumerate(zip(results, health), 1))
    body.append(f'<footer>Made by sonar_guard {esc(__version__)}; the caution at the top '
                'applies to every page of this report.</footer>')
    return ('<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
            f'<meta http-equiv="Content-Security-Policy" content="{esc(CSP)}">'
            '<meta name="viewport" content="width=device-width, initial-scale=1">'
            f'<title>{esc(title)}</title><style>{CSS}</style></head>\n<body>\n'
            + '\n'.join(body) + '\n</body></html>\n')


def write_html_atomic(text: str, path: Path) -> None:
    """Write the report whole or not at all; refuse a symbolic link at ``path``.

    The text goes to a temporary file in the same folder, which then replaces ``path``
    (``os.replace``), so no reader sees half a report. Failures raise
    :class:`~sonar_guard.errors.SonarGuardError` with a one-line message.
    """
    write_text_atomic(path, text)

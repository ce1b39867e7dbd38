"""Pieces of the HTML report: sensor status lines and the tables (sensors, verdicts, timing,
events, summary).

Every piece of text taken from a recording is HTML-escaped here. Units live in column
headers only, once per table (a header spanning the columns that share it); cells hold bare
numbers. Times are seconds since the bag start, with the bag time in the cell's tooltip.
"""
from __future__ import annotations

from collections.abc import Iterable, Sequence
import datetime
import html
import math

from sonar_guard.core.monitor import EVENT_KINDS, Event
from sonar_guard.core.readings import Verdict
from sonar_guard.offline.health import LEVELS, SensorHealth
from sonar_guard.offline.html_style import LEVEL_SYMBOLS
from sonar_guard.offline.results import BagResult
from sonar_guard.plots import EVENT_COLOURS, VERDICT_COLOURS

__all__ = [
    'abs_time',
    'esc',
    'events_table',
    'health_lines',
    'kinds_in',
    'num',
    'sensor_tables',
    'summary_table',
    'swatch',
]

DASH = '\u2013'
_EPOCH_MIN_S, _EPOCH_MAX_S = 9.0e8, 4.0e9  # bag times in this span are taken as Unix time
_UNKNOWN_COLOUR = '#adb5bd'
_ALARMING = frozenset({'blind', 'invalid', 'stale', 'late', 'stuck', 'jump'})  # shown red


def esc(value: object) -> str:
    """Return ``value`` as text safe inside HTML content and quoted attributes."""
    return html.escape(str(value), quote=True)


def num(x: float | None, fmt: str = '.3f', scale: float = 1.0) -> str:
    """Format a number (times ``scale``), or a dash when it is missing or not finite."""
    return format(x * scale, fmt) if x is not None and math.isfinite(x) else DASH


def abs_time(t: float) -> str:
    """Describe a bag time (s): the number, and the UTC date when it looks like Unix time."""
    if not math.isfinite(t):
        return DASH
    text = f'{t:.3f} s'
    if _EPOCH_MIN_S <= t <= _EPOCH_MAX_S:
        when = datetime.datetime.fromtimestamp(round(t, 3), tz=datetime.timezone.utc)
        text += f' ({when.strftime("%Y-%m-%d %H:%M:%S.%f")[:-3]} UTC)'
    return text


def swatch(colour: str) -> str:
    """Return a small colour square (decoration beside a word that names the colour)."""
    return f'<span class="swatch" style="background:{esc(colour)}"></span>'


def kinds_in(results: Iterable[BagResult]) -> list[str]:
    """Return the event kinds that occur, contract kinds first, then any others."""
    seen = {e.kind for r in results for e in r.events}
    return [k for k in EVENT_KINDS if k in seen] + sorted(seen - set(EVENT_KINDS))


def _plural(n: int, word: str) -> str:
    return f'{n} {word}{"s" if n != 1 else ""}'


# ------------------------------------------------------------------ sensor health


def _worst_first(health: Sequence[SensorHealth]) -> list[SensorHealth]:
    return sorted(health, key=lambda h: -LEVELS.index(h.level))  # stable within a level


def _badge(level: str) -> str:
    symbol = LEVEL_SYMBOLS.get(level, '?')
    return (f'<span class="badge lvl-{esc(level)}"><span aria-hidden="true">{symbol}</span> '
            f'{esc(level)}</span>')


def health_lines(health: Sequence[SensorHealth], *, compact: bool = False) -> str:
    """Return one status line per sensor, worst first, with advice for those not fine.

    ``compact`` (the overall summary) leaves the advice out and folds fine sensors into one
    line naming them.
    """
    if not health:
        return '<p class="muted">No sensors.</p>'
    items = []
    fine = [h for h in health if h.level == 'fine']
    for h in _worst_first(health):
        if compact and h.level == 'fine':
            continue
        advice = '' if compact or not h.advice else (
            f'<div class="advice"><b>Next:</b> {esc(h.advice)}</div>')
        items.append(f'<li class="lvl-{esc(h.level)}" data-sensor="{esc(h.name)}">'
                     f'{_badge(h.level)} <b>{esc(h.name)}</b>: {esc(h.deciding_text)}'
                     f'{advice}</li>')
    if compact and fine:
        names = ', '.join(esc(h.name) for h in fine)
        items.append(f'<li class="lvl-fine">{_badge("fine")} {names}</li>')
    kind = 'health compact' if compact else 'health'
    return f'<ul class="{kind}">{"".join(items)}</ul>'


# ------------------------------------------------------------------ per-recording tables


def _wide(table: str) -> str:
    """Wrap a table so that, if wider than the page, it scrolls inside itself."""
    return f'<div class="wide">{table}</div>'


def _identity_table(result: BagResult) -> str:
    frames = {s.name: s.frame_id for s in result.config.sensors}
    rows = []
    for s in result.sensors:
        seen = math.isfinite(s.range_min_m) and math.isfinite(s.range_max_m)
        rows.append(f'<tr><td class="text">{esc(s.name)}</td><td class="text">{esc(s.topic)}'
                    f'</td><td class="text">{esc(frames.get(s.name, "")) or DASH}</td>'
                    f'<td>{s.readings}</td><td>{num(s.range_min_m, ".2f") if seen else DASH}'
                    f'</td><td>{num(s.range_max_m, ".2f") if seen else DASH}</td></tr>')
    return _wide(
        '<table class="sensors"><thead><tr><th class="text" rowspan="2">sensor</th>'
        '<th class="text" rowspan="2">topic</th><th class="text" rowspan="2">frame</th>'
        '<th class="num" rowspan="2">readings</th><th colspan="2">range seen (m)</th></tr>'
        '<tr><th class="num">nearest</th><th class="num">farthest</th></tr></thead>'
        f'<tbody>{"".join(rows)}</tbody></table>')


def _verdict_table(result: BagResult) -> str:
    present = {v for s in result.sensors for v, c in s.counts.items() if c}
    shown = [v.value for v in Verdict if v.value == 'ok' or v.value in present]
    head = ''.join(f'<th class="num nowrap">{swatch(VERDICT_COLOURS.get(v, _UNKNOWN_COLOUR))}'
                   f'{esc(v)}</th>' for v in shown)
    rows = []
    for s in result.sensors:
        cells = []
        for v in shown:
            count = s.counts.get(v, 0)
            if not count:
                cells.append('<td class="zero">0</td>')
                continue
            css = ' class="bad"' if v in _ALARMING else ''
            share = 100.0 * count / max(s.readings, 1)
            cells.append(f'<td{css} title="{_plural(count, "reading")}">{share:.1f}</td>')
        rows.append(f'<tr><td class="text">{esc(s.name)}</td>{"".join(cells)}</tr>')
    left_out = len(Verdict) - len(shown)
    note = (f'<p class="muted">Verdicts that never occurred here are left out ({left_out}).'
            '</p>' if left_out else '')
    return _wide(
        '<table class="verdicts"><thead><tr><th class="text" rowspan="2">sensor</th>'
        f'<th colspan="{len(shown)}">share of readings (%)</th></tr><tr>{head}</tr></thead>'
        f'<tbody>{"".join(rows)}</tbody></table>') + note


def _timing_table(result: BagResult) -> str:
    rows = []
    for s in result.sensors:
        values = (s.periods.quantile(0.5), s.periods.quantile(0.99),
                  s.latencies.quantile(0.5), s.latencies.quantile(0.99))
        cells = ''.join(f'<td>{num(v, ".1f", 1e3)}</td>' for v in values)
        rows.append(f'<tr><td class="text">{esc(s.name)}</td>{cells}</tr>')
    return _wide(
        '<table class="timing"><thead><tr><th class="text" rowspan="2">sensor</th>'
        '<th colspan="4">timing (ms)</th></tr><tr><th class="num">period p50</th>'
        '<th class="num">period p99</th><th class="num">latency p50</th>'
        '<th class="num">latency p99</th></tr></thead>'
        f'<tbody>{"".join(rows)}</tbody></table>')


def sensor_tables(result: BagResult) -> str:
    """Return the sensor tables: identity and ranges, verdict shares, timing percentiles."""
    if not result.sensors:
        return '<p class="muted">No sensors.</p>'
    return (_identity_table(result)
            + f'<div class="tables"><div>{_verdict_table(result)}</div>'
            f'<div>{_timing_table(result)}</div></div>')


def events_table(result: BagResult, max_rows: int) -> str:
    """Return the events by start time (at most ``max_rows``), times since the bag start."""
    events = sorted(result.events, key=lambda e: (e.t_start, e.t_end, e.kind, e.sensor or ''))
    if not events:
        return '<p class="muted">No events.</p>'
    shown = events[:max_rows]
    t0 = result.t_start
    rows = [_event_row(i, e, t0) for i, e in enumerate(shown, 1)]
    more = ''
    if len(events) > len(shown):
        rest = len(events) - len(shown)
        more = (f'<p class="more muted">{_plural(rest, "more event")} not shown (the first '
                f'{len(shown)} by start time are listed; the JSON report has them all).</p>')
    start = (f'<p class="muted">Times in seconds since the bag start, bag time '
             f'{esc(abs_time(t0))}; hover a time for its bag time.</p>'
             if math.isfinite(t0) else '')
    return (start + _wide(
        '<table class="events"><thead><tr><th class="num" rowspan="2">#</th>'
        '<th class="text" rowspan="2">kind</th><th class="text" rowspan="2">sensor</th>'
        '<th colspan="3">time (s)</th><th class="text" rowspan="2">detail</th></tr>'
        '<tr><th class="num">start</th><th class="num">end</th><th class="num">duration</th>'
        f'</tr></thead><tbody>{"".join(rows)}</tbody></table>') + more)


def _rel_cell(t: float, t0: float) -> str:
    """Return a table cell with time since bag start (s), bag time in the tooltip."""
    if not math.isfinite(t):
        return f'<td>{DASH}</td>'
    if not math.isfinite(t0):
        return f'<td title="bag time">{t:.3f}</td>'
    return f'<td title="bag time {esc(abs_time(t))}">{t - t0:.3f}</td>'


def _event_row(i: int, e: Event, t0: float) -> str:
    who = 'robot' if e.sensor is None else e.sensor
    return (f'<tr><td>{i}</td><td class="text nowrap">'
            f'{swatch(EVENT_COLOURS.get(e.kind, _UNKNOWN_COLOUR))}{esc(e.kind)}</td>'
            f'<td class="text">{esc(who)}</td>{_rel_cell(e.t_start, t0)}'
            f'{_rel_cell(e.t_end, t0)}<td>{num(e.t_end - e.t_start, ".3f")}</td>'
            f'<td class="text">{esc(e.detail)}</td></tr>')


# ------------------------------------------------------------------ overall summary


def _findings_cell(result: BagResult, kinds: list[str]) -> str:
    counts = {k: 0 for k in kinds}
    for e in result.events:
        counts[e.kind] += 1
    # a non-breaking space keeps each kind with its count; items wrap between them
    items = [f'<span class="nowrap">{swatch(EVENT_COLOURS.get(k, _UNKNOWN_COLOUR))}'
             f'{esc(k)}\u00a0{counts[k]}</span>' for k in kinds if counts[k]]
    return f'<td class="text findings">{" ".join(items) or "none"}</td>'


def _short(name: str, most: int = 32) -> str:
    """Return ``name``, or its start and end around an ellipsis when longer than ``most``."""
    if len(name) <= most:
        return name
    keep = (most - 1) // 2
    return f'{name[:keep]}\u2026{name[-keep:]}'


def summary_table(results: Sequence[BagResult]) -> str:
    """Return one row per recording: its size, findings by kind, lowest limit and status.

    The recording is named by its last path element (shortened in the middle if long); the
    full path is its tooltip and heads its section.
    """
    kinds = kinds_in(results)
    rows = []
    for i, r in enumerate(results, 1):
        _, limits, _ = r.limit.arrays()
        lowest = (f'<td>{num(float(limits.min()), ".2f")}</td>' if limits.size
                  else '<td title="allowed speed not computed">' + DASH + '</td>')
        readings = sum(s.readings for s in r.sensors)
        if r.error is None:
            status = '<td class="text good">complete</td>'
        else:
            status = f'<td class="text bad">stopped early: {esc(r.error)}</td>'
        span = f'from {abs_time(r.t_start)} to {abs_time(r.t_end)}'
        name = _short(r.path.rstrip('/\\').replace('\\', '/').rsplit('/', 1)[-1] or r.path)
        rows.append(
            f'<tr><td>{i}</td><td class="text"><a href="#bag-{i}" title="{esc(r.path)}">'
            f'{esc(name)}</a></td><td title="{esc(span)}">{num(r.duration_s, ".1f")}</td>'
            f'<td>{readings}</td><td>{len(r.events)}</td>{_findings_cell(r, kinds)}'
            f'{lowest}{status}</tr>')
    return _wide(
        '<table class="summary"><thead><tr><th class="num">#</th>'
        '<th class="text">recording</th><th class="num">duration (s)</th>'
        '<th class="num">readings</th><th class="num">events</th>'
        '<th class="text">findings by kind</th><th class="num">lowest allowed speed (m/s)</th>'
        f'<th class="text">status</th></tr></thead><tbody>{"".join(rows)}</tbody></table>')

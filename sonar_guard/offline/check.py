"""`sonar-guard check`: several recordings, in parallel if asked, into one report.

Exit codes: 0 no findings, 1 findings (of the kinds in ``fail_on``), 2 unusable input (a
recording that cannot be opened or breaks off partway; what was readable is still reported).
"""
from __future__ import annotations

from collections.abc import Callable, Sequence
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
import math
import sys
from typing import Any

from sonar_guard import SAFETY_CAUTION
from sonar_guard.core.config import Config
from sonar_guard.core.monitor import EVENT_KINDS
from sonar_guard.errors import ConfigError, RecordingError
from sonar_guard.offline.replay import check_bag
from sonar_guard.offline.results import BagResult

__all__ = ['CheckRun', 'Unusable', 'check_many', 'parse_kinds', 'report_json']

EXIT_OK, EXIT_FINDINGS, EXIT_UNUSABLE = 0, 1, 2


@dataclass(frozen=True, slots=True)
class Unusable:
    """A recording that could not be checked at all, and why (one line)."""

    path: str
    reason: str


@dataclass
class CheckRun:
    """Everything one `check` invocation found."""

    results: list[BagResult] = field(default_factory=list)
    unusable: list[Unusable] = field(default_factory=list)
    fail_on: frozenset[str] = frozenset(EVENT_KINDS)

    @property
    def exit_code(self) -> int:
        """2 unusable or incomplete input, 1 findings of the fail-on kinds, else 0."""
        if self.unusable or any(r.error for r in self.results):
            return EXIT_UNUSABLE
        if any(r.findings(self.fail_on) for r in self.results):
            return EXIT_FINDINGS
        return EXIT_OK


def parse_kinds(text: str | None) -> frozenset[str]:
    """Parse a comma-separated list of event kinds ('all' or None: every kind)."""
    if text is None or text.strip() in ('', 'all'):
        return frozenset(EVENT_KINDS)
    if text.strip() == 'none':
        return frozenset()
    kinds = {k.strip() for k in text.split(',') if k.strip()}
    unknown = sorted(kinds - set(EVENT_KINDS))
    if unknown:
        raise ValueError(f'unknown event kind(s) {", ".join(unknown)}; '
                         f'known: {", ".join(EVENT_KINDS)}, all, none')
    return frozenset(kinds)


def _check_one(args: tuple[str, Config | None, str],
               progress: Callable[[float], None] | None = None) -> BagResult | Unusable:
    """Check one recording; an unusable one becomes an :class:`Unusable` with one line."""
    path, config, source = args
    try:
        return check_bag(path, config, config_source=source, progress=progress)
    except (RecordingError, ConfigError) as err:  # ConfigError: limits found in the messages
        return Unusable(path, ' '.join(str(err).split()))


def check_many(paths: Sequence[str], config: Config | None, *, config_source: str = '',
               jobs: int = 1, fail_on: frozenset[str] = frozenset(EVENT_KINDS),
               progress: Callable[[str, float], None] | None = None) -> CheckRun:
    """Check every recording; ``jobs`` > 1 checks them in parallel processes."""
    run = CheckRun(fail_on=fail_on)
    work = [(str(p), config, config_source) for p in paths]
    if jobs > 1 and len(work) > 1:
        with ProcessPoolExecutor(max_workers=min(jobs, len(work))) as pool:
            outcomes = list(pool.map(_check_one, work))
            for path, _, _ in work:
                if progress is not None:
                    progress(path, 1.0)
    else:
        outcomes = [_check_one(item, None if progress is None else
                               (lambda f, p=item[0]: progress(p, f)))
                    for item in work]
    for outcome in outcomes:
        if isinstance(outcome, Unusable):
            run.unusable.append(outcome)
        else:
            run.results.append(outcome)
    return run


def report_json(run: CheckRun) -> dict[str, Any]:
    """Return the contract JSON: summary, sensors, events (plus one section per bag)."""
    sensors, events, bags = [], [], []
    for r in run.results:
        one = r.to_dict()
        bags.append(one)
        sensors.extend({'bag': r.path, **s} for s in one['sensors'])
        events.extend({'bag': r.path, **e} for e in one['events'])
    by_kind = {k: 0 for k in EVENT_KINDS}
    for e in events:
        by_kind[e['kind']] += 1
    limits = [b['summary']['min_limit_mps'] for b in bags
              if b['summary']['min_limit_mps'] is not None]
    skipped = sorted({k for r in run.results for k in r.skipped_checks})
    notice = next((r.skipped_notice for r in run.results if r.skipped_notice), '')
    summary: dict[str, Any] = {
        'bags': len(run.results) + len(run.unusable),
        'checked': len(run.results),
        'unusable': [{'path': u.path, 'reason': u.reason} for u in run.unusable],
        'incomplete': [{'path': r.path, 'reason': r.error} for r in run.results if r.error],
        'messages': sum(r.messages for r in run.results),
        'readings': sum(b['summary']['readings'] for b in bags),
        'duration_s': math.fsum(r.duration_s for r in run.results),
        'events': len(events),
        'events_by_kind': by_kind,
        'fail_on': sorted(run.fail_on),
        'findings': sum(1 for e in events if e['kind'] in run.fail_on),
        'min_limit_mps': min(limits) if limits else None,
        'skipped_checks': skipped,
        'skipped_notice': notice,
        'exit_code': run.exit_code,
        'caution': SAFETY_CAUTION,
    }
    if len(run.results) == 1 and not run.unusable:
        summary['path'] = run.results[0].path
    return {'summary': summary, 'sensors': sensors, 'events': events, 'bags': bags}


def print_summary(run: CheckRun, *, file: Any = None, max_events: int = 12) -> None:
    """Print a readable summary: per bag, per sensor verdict shares and timing; findings.

    Each unit is said once, in the column header; the caution and the notice of skipped
    checks are said once, the notice at the top.
    """
    from rich.console import Console
    from rich.padding import Padding
    from rich.table import Table

    console = Console(file=file or sys.stdout)
    if not console.is_terminal:
        console.width = max(console.width, 110)  # piped or captured: room for the table
    notice = next((r.skipped_notice for r in run.results if r.skipped_notice), '')
    if notice:
        console.print(notice, style='bold yellow', highlight=False)
    for u in run.unusable:
        console.print(f'[bold red]unusable[/] {_escape(u.path)}: {_escape(u.reason)}',
                      markup=True, highlight=False)
    for r in run.results:
        state = 'complete' if r.error is None else f'[red]INCOMPLETE: {_escape(r.error)}[/]'
        console.print(f'\n[bold]{_escape(r.path)}[/]: {r.duration_s:.1f} s of bag time, '
                      f'{sum(s.readings for s in r.sensors)} readings, {state}',
                      highlight=False)
        console.print(f'  parameters: {_escape(r.config_source)}', style='dim', highlight=False)
        for note in r.notes:
            console.print(f'  note: {_escape(note)}', style='yellow', highlight=False)
        _print_health(console, r)
        table = Table(show_edge=False, pad_edge=False)
        for col in ('sensor', 'readings', 'ok %', 'no echo %', 'blind %', 'other %',
                    'period ms', 'latency ms', 'range m'):
            table.add_column(col, justify='left' if col == 'sensor' else 'right',
                             no_wrap=True)
        for s in r.sensors:
            d = s.to_dict()
            n = max(s.readings, 1)
            other = s.readings - s.counts['ok'] - s.counts['no_echo'] - s.counts['blind']
            table.add_row(
                _escape(s.name), str(s.readings), _pct(s.counts['ok'], n),
                _pct(s.counts['no_echo'], n), _pct(s.counts['blind'], n), _pct(other, n),
                _ms(d['period_p50_s']), _ms(d['latency_p99_s']),
                _span(d['range_min_m'], d['range_max_m']))
        console.print(Padding(table, (0, 0, 0, 2)))
        console.print('  period: median time between readings; latency: worst-case detection '
                      'latency (99th percentile) from the measured period', style='dim',
                      highlight=False)
        findings = r.findings(run.fail_on)
        if not findings:
            console.print('  no findings', style='green')
            continue
        counts: dict[str, int] = {}
        for e in findings:
            counts[e.kind] = counts.get(e.kind, 0) + 1
        console.print('  findings: ' + ', '.join(f'{k} {n}' for k, n in counts.items()),
                      style='bold')
        events = Table(show_edge=False, pad_edge=False, box=None)
        for col in ('start s', 'length s', 'kind', 'sensor', 'detail'):
            events.add_column(col, justify='right' if col.endswith(' s') else 'left',
                              no_wrap=col != 'detail')
        for e in findings[:max_events]:
            events.add_row(f'{e.t_start - r.t_start:.2f}', f'{e.t_end - e.t_start:.2f}',
                           e.kind, _escape(e.sensor or 'robot'), _escape(e.detail))
        console.print(Padding(events, (0, 0, 0, 4)))
        if len(findings) > max_events:
            console.print(f'    ... {len(findings) - max_events} more (see --json / --html)')
    console.print(f'\n{SAFETY_CAUTION}', style='dim', highlight=False)


def _print_health(console: Any, result: BagResult) -> None:
    """Print each sensor's level, worst first with its deciding number and what to do next;
    the fine ones on one line."""
    from sonar_guard.offline.health import LEVELS, assess_recording

    health = sorted(assess_recording(result), key=lambda h: -LEVELS.index(h.level))
    style = {'unusable': 'bold red', 'degraded': 'bold yellow'}
    for h in health:
        if h.level == 'fine':
            continue
        console.print(f'  {h.level.upper()} {_escape(h.name)}: {_escape(h.deciding_text)}',
                      style=style[h.level], highlight=False)
        console.print(f'    next: {_escape(h.advice)}', highlight=False)
    fine = [h.name for h in health if h.level == 'fine']
    if fine:
        console.print(f'  fine: {_escape(", ".join(fine))}', style='green', highlight=False)


def _escape(text: str) -> str:
    from rich.markup import escape
    return escape(str(text))


def _pct(count: int, n: int) -> str:
    return f'{100.0 * count / n:.1f}' if count else '-'


def _ms(value_s: float | None) -> str:
    return '-' if value_s is None else f'{value_s * 1e3:.0f}'


def _span(a: float | None, b: float | None) -> str:
    return '-' if a is None or b is None else f'{a:.2f}-{b:.2f}'

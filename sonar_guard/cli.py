"""The ``sonar-guard`` command: offline tools around the same engine as the live node.

Each subcommand is a function returning an exit code: 0 fine, 1 findings, 2 unusable input
(one line on stderr, no traceback unless ``--debug``).
"""
from __future__ import annotations

import argparse
from collections.abc import Callable, Sequence
import json
import math
from pathlib import Path
import re
import sys
from typing import NoReturn

from sonar_guard import SAFETY_CAUTION, __version__
from sonar_guard.budget import budget_of
from sonar_guard.core.config import Config, build_config, parse_params_yaml
from sonar_guard.core.monitor import EVENT_KINDS
from sonar_guard.errors import ConfigError, SonarGuardError
from sonar_guard.paths import default_params_path

__all__ = ['load_config_file', 'main']

EXIT_OK, EXIT_FINDINGS, EXIT_UNUSABLE = 0, 1, 2


class UsageError(SonarGuardError):
    """A command-line argument is wrong; reported in one line with a pointer to --help."""


class _Parser(argparse.ArgumentParser):
    """An argument parser whose errors are one line on stderr (exit 2), not the usage block."""

    def error(self, message: str) -> NoReturn:
        """Print one line naming the problem and where help is, then exit 2."""
        self.exit(EXIT_UNUSABLE, f'{self.prog}: error: {message} (see {self.prog} --help)\n')


def _number(*, low: float, high: float, unit: str, low_open: bool = True,
            integer: bool = False) -> Callable[[str], float]:
    """Return an argparse type that takes only finite numbers in a range (unit for messages)."""
    def show(x: float) -> str:
        return str(int(x)) if integer else f'{x:g}'

    rule = f'{">" if low_open else ">="} {show(low)} and <= {show(high)}'
    rule += f' {unit}' if unit else ''
    kind = 'a whole number' if integer else 'a finite number'

    def parse(text: str) -> float:
        try:
            value = int(text) if integer else float(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f'must be {kind} {rule}: {text!r}') from None
        if not math.isfinite(value) or value < low or (low_open and value == low) \
                or value > high:
            raise argparse.ArgumentTypeError(f'must be {kind} {rule}: {text!r}')
        return value
    return parse


_TOPIC_RE = re.compile(r'^/?[A-Za-z_][A-Za-z0-9_]*(/[A-Za-z_][A-Za-z0-9_]*)*$')


def _topic(text: str) -> str:
    """Argparse type of a ROS topic name."""
    if not _TOPIC_RE.match(text):
        raise argparse.ArgumentTypeError(
            f'must be a ROS topic name (letters, digits, _ and /): {text!r}')
    return text


def _output(text: str) -> str:
    """Argparse type of an output file path: not empty (the path itself is checked later)."""
    if not text.strip():
        raise argparse.ArgumentTypeError('needs a file name, got an empty one')
    return text


def load_config_file(path: Path | str | None) -> Config:
    """Read and validate a ROS 2 parameter file (the installed default when None)."""
    p = Path(path) if path is not None else default_params_path()
    try:
        text = p.read_text(encoding='utf-8')
    except FileNotFoundError:
        raise ConfigError([f'parameter file not found: {p}'], source=str(p)) from None
    except (OSError, UnicodeDecodeError) as err:
        raise ConfigError([f'cannot read parameter file: {err}'], source=str(p)) from None
    return build_config(parse_params_yaml(text, source=str(p)), source=str(p))


def _fmt(value: float | None, scale: float = 1.0, digits: int = 1) -> str:
    return '-' if value is None else f'{value * scale:.{digits}f}'


def cmd_budget(args: argparse.Namespace) -> int:
    """Print the timing and speed budget of a parameter file."""
    if args.plot:
        from sonar_guard.offline.atomic import check_output_path
        check_output_path(args.plot)
    config = load_config_file(args.params)
    budget = budget_of(config)
    if args.plot:
        from sonar_guard.plots import save_layout_png
        save_layout_png(config, args.plot, args.free_distance)
        print(f'layout plot written to {args.plot}', file=sys.stderr)
    if args.json:
        json.dump(budget.to_dict(), sys.stdout, indent=2)
        sys.stdout.write('\n')
        return EXIT_OK
    from rich.console import Console
    from rich.table import Table

    console = Console()
    sensors = Table(title=f'Firing schedule: one cycle of every slot takes '
                          f'{budget.cycle_s * 1e3:.1f} ms')
    for col in ('sensor', 'slot', 'echo timeout ms', 'blind range m',
                'detection latency ms'):
        sensors.add_column(col, justify='left' if col == 'sensor' else 'right',
                           no_wrap=col == 'sensor')
    for t in budget.sensors:
        sensors.add_row(t.name, str(t.slot), _fmt(t.echo_timeout_s, 1e3),
                        _fmt(t.blind_range_m, digits=3), _fmt(t.detection_latency_s, 1e3))
    console.print(sensors)
    lim = config.limits
    speeds = Table(title=(f'Largest safe speed (m/s) by heading and free distance\n'
                          f'decel {config.robot.decel_mps2:g} m/s^2, margin {lim.margin_m:g} m, '
                          f'cap {lim.max_speed_mps:g} m/s'))
    speeds.add_column('heading', no_wrap=True)
    speeds.add_column('covered by', overflow='fold', min_width=12)
    speeds.add_column('latency ms', justify='right')
    speeds.add_column('full width from m', justify='right', max_width=7)
    for d in (h[0] for h in budget.headings[0].speeds):
        speeds.add_column(f'{d:g} m', justify='right')
    for h in budget.headings:
        cells = [f'{a:.2f}' + ('*' if v > a else '') for _, v, a in h.speeds]
        speeds.add_row(h.name, '\n'.join(h.sensors) or 'not covered: fallback_speed',
                       _fmt(h.latency_s, 1e3),
                       'nowhere' if h.full_width_from_m is None else f'{h.full_width_from_m:.2f}',
                       *cells)
    console.print(speeds)
    console.print('* capped by limits.max_speed. Latency: worst detection latency of the '
                  'covering sensors + reaction time. Full width from: the distance beyond the '
                  "footprint's leading edge from which on the cones cover the whole swept "
                  'width (nowhere: not within max range).')
    from sonar_guard.core.watch import unwatched_lines
    console.print('What no cone watches:')
    for line in unwatched_lines(config):
        console.print(f'- {line}', highlight=False)
    console.print(SAFETY_CAUTION, style='dim')
    return EXIT_OK


def cmd_check(args: argparse.Namespace) -> int:
    """Replay recordings through the engine and report what they show."""
    from sonar_guard.offline.atomic import check_output_path, write_text_atomic
    from sonar_guard.offline.check import check_many, parse_kinds, print_summary, report_json

    try:
        fail_on = parse_kinds(args.fail_on)
    except ValueError as err:
        raise UsageError(f'--fail-on: {err}') from None
    for output in (args.json if args.json != '-' else None, args.html):
        if output:  # refuse a bad output path now, not after the check, and write none
            check_output_path(output)
    config, source = None, ''
    if args.params:
        config = load_config_file(args.params)
        source = str(args.params)
    run = _with_progress(
        lambda progress: check_many(args.bags, config, config_source=source, jobs=args.jobs,
                                    fail_on=fail_on, progress=progress),
        enabled=not args.quiet and sys.stderr.isatty(), total=len(args.bags))
    if args.json:
        text = json.dumps(report_json(run), indent=2, allow_nan=False) + '\n'
        if args.json == '-':
            sys.stdout.write(text)
        else:
            write_text_atomic(args.json, text)
    if args.html:
        from sonar_guard.offline.html import render_html
        write_text_atomic(args.html, render_html(run.results))
    if not args.quiet and args.json != '-':
        print_summary(run)
    for u in run.unusable:
        print(f'sonar-guard: error: {u.reason}', file=sys.stderr)
    for r in run.results:
        if r.error:
            print(f'sonar-guard: error: {r.error} (reported what was readable)',
                  file=sys.stderr)
    return run.exit_code


def cmd_tune(args: argparse.Namespace) -> int:
    """Propose parameter values from recordings, each with its evidence."""
    from sonar_guard.offline.atomic import check_output_path, write_text_atomic
    from sonar_guard.offline.tune import gather, propose, render_params

    if args.output:
        check_output_path(args.output)
    config = load_config_file(args.params)
    evidence = gather(args.bags, config, cmd_topic=args.cmd_topic)
    if evidence.unreadable:  # proposals from part of the input would mislead: write nothing
        for reason in evidence.unreadable:
            print(f'sonar-guard: error: {reason}', file=sys.stderr)
        return EXIT_UNUSABLE
    proposals = propose(config, evidence)
    text = render_params(config, proposals, sources=[str(b) for b in args.bags])
    build_config(parse_params_yaml(text, source='tune output'), source='tune output')
    if args.output:
        write_text_atomic(args.output, text)
    else:
        sys.stdout.write(text)
    report = sys.stderr if not args.output else sys.stdout
    for note in evidence.notes:
        print(f'note: {note}', file=report)
    if not proposals:
        print('no proposals: the recordings agree with the parameters', file=report)
    for p in proposals:
        print(('not applied: ' if p.looser else 'proposed: ') + p.describe(),
              file=report)
    return EXIT_OK


def cmd_demo(args: argparse.Namespace) -> int:
    """Simulate the invented corridor run, record it, check it and write the report."""
    import time

    from sonar_guard.offline.atomic import (
        OutputError,
        check_output_path,
        os_error_advice,
        write_text_atomic,
    )
    from sonar_guard.offline.check import check_many, report_json
    from sonar_guard.offline.html import render_html
    from sonar_guard.sim.demo import (
        DEMO_DURATION_S,
        explain_findings,
        match_planned,
        write_demo_bag,
    )

    out = Path(args.out)
    bag = out / 'corridor_run'
    # refuse symbolic links before anything is written: following one would put the demo's
    # files, or delete an old recording, somewhere the user did not name
    if out.is_symlink():
        raise OutputError(f'{out}: is a symbolic link; name a real folder for the demo')
    if out.exists() and not out.is_dir():
        raise OutputError(f'{out}: exists and is not a folder')
    if bag.is_symlink():
        raise OutputError(f'{bag}: is a symbolic link; remove it or choose another --out')
    if bag.exists() and not bag.is_dir():
        raise OutputError(f'{bag}: exists and is not a recording folder; remove it or choose '
                          'another --out')
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise OutputError(f'{out}: cannot create the folder: {os_error_advice(err)}') from None
    for report_path in (out / 'report.json', out / 'report.html'):
        check_output_path(report_path)
    config = load_config_file(None)
    if bag.exists():
        import shutil
        shutil.rmtree(bag)  # the demo's own old recording (links inside are removed, not followed)
    started = time.monotonic()
    duration = min(args.duration or DEMO_DURATION_S, DEMO_DURATION_S)
    print(f'simulating {duration:g} s of the linen cart in the service corridor ...',
          flush=True)
    try:
        write_demo_bag(bag, config, duration_s=duration, seed=args.seed)
    except OSError as err:
        raise OutputError(f'{bag}: cannot write the recording: {os_error_advice(err)}'
                          ) from None
    print(f'checking the recording {bag} ...', flush=True)
    run = check_many([str(bag)], config, config_source='the demo cart (config/sonar_guard.yaml)')
    lines, kinds = [], []
    for result in run.results:  # say in the report which finding shows which happening
        for planned, hits in match_planned(result.events, result.t_start):
            if planned.start > duration:
                continue
            found = ', '.join(sorted({f'{e.kind} ({e.sensor or "robot"})' for e in hits}))
            line = (f'planned {planned.start:.0f}-{planned.end:.0f} s: {planned.what}: '
                    + (f'found: {found}' if hits else 'NOT FOUND'))
            result.notes.append(line)
            lines.append(line)
        for line in explain_findings(result.events, result.t_start):  # every kind, and why
            result.notes.append(f'finding {line}')
            kinds.append(line)
    report = report_json(run)
    json_path = write_text_atomic(out / 'report.json',
                                  json.dumps(report, indent=2, allow_nan=False) + '\n')
    html_path = write_text_atomic(out / 'report.html',
                                  render_html(run.results, title='sonar_guard demo: linen '
                                              'cart in a hotel service corridor'))
    if lines:
        print('\nplanned happenings and what the check found:')
        for line in lines:
            print('  ' + line)
    print('\nfindings by kind, and why they happened:')
    for line in kinds or ['none']:
        print('  ' + line)
    print(f'\nreport: {html_path.resolve()}\njson:   {json_path.resolve()}\n'
          f'done in {time.monotonic() - started:.1f} s\n\n{SAFETY_CAUTION}')
    return EXIT_OK if run.exit_code != EXIT_UNUSABLE else EXIT_UNUSABLE


def _with_progress(work, *, enabled: bool, total: int):  # type: ignore[no-untyped-def]
    """Run ``work(progress)`` with a progress bar on stderr when ``enabled``."""
    if not enabled:
        return work(None)
    from rich.console import Console
    from rich.progress import BarColumn, Progress, TextColumn, TimeRemainingColumn

    columns = (TextColumn('{task.description}'), BarColumn(),
               TextColumn('{task.percentage:>3.0f}%'), TimeRemainingColumn())
    with Progress(*columns, console=Console(stderr=True), transient=True) as bar:
        tasks: dict[str, int] = {}

        def progress(path: str, fraction: float) -> None:
            if path not in tasks:
                tasks[path] = bar.add_task(Path(path).name, total=1.0)
            bar.update(tasks[path], completed=fraction)
        return work(progress)


def build_parser() -> argparse.ArgumentParser:
    """Return the argument parser of ``sonar-guard``."""
    parser = _Parser(
        prog='sonar-guard',
        description='Check ultrasonic range readings and work out how fast a robot may go '
                    'so that it can still stop within what trustworthy readings show.',
        epilog='Safety: ' + SAFETY_CAUTION,
    )
    parser.add_argument('--version', action='version', version=f'%(prog)s {__version__}')
    parser.add_argument('--debug', action='store_true',
                        help='show the traceback of errors instead of one line')
    sub = parser.add_subparsers(dest='command', metavar='COMMAND')
    budget = sub.add_parser(
        'budget', help='timing and speed budget of a parameter file',
        description='Per sensor: slot, echo timeout, blind range, cycle and worst-case '
                    'detection latency. Per travel heading: covering sensors and the largest '
                    'safe speed at a few free distances.',
        epilog='Safety: ' + SAFETY_CAUTION)
    budget.add_argument('--params', metavar='FILE',
                        help='ROS 2 parameter file (default: the installed '
                             'config/sonar_guard.yaml)')
    budget.add_argument('--json', action='store_true', help='print JSON instead of tables')
    budget.add_argument('--plot', metavar='FILE.png', type=_output,
                        help='also draw the layout: footprint, mounts and cones with uncovered '
                             'headings shaded, and the largest safe speed by heading')
    budget.add_argument('--free-distance', default=1.0, metavar='M',
                        type=_number(low=0.0, high=100.0, unit='m'),
                        help='free distance for the speed-by-heading plot, m (default 1.0)')
    budget.set_defaults(func=cmd_budget)

    check = sub.add_parser(
        'check', help='replay recorded bags through the engine and report findings',
        description='Replay ROS 2 bags (a directory with metadata.yaml, or a .mcap file) or '
                    'ROS 1 .bag files through the same engine as the live node, driven by bag '
                    'time. Exit 0: no findings; 1: findings; 2: unusable input (one line on '
                    'stderr; a recording that breaks off partway is still reported).',
        epilog='Safety: ' + SAFETY_CAUTION)
    check.add_argument('bags', nargs='+', metavar='BAG', help='recordings to check')
    check.add_argument('--params', metavar='FILE',
                       help='ROS 2 parameter file; without it, Range topics are found by type '
                            'and defaults are used (the report says so)')
    check.add_argument('--json', metavar='PATH|-', type=_output,
                       help='write the JSON report ("-": stdout)')
    check.add_argument('--html', metavar='PATH', type=_output,
                       help='write a self-contained HTML report')
    check.add_argument('--fail-on', metavar='KINDS',
                       help='comma-separated event kinds that count as findings for the exit '
                            f'code (default all: {", ".join(EVENT_KINDS)}; or none)')
    check.add_argument('--jobs', default=1, metavar='N',
                       type=_number(low=1, high=1024, unit='', low_open=False, integer=True),
                       help='check N recordings in parallel processes (default 1)')
    check.add_argument('--quiet', action='store_true', help='no terminal summary')
    check.set_defaults(func=cmd_check)

    tune = sub.add_parser(
        'tune', help='propose parameter values from recordings, with the evidence',
        description='Propose min_range, max_range, slot timing, stale_after, decel and '
                    'reaction_time from what recordings show. Values less conservative than '
                    'the current ones are never applied: the file keeps the current value and '
                    'shows the looser one in a comment to review.',
        epilog='Safety: ' + SAFETY_CAUTION)
    tune.add_argument('bags', nargs='+', metavar='BAG', help='recordings to learn from')
    tune.add_argument('--params', metavar='FILE',
                      help='current parameter file (default: the installed one)')
    tune.add_argument('-o', '--output', metavar='FILE', type=_output,
                      help='write the proposed parameter file here (default: stdout)')
    tune.add_argument('--cmd-topic', default='cmd_vel', metavar='TOPIC', type=_topic,
                      help='velocity commands for the reaction time (default cmd_vel)')
    tune.set_defaults(func=cmd_tune)

    demo = sub.add_parser(
        'demo', help='simulate the invented demo run, record it, check it, write the report',
        description='A battery cart carrying linen along an invented hotel service corridor '
                    '(config/sonar_guard.yaml): a door swings open, a trolley crosses, a glass '
                    'partition stands at an angle, a person steps close, a cold loading dock. '
                    'Writes the recording, report.html and report.json into --out.',
        epilog='Safety: ' + SAFETY_CAUTION)
    demo.add_argument('--out', default='demo_out', metavar='DIR',
                      help='output folder (default ./demo_out)')
    demo.add_argument('--duration', default=None, metavar='S',
                      type=_number(low=0.0, high=3600.0, unit='s'),
                      help='simulate only the first S seconds (default: the whole run; '
                           'a longer value is cut to it)')
    demo.add_argument('--seed', default=7, metavar='N',
                      type=_number(low=0, high=2**32 - 1, unit='', low_open=False,
                                   integer=True),
                      help='noise seed, a whole number >= 0 (default 7)')
    demo.set_defaults(func=cmd_demo)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run ``sonar-guard``; return the exit code."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as done:  # --help, --version (0) or a bad argument (2, one line)
        return int(done.code or 0)
    if not getattr(args, 'func', None):
        print('sonar-guard: error: name a command: budget, check, tune or demo '
              '(see sonar-guard --help)', file=sys.stderr)
        return EXIT_UNUSABLE
    try:
        return int(args.func(args))
    except UsageError as err:
        print(f'sonar-guard {args.command}: error: {err} '
              f'(see sonar-guard {args.command} --help)', file=sys.stderr)
        return EXIT_UNUSABLE
    except SonarGuardError as err:
        if args.debug:
            raise
        print(f'sonar-guard: error: {err}', file=sys.stderr)
        return EXIT_UNUSABLE
    except KeyboardInterrupt:
        print('sonar-guard: interrupted; nothing more was written', file=sys.stderr)
        return 130
    except BrokenPipeError:
        return EXIT_OK

"""The ``sonar-guard`` command: offline tools around the same engine as the live node.

Each subcommand is a function returning an exit code: 0 fine, 1 findings, 2 unusable input
(one line on stderr, no traceback unless ``--debug``).
"""
from __future__ import annotations

import argparse
from collections.abc import Sequence
import json
from pathlib import Path
import sys

from sonar_guard import SAFETY_CAUTION, __version__
from sonar_guard.budget import budget_of
from sonar_guard.core.config import Config, build_config, parse_params_yaml
from sonar_guard.errors import ConfigError, SonarGuardError
from sonar_guard.paths import default_params_path

__all__ = ['load_config_file', 'main']

EXIT_OK, EXIT_FINDINGS, EXIT_UNUSABLE = 0, 1, 2


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
    config = load_config_file(args.params)
    for warning in config.warnings:
        print(f'warning: {warning}', file=sys.stderr)
    budget = budget_of(config)
    if args.json:
        json.dump(budget.to_dict(), sys.stdout, indent=2)
        sys.stdout.write('\n')
        return EXIT_OK
    from rich.console import Console
    from rich.table import Table

    console = Console()
    sensors = Table(title=f'Firing schedule: cycle {budget.cycle_s * 1e3:.1f} ms')
    for col in ('sensor', 'slot', 'echo timeout ms', 'blind range m', 'cycle ms',
                'detection latency ms'):
        sensors.add_column(col, justify='left' if col == 'sensor' else 'right',
                           no_wrap=col == 'sensor')
    for t in budget.sensors:
        sensors.add_row(t.name, str(t.slot), _fmt(t.echo_timeout_s, 1e3),
                        _fmt(t.blind_range_m, digits=3), _fmt(t.cycle_s, 1e3),
                        _fmt(t.detection_latency_s, 1e3))
    console.print(sensors)
    lim = config.limits
    speeds = Table(title=(f'Largest safe speed (m/s) by heading and free distance\n'
                          f'decel {config.robot.decel_mps2:g} m/s^2, margin {lim.margin_m:g} m, '
                          f'cap {lim.max_speed_mps:g} m/s'))
    speeds.add_column('heading', no_wrap=True)
    speeds.add_column('covered by', overflow='fold', min_width=12)
    speeds.add_column('latency ms', justify='right')
    for d in (h[0] for h in budget.headings[0].speeds):
        speeds.add_column(f'{d:g} m', justify='right')
    for h in budget.headings:
        cells = [f'{a:.2f}' + ('*' if v > a else '') for _, v, a in h.speeds]
        speeds.add_row(h.name, '\n'.join(h.sensors) or 'not covered: fallback_speed',
                       _fmt(h.latency_s, 1e3), *cells)
    console.print(speeds)
    console.print('* capped by limits.max_speed. Latency: worst detection latency of the '
                  'covering sensors + reaction time.')
    console.print(SAFETY_CAUTION, style='dim')
    return EXIT_OK


def build_parser() -> argparse.ArgumentParser:
    """Return the argument parser of ``sonar-guard``."""
    parser = argparse.ArgumentParser(
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
    budget.set_defaults(func=cmd_budget)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run ``sonar-guard``; return the exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, 'func', None):
        parser.print_help()
        return EXIT_UNUSABLE
    try:
        return int(args.func(args))
    except SonarGuardError as err:
        if args.debug:
            raise
        print(f'sonar-guard: error: {err}', file=sys.stderr)
        return EXIT_UNUSABLE
    except BrokenPipeError:
        return EXIT_OK

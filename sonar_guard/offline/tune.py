"""`sonar-guard tune`: propose parameter values from what recordings show, with the evidence.

Each proposal names the key, the current value, the proposed value and the evidence. A
proposal less conservative than the current value (a shorter blind range, a longer silence
before fallback, a harder brake, a shorter reaction time, ...) is never applied silently: the
written file keeps the current value and shows the looser one in a comment to review.
"""
from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
import math
import textwrap
from typing import Any

import numpy as np
import yaml

from sonar_guard import SAFETY_CAUTION
from sonar_guard.core.config import Config, global_specs
from sonar_guard.core.schedule import Schedule
from sonar_guard.errors import RecordingError
from sonar_guard.offline.bags import TWIST_STAMPED_TYPE, TWIST_TYPE, BagSource
from sonar_guard.offline.replay import wire_topics
from sonar_guard.ros.convert import stamp_to_s

__all__ = ['Evidence', 'Proposal', 'gather', 'propose', 'render_params']

_STALE_HEADROOM = 1.5
_BRAKE_MIN_DROP_MPS = 0.15  # a braking stretch must shed at least this much speed
_BRAKE_MIN_S = 0.2  # ... over at least this long
_BRAKE_MIN_SAMPLES = 5  # ... and this many odometry samples
_BRAKE_MAX_STEP_S = 0.2  # a longer gap in odometry ends a stretch
_MIN_STOPS = 3  # braking stretches needed before decel is proposed
_CMD_STEP_MPS = 0.1  # a command change this large is a step to time the response to
_RESPONSE_MPS = 0.03  # measured speed moving this much toward the new command is a response
_CEILING_SHARE = 0.01  # a reported maximum held by this share of readings is the no-echo value


@dataclass
class _SensorEvidence:
    ranges: list[float] = field(default_factory=list)  # finite, non-negative, decimated
    consistent_min: float = math.inf
    top: float = -math.inf
    periods: list[float] = field(default_factory=list)
    last_stamp: float = math.nan
    last_range: float = math.nan
    count: int = 0
    infinite: int = 0


@dataclass
class Evidence:
    """What the recordings show, gathered in one streaming pass each."""

    bags: list[str] = field(default_factory=list)
    sensors: dict[str, _SensorEvidence] = field(default_factory=dict)
    decels: list[float] = field(default_factory=list)  # m/s^2 of each braking stretch
    reactions: list[float] = field(default_factory=list)  # s from command step to response
    notes: list[str] = field(default_factory=list)
    unreadable: list[str] = field(default_factory=list)  # one line per recording not usable


@dataclass(frozen=True, slots=True)
class Proposal:
    """One proposed value: key, current, proposed, evidence, and whether it is looser."""

    key: str
    current: Any
    proposed: Any
    evidence: str
    looser: bool

    def describe(self) -> str:
        """Return a one-line description."""
        flag = '  LOOSER than current: review' if self.looser else ''
        return f'{self.key}: {self.current!r} -> {self.proposed!r} ({self.evidence}){flag}'


def gather(paths: Sequence[str], config: Config, *, cmd_topic: str = 'cmd_vel') -> Evidence:
    """Read every recording once and collect the evidence for proposals."""
    ev = Evidence(sensors={s.name: _SensorEvidence() for s in config.sensors})
    for path in paths:
        before = sum(se.count for se in ev.sensors.values())
        try:
            _gather_one(str(path), config, ev, cmd_topic)
        except RecordingError as err:
            ev.unreadable.append(str(err))
        else:
            if sum(se.count for se in ev.sensors.values()) == before:
                ev.unreadable.append(f'{path}: no readings of the configured sensors; check '
                                     'the sensor topics in --params')
        ev.bags.append(str(path))
    return ev


def _gather_one(path: str, config: Config, ev: Evidence, cmd_topic: str) -> None:
    with BagSource(path) as bag:
        wiring, notes = wire_topics(config, bag.topics)
        ev.notes.extend(f'{path}: {n}' for n in notes)
        cmds = [t for t in bag.topics
                if (t == '/' + cmd_topic or t.endswith('/' + cmd_topic))
                and bag.topics[t].msgtype in (TWIST_TYPE, TWIST_STAMPED_TYPE)]
        topics = list(wiring.sensors) + ([wiring.odometry] if wiring.odometry else [])
        topics += cmds[:1]
        brake = _BrakeTracker(ev.decels)
        react = _ReactionTracker(ev.reactions)
        for topic, t_s, msg in bag.messages(topics):
            name = wiring.sensors.get(topic)
            if name is not None:
                _reading(ev.sensors[name], config.sensor(name), msg)
            elif topic == wiring.odometry:
                twist = msg.twist.twist
                speed = math.hypot(twist.linear.x, twist.linear.y)
                if math.isfinite(speed):
                    brake.add(t_s, speed)
                    react.odometry(t_s, twist.linear.x)
            else:
                linear = msg.twist.linear if hasattr(msg, 'twist') else msg.linear
                react.command(t_s, linear.x)
        brake.finish()
        if len(ev.decels) < _MIN_STOPS:
            ev.notes.append(f'{path}: fewer than {_MIN_STOPS} clean braking stretches so far: '
                            'decel is proposed from at least that many')
        if not cmds:
            ev.notes.append(f'{path}: no {cmd_topic} commands recorded: reaction time not '
                            'measured')


def _reading(se: _SensorEvidence, sensor: Any, msg: Any) -> None:
    r = float(msg.range)
    stamp = stamp_to_s(msg.header.stamp)
    se.count += 1
    if math.isfinite(se.last_stamp) and stamp > se.last_stamp:
        se.periods.append(stamp - se.last_stamp)
    se.last_stamp = stamp
    if not math.isfinite(r) or r < 0:
        se.infinite += int(math.isinf(r) and r > 0)
        se.last_range = math.nan
        return
    if len(se.ranges) < 200_000:
        se.ranges.append(r)
    se.top = max(se.top, r)
    previous = se.last_range
    se.last_range = r
    # a reading that agrees with its predecessor (no jump) is one that behaves
    if math.isfinite(previous) and abs(r - previous) <= max(sensor.resolution_m * 3, 0.02):
        se.consistent_min = min(se.consistent_min, r)


class _BrakeTracker:
    """Find stretches where measured speed falls, and their mean deceleration."""

    def __init__(self, out: list[float]) -> None:
        self.out = out
        self.start: tuple[float, float] | None = None
        self.last: tuple[float, float] | None = None
        self.samples = 0

    def add(self, t: float, speed: float) -> None:
        last = self.last
        self.last = (t, speed)
        if last is None:
            return
        if speed < last[1] - 1e-4 and t - last[0] <= _BRAKE_MAX_STEP_S:
            if self.start is None:
                self.start, self.samples = last, 1
            self.samples += 1
            return
        self._close(last)

    def finish(self) -> None:
        """Close a stretch still open at the end of the recording."""
        if self.last is not None:
            self._close(self.last)

    def _close(self, end: tuple[float, float]) -> None:
        if self.start is not None:
            drop = self.start[1] - end[1]
            dt = end[0] - self.start[0]
            # a real stop takes time over several samples; a one-sample step is a glitch
            if drop >= _BRAKE_MIN_DROP_MPS and dt >= _BRAKE_MIN_S and \
                    self.samples >= _BRAKE_MIN_SAMPLES:
                self.out.append(drop / dt)
        self.start = None


class _ReactionTracker:
    """Time from a step in the commanded speed to the measured speed following it."""

    def __init__(self, out: list[float]) -> None:
        self.out = out
        self.cmd = math.nan
        self.pending: tuple[float, float, float] | None = None  # (t, speed then, target)
        self.onset: float | None = None
        self.speed = math.nan

    def command(self, t: float, vx: float) -> None:
        if not math.isfinite(vx):
            return
        if math.isfinite(self.cmd) and abs(vx - self.cmd) >= _CMD_STEP_MPS and \
                math.isfinite(self.speed) and self.pending is None:
            self.pending = (t, self.speed, vx)
        self.cmd = vx

    def odometry(self, t: float, vx: float) -> None:
        self.speed = vx
        if self.pending is None:
            return
        t0, v0, target = self.pending
        toward = (vx - v0) * math.copysign(1.0, target - v0)
        if self.onset is None and toward > 0.2 * _RESPONSE_MPS:
            self.onset = t  # the first sample that moved: when the response began
        if toward >= _RESPONSE_MPS:  # a clear response: time it from its onset
            self.out.append((self.onset if self.onset is not None else t) - t0)
            self.pending, self.onset = None, None
        elif t - t0 > 2.0:
            self.pending, self.onset = None, None  # no response within 2 s: not a clean step


def _floor_to(value: float, step: float) -> float:
    return math.floor(value / step + 1e-9) * step


def _ceil_to(value: float, step: float) -> float:
    return math.ceil(value / step - 1e-9) * step


def propose(config: Config, ev: Evidence) -> list[Proposal]:
    """Turn evidence into proposals; looser ones are marked."""
    out: list[Proposal] = []
    gaps: list[float] = []
    medians: list[float] = []
    for s in config.sensors:
        se = ev.sensors[s.name]
        if se.periods:
            gaps.append(max(se.periods))
            medians.append(float(np.median(se.periods)))
        # only readings below the configured blind range say anything about it: an absence
        # of close readings is no evidence for a larger one
        if math.isfinite(se.consistent_min) and se.consistent_min < s.min_range_m:
            value = round(max(_floor_to(se.consistent_min, s.resolution_m), 0.0), 4)
            if abs(value - s.min_range_m) > s.resolution_m / 2:
                below = sum(1 for r in se.ranges if r < s.min_range_m)
                out.append(Proposal(
                    f'sensors.{s.name}.min_range', s.min_range_m, value,
                    f'smallest reading that agrees with its predecessor: '
                    f'{se.consistent_min:.3f} m over {se.count} readings '
                    f'({below} below the current value)',
                    looser=value < s.min_range_m))
        ceiling = _ceiling(se, s.resolution_m)
        if ceiling is not None and abs(ceiling - s.max_range_m) > s.resolution_m / 2:
            out.append(Proposal(
                f'sensors.{s.name}.max_range', s.max_range_m, round(ceiling, 4),
                f'{se.count} readings; the largest finite value, {ceiling:.3f} m, is held by '
                f'{_share_at(se, ceiling, s.resolution_m):.1%} of them: the no-echo reading',
                looser=ceiling > s.max_range_m))
    if gaps:
        worst = max(gaps)
        value = round(max(_ceil_to(worst * _STALE_HEADROOM, 0.01), 2 * max(medians)), 3)
        # a reading must be able to arrive late before it is stale: stay above every
        # late_after, or the proposed file would not load
        late = max(s.late_after_s for s in config.sensors)
        kept_above = ''
        if value <= late:
            value = round(_ceil_to(late + 0.005, 0.01), 3)
            kept_above = f'; kept above late_after {late:g} s'
        current = config.limits.stale_after_s
        if abs(value - current) > 0.005:
            out.append(Proposal(
                'limits.stale_after', current, value,
                f'worst gap between readings {worst * 1e3:.0f} ms x {_STALE_HEADROOM:g} '
                f'headroom (median period {float(np.median(medians)) * 1e3:.0f} ms)'
                f'{kept_above}',
                looser=value > current))
        slots = len({s.slot for s in config.sensors})
        cycle = float(np.median(medians))
        configured = [s.slot_duration_s for s in config.sensors]
        proposal = round(cycle / slots, 4)
        if all(c == 0 for c in configured):
            planned = Schedule.from_config(config).cycle_s
            if abs(cycle - planned) > 0.1 * planned:
                out.append(Proposal(
                    'sonar.slot_duration', 0.0, proposal,
                    f'measured median period {cycle * 1e3:.1f} ms over {slots} slots, '
                    f'planned cycle {planned * 1e3:.1f} ms from echo timeouts',
                    looser=cycle < planned))
    if len(ev.decels) >= _MIN_STOPS:
        value = round(float(np.percentile(ev.decels, 5)), 3)
        current = config.robot.decel_mps2
        out.append(Proposal(
            'robot.decel', current, value,
            f'{len(ev.decels)} braking stretches in odometry, 5th percentile '
            f'{value:.2f} m/s^2 (median {float(np.median(ev.decels)):.2f})',
            looser=value > current))
    if ev.reactions:
        value = round(float(np.percentile(ev.reactions, 95)), 3)
        current = config.robot.reaction_time_s
        out.append(Proposal(
            'robot.reaction_time', current, value,
            f'{len(ev.reactions)} command steps; odometry followed after '
            f'{float(np.median(ev.reactions)) * 1e3:.0f} ms median, 95th percentile '
            f'{value * 1e3:.0f} ms',
            looser=value < current))
    return out


def _ceiling(se: _SensorEvidence, resolution: float) -> float | None:
    if not se.ranges or not math.isfinite(se.top):
        return None
    if _share_at(se, se.top, resolution) >= _CEILING_SHARE:
        return se.top
    return None


def _share_at(se: _SensorEvidence, value: float, resolution: float) -> float:
    arr = np.asarray(se.ranges)
    return float(np.mean(arr >= value - resolution)) if arr.size else 0.0


# ------------------------------------------------------------------------------ output

_SECTIONS = ('sonar', 'robot', 'limits')


def render_params(config: Config, proposals: Iterable[Proposal], *,
                  sources: Sequence[str] = ()) -> str:
    """Return a parameter file: current values with tighter proposals applied, looser ones
    shown in comments, each with its evidence."""
    values = config.to_parameters()
    comments: dict[str, list[str]] = {}
    for p in proposals:
        if p.looser:
            comments.setdefault(p.key, []).append(
                f'LOOSER proposal, not applied: {p.proposed!r} (was kept at {p.current!r}); '
                f'{p.evidence}')
        else:
            values[p.key] = p.proposed
            comments.setdefault(p.key, []).append(f'proposed (was {p.current!r}): {p.evidence}')
    names = list(values['sensor_names'])
    for key in list(values):
        if key.startswith('sonar.'):  # a default for every sensor
            for n in names:
                values[f'sensors.{n}.{key[6:]}'] = values[key]
    sonar_keys = [s.key.split('.', 1)[1] for s in global_specs() if s.key.startswith('sonar.')]
    # a value shared by every sensor goes under sonar.*; the others stay per sensor
    shared: dict[str, Any] = {}
    for key in sonar_keys:
        per = [values.get(f'sensors.{n}.{key}') for n in names]
        common = max(set(map(repr, per)), key=[repr(v) for v in per].count)
        shared[key] = next(v for v in per if repr(v) == common)
    lines = ['# sonar_guard parameters proposed by `sonar-guard tune`']
    lines += [f'# from: {s}' for s in sources]
    lines.append('# Review every value before use.')
    lines += [f'# {chunk}' for chunk in _wrap(SAFETY_CAUTION, 95)]
    lines += ['/**/sonar_guard:', '  ros__parameters:']
    lines.append(f'    sensor_names: {_scalar(names)}')
    lines.append('    sensors:')
    for n in names:
        lines.append(f'      {n}:')
        for key in ('topic', 'frame_id', 'x', 'y', 'z', 'yaw', 'slot'):
            lines += _entry(8, key, values[f'sensors.{n}.{key}'], comments.get(
                f'sensors.{n}.{key}', []))
        for key in sonar_keys:
            full = f'sensors.{n}.{key}'
            if repr(values[full]) != repr(shared[key]) or full in comments:
                lines += _entry(8, key, values[full], comments.get(full, []))
    for section in _SECTIONS:
        lines.append(f'    {section}:')
        for spec in global_specs():
            if not spec.key.startswith(section + '.'):
                continue
            leaf = spec.key.split('.', 1)[1]
            value = shared[leaf] if section == 'sonar' else values[spec.key]
            lines += _entry(6, leaf, value, comments.get(spec.key, []))
    for spec in global_specs():
        if '.' not in spec.key and spec.key != 'sensor_names':
            lines += _entry(4, spec.key, values[spec.key], comments.get(spec.key, []))
    return '\n'.join(lines) + '\n'


def _entry(indent: int, key: str, value: Any, notes: Sequence[str]) -> list[str]:
    pad = ' ' * indent
    out = [f'{pad}# {chunk}' for note in notes for chunk in _wrap(note, 95 - indent)]
    out.append(f'{pad}{key}: {_scalar(value)}')
    return out


def _scalar(value: Any) -> str:
    return yaml.safe_dump(value, default_flow_style=True, width=10_000).strip().removesuffix(
        '\n...').removesuffix('...').strip()


def _wrap(text: str, width: int) -> list[str]:
    return textwrap.wrap(text, width) or ['']

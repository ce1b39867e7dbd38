"""Sort each sensor of a checked recording into fine, degraded or unusable, with its reason.

A pure classification of what :mod:`sonar_guard.offline.results` already counted: no plots,
no markup, no I/O. Each sensor gets one level, the one number that decided it (a share of its
readings, or of the recording's time) and, unless it is fine, one sentence saying what to
check next. The report and the terminal summary both show these.

The thresholds are our own choices for a first look at a recording, not values from a
standard or a vendor. They sort sensors for a technician; they do not change the speed limit
(the engine judges every reading on its own, whatever the shares are):

- no readings at all: **unusable**; nothing shows the sensor worked.
- discarded readings (``invalid``, ``stale`` or ``stuck``: the engine throws them away) at
  ``UNUSABLE_DISCARDED`` (25 %) or more: **unusable**. One reading in four thrown away means
  the sensor keeps dropping out for whole firing cycles, and its headings keep falling back
  to the slow fallback speed; the recording no longer shows a working sensor.
- silent (inside its own ``stale`` events) for ``UNUSABLE_SILENT`` (50 %) of the recording or
  more: **unusable**, for the same reason measured in time rather than readings.
- discarded readings at ``DEGRADED_DISCARDED`` (2 %) or more, or silent for
  ``DEGRADED_SILENT`` (10 %) of the time: **degraded**. A healthy driver discards almost
  nothing; a steady trickle points to a fault worth finding before it grows.
- ``no_echo`` in ``DEGRADED_NO_ECHO`` (50 %) of readings or more: **degraded**. No echo is a
  trusted answer (nothing within max range), so it is not unusable; but when it is the usual
  answer the recording cannot show that the sensor sees anything, whether it faced open space
  or lost its echoes.
- ``blind`` in ``DEGRADED_BLIND`` (20 %) or more: **degraded**; something sits in the blind
  zone most of the time (the body, a bumper, a ring-down longer than ``min_range``).
- ``jump`` in ``DEGRADED_JUMP`` (1 %) or more: **degraded**; a plausible world rarely jumps,
  so one reading in a hundred points to crosstalk or multipath.
- ``late`` in ``DEGRADED_LATE`` (5 %) or more: **degraded**; the speed limit assumes the
  latency budget, and one reading in twenty over it is a pattern, not jitter.

The worst level wins; within a level the first rule above that holds decides. Verdicts whose
check was skipped (``BagResult.skipped_checks``) are not used: they were not judged.
"""
from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass
import math
from typing import Literal

from sonar_guard.core.monitor import Event
from sonar_guard.offline.results import BagResult, SensorSummary

__all__ = ['LEVELS', 'Level', 'SensorHealth', 'assess_recording', 'assess_sensor']

Level = Literal['fine', 'degraded', 'unusable']
LEVELS: tuple[Level, ...] = ('fine', 'degraded', 'unusable')
"""Health levels from best to worst."""

UNUSABLE_DISCARDED = 0.25  # share of readings invalid, stale or stuck
UNUSABLE_SILENT = 0.50  # share of the recording's time inside the sensor's stale events
DEGRADED_DISCARDED = 0.02
DEGRADED_SILENT = 0.10
DEGRADED_NO_ECHO = 0.50  # share of readings
DEGRADED_BLIND = 0.20
DEGRADED_JUMP = 0.01
DEGRADED_LATE = 0.05

_DISCARDED = ('invalid', 'stale', 'stuck')  # verdicts the engine throws away (not trusted)

_ADVICE: dict[str, str] = {
    'silent': ('Check that the driver publishes on {topic} at its rate (power, cable, bus, '
               'driver log) and that the topic in the parameter file matches.'),
    'invalid': ("Check the driver's message fields (min_range, max_range, field_of_view, "
                'radiation_type, frame_id, stamps in order) against the parameter file.'),
    'stale': ("Check the clocks: the driver's header stamps against the computer's time "
              '(clock sync) and the transport delay from driver to monitor.'),
    'stuck': ('Check whether the driver repeats its last value when no new echo comes (a hung '
              'sensor or bus) and that nothing covers the sensor face.'),
    'no_echo': ("Check that the sensor faces something within max range, its mounting angle "
                "and the driver's detection threshold."),
    'blind': ('Check what sits inside the blind zone: the body or a bumper in the cone, a '
              'mounting set too deep, or a ring-down longer than min_range.'),
    'jump': ('Check for crosstalk from sensors firing in the same slot or facing each other, '
             "and for multipath; compare the driver's firing order with the parameter file."),
    'late': ("Check the driver's publishing delay and the transport (header stamp to arrival) "
             'against the latency budget in the parameter file.'),
}

_WORDS: dict[str, str] = {'invalid': 'invalid', 'stale': 'stale', 'stuck': 'stuck',
                          'no_echo': 'no echo', 'blind': 'blind', 'jump': 'a jump',
                          'late': 'late'}


@dataclass(frozen=True, slots=True)
class SensorHealth:
    """How usable one sensor was in one recording, why, and what to check next."""

    name: str
    level: Level
    deciding_text: str  # the one number that decided the level, in words
    advice: str  # one sentence; '' when the sensor is fine

    def describe(self) -> str:
        """Return one line: ``name: level: deciding text``."""
        return f'{self.name}: {self.level}: {self.deciding_text}'


def _percent(share: float) -> str:
    """Return a share (0..1) as a percentage with the digits it needs, e.g. '91 %', '2.5 %'."""
    pct = 100.0 * share
    if pct >= 10.0:
        text = f'{pct:.0f}'
    elif pct >= 0.05:
        text = f'{pct:.1f}'
    else:
        text = f'{pct:.2f}' if pct >= 0.005 else '< 0.01'
    return f'{text} %'


def _silent_share(name: str, events: Iterable[Event], duration_s: float) -> float:
    """Return the share of ``duration_s`` covered by the sensor's stale events (0 if unknown)."""
    if not (math.isfinite(duration_s) and duration_s > 0):
        return 0.0
    spans = sorted((e.t_start, e.t_end) for e in events
                   if e.sensor == name and e.kind == 'stale'
                   and math.isfinite(e.t_start) and math.isfinite(e.t_end))
    covered, reach = 0.0, -math.inf
    for a, b in spans:  # overlapping stretches count once
        a = max(a, reach)
        if b > a:
            covered += b - a
            reach = b
    return min(1.0, covered / duration_s)


def assess_sensor(summary: SensorSummary, events: Iterable[Event] = (), *,
                  duration_s: float = math.nan,
                  skipped: Sequence[str] = ()) -> SensorHealth:
    """Return the health of one sensor from its counts and, if given, the recording's events.

    ``events`` may hold every event of the recording (only this sensor's ``stale`` events
    are used, as time silent out of ``duration_s``, s); verdicts named in ``skipped`` were
    not checked and are ignored.
    """
    name, n = summary.name, summary.readings
    if n <= 0:
        return SensorHealth(name, 'unusable', 'no readings at all',
                            _ADVICE['silent'].format(topic=summary.topic or 'its topic'))

    def count(verdict: str) -> int:
        return 0 if verdict in skipped else int(summary.counts.get(verdict, 0))

    of_n = f'of {n} reading{"s" if n != 1 else ""}'
    discarded = {v: count(v) for v in _DISCARDED}
    dropped = sum(discarded.values())
    worst = max(_DISCARDED, key=lambda v: discarded[v])  # first of the largest on ties
    dropped_text = (f'{_percent(dropped / n)} {of_n} discarded (mostly {_WORDS[worst]})'
                    if dropped else '')
    silent = 0.0 if 'stale' in skipped else _silent_share(name, events, duration_s)
    silent_text = f'silent for {_percent(silent)} of the recording'
    silent_advice = _ADVICE['silent'].format(topic=summary.topic or 'its topic')

    if dropped and dropped / n >= UNUSABLE_DISCARDED:
        return SensorHealth(name, 'unusable', dropped_text, _ADVICE[worst])
    if silent >= UNUSABLE_SILENT:
        return SensorHealth(name, 'unusable', silent_text, silent_advice)
    if dropped and dropped / n >= DEGRADED_DISCARDED:
        return SensorHealth(name, 'degraded', dropped_text, _ADVICE[worst])
    if silent >= DEGRADED_SILENT:
        return SensorHealth(name, 'degraded', silent_text, silent_advice)
    for verdict, limit in (('no_echo', DEGRADED_NO_ECHO), ('blind', DEGRADED_BLIND),
                           ('jump', DEGRADED_JUMP), ('late', DEGRADED_LATE)):
        c = count(verdict)
        if c and c / n >= limit:
            return SensorHealth(name, 'degraded',
                                f'{_WORDS[verdict]} in {_percent(c / n)} {of_n}',
                                _ADVICE[verdict])
    return SensorHealth(name, 'fine', f'ok in {_percent(count("ok") / n)} {of_n}', '')


def assess_recording(result: BagResult) -> tuple[SensorHealth, ...]:
    """Return the health of every sensor of a checked recording, in the result's order."""
    return tuple(assess_sensor(s, result.events, duration_s=result.duration_s,
                               skipped=result.skipped_checks) for s in result.sensors)

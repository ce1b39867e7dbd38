"""Replay a recording through the engine, driven by bag time, exactly as the live node would.

The live node passes the receive time of each message and ticks its publish timer; here the
bag's log time (when the recorder received the message) plays the receive time, and ticks
fall after every reading and on the ``publish_rate`` grid. Results go into a
:class:`~sonar_guard.offline.results.BagResult` whose memory stays flat.
"""
from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass
import math
from typing import Any

from sonar_guard.core.config import Config
from sonar_guard.core.monitor import Decision, Monitor
from sonar_guard.core.readings import Verdict
from sonar_guard.errors import RecordingError
from sonar_guard.offline.bags import ODOMETRY_TYPE, RANGE_TYPE, BagSource, TopicInfo
from sonar_guard.offline.readings_only import (
    SKIPPED_CHECKS,
    SKIPPED_NOTICE,
    config_from_messages,
    peek_readings,
)
from sonar_guard.offline.results import VERDICT_CODES, BagResult, SensorSummary
from sonar_guard.ros.convert import odometry_to_sample, range_to_reading

__all__ = ['Replayer', 'Wiring', 'check_bag', 'wire_topics']

_CODES = VERDICT_CODES


@dataclass(frozen=True, slots=True)
class Wiring:
    """Which recorded topic feeds which input of the engine."""

    sensors: Mapping[str, str]  # bag topic -> sensor name
    odometry: str | None


def _matches(configured: str, recorded: str) -> bool:
    if configured.startswith('/'):
        return recorded == configured
    return recorded == '/' + configured or recorded.endswith('/' + configured)


def wire_topics(config: Config, topics: Mapping[str, TopicInfo]) -> tuple[Wiring, list[str]]:
    """Match configured (relative) topics to recorded ones; return the wiring and notes.

    Raises RecordingError when a configured topic carries another message type, or a
    relative topic matches several recorded ones.
    """
    notes: list[str] = []
    sensors: dict[str, str] = {}
    for s in config.sensors:
        found = [t for t in topics if _matches(s.topic, t)]
        if len(found) > 1:
            raise RecordingError(
                f'topic {s.topic!r} of sensor {s.name!r} matches several recorded topics '
                f'({", ".join(sorted(found))}): give the full name in the parameters')
        if not found:
            notes.append(f'sensor {s.name!r}: topic {s.topic!r} not in the recording '
                         '(it counts as silent throughout)')
            continue
        info = topics[found[0]]
        if info.msgtype != RANGE_TYPE:
            raise RecordingError(f'topic {info.name} of sensor {s.name!r} carries '
                                 f'{info.msgtype}, not {RANGE_TYPE}')
        sensors[info.name] = s.name
    odom = [t for t in topics if _matches(config.odom_topic, t)]
    odometry = None
    if len(odom) == 1 and topics[odom[0]].msgtype == ODOMETRY_TYPE:
        odometry = odom[0]
    elif odom:
        raise RecordingError(f'odometry topic {config.odom_topic!r} matches '
                             f'{", ".join(f"{t} ({topics[t].msgtype})" for t in odom)}: '
                             f'need exactly one {ODOMETRY_TYPE}')
    else:
        notes.append(f'odometry topic {config.odom_topic!r} not in the recording: '
                     'the limit falls back throughout')
    return Wiring(sensors, odometry), notes


class Replayer:
    """Feed one recording's messages to a Monitor and collect what happens.

    ``readings_only``: the configuration's robot is made up (no parameter file); the engine
    judges only the readings and the allowed speed is not recorded.
    """

    def __init__(self, config: Config, wiring: Wiring, result: BagResult, *,
                 on_decision: Callable[[Decision], None] | None = None,
                 readings_only: bool = False) -> None:
        self.config = config
        self.on_decision = on_decision
        self.wiring = wiring
        self.result = result
        self.readings_only = readings_only
        self.monitor = Monitor(config, readings_only=readings_only)
        self._summaries = {s.name: SensorSummary(s.name, s.topic) for s in config.sensors}
        for topic, name in wiring.sensors.items():
            self._summaries[name].topic = topic
        result.sensors = list(self._summaries.values())
        self._last_stamp: dict[str, float] = {}
        self._period = 1.0 / config.publish_rate_hz
        self._next_tick = math.nan
        self._covering: frozenset[str] = frozenset(config.sensor_names)  # until the first tick
        self._covering_of: tuple[str, ...] | None = None

    def feed(self, topic: str, t_s: float, msg: Any) -> None:
        """Process one message logged at bag time ``t_s``."""
        res = self.result
        if math.isnan(res.t_start):
            res.t_start = t_s
            self._next_tick = t_s + self._period
        res.t_end = max(res.t_end, t_s) if not math.isnan(res.t_end) else t_s
        res.messages += 1
        while self._next_tick <= t_s:
            self._tick(self._next_tick)
            self._next_tick += self._period
        name = self.wiring.sensors.get(topic)
        if name is not None:
            self._reading(name, msg, t_s)
            # as the live node, decide at once after a reading that can move the limit; other
            # sensors' readings wait for the next publish tick (they cannot lower the limit)
            if name in self._covering:
                self._tick(t_s)
        elif topic == self.wiring.odometry:
            self.monitor.on_odometry(odometry_to_sample(msg, t_s))

    def _reading(self, name: str, msg: Any, t_s: float) -> None:
        # verdict counts are the engine's own (SensorStatus.counts), taken in finish()
        check = self.monitor.on_range(range_to_reading(name, msg, t_s))
        summary = self._summaries[name]
        r = check.range_m
        finite = -math.inf < r < math.inf
        if finite and r >= 0:
            if r < summary.range_min_m:
                summary.range_min_m = r
            if r > summary.range_max_m:
                summary.range_max_m = r
        verdict = check.verdict
        stamp = check.stamp_s
        if verdict is not Verdict.INVALID and verdict is not Verdict.STALE:
            last = self._last_stamp.get(name)
            if last is not None and stamp > last:
                summary.periods.put(stamp - last)
            self._last_stamp[name] = stamp
            summary.latencies.put(self.monitor.detection_latency_s(name))
        summary.ranges.put(stamp, r if finite else math.inf, _CODES[verdict._value_])

    def _tick(self, t_s: float) -> None:
        decision = self.monitor.tick(t_s)
        covering = decision.covering
        if covering is not self._covering_of:  # the engine hands out one tuple per heading
            self._covering_of = covering
            self._covering = frozenset(covering)
        if self.on_decision is not None:
            self.on_decision(decision)
        result = self.result
        if not self.readings_only:  # else the limit rests on a made-up robot: not shown
            result.limit.put(t_s, decision.limit_mps)
        result.speed.put(t_s, decision.speed_mps)
        events = self.monitor.pop_events()
        if events:
            result.events.extend(events)

    def finish(self) -> BagResult:
        """Close what is still open at the end of the recording and return the result."""
        if not math.isnan(self.result.t_end):
            self._tick(self.result.t_end)
        for name, summary in self._summaries.items():
            counts = self.monitor.verdict_counts(name)
            summary.counts = counts
            summary.readings = sum(counts.values())
        self.result.events.extend(self.monitor.finish())
        self.result.events.sort(key=lambda e: (e.t_start, e.kind, e.sensor or ''))
        return self.result


def check_bag(path: str, config: Config | None, *, config_source: str = '',
              progress: Callable[[float], None] | None = None) -> BagResult:
    """Check one recording; raises RecordingError when it cannot be opened at all.

    A recording that breaks off partway returns what was readable with ``result.error`` set.
    ``progress`` is called with the fraction of bag time done (0..1) now and then.
    """
    with BagSource(path) as bag:
        notes: list[str] = []
        readings_only = config is None
        if config is None:
            ranges = bag.topics_of_type(RANGE_TYPE)
            if not ranges:
                raise RecordingError(f'{path}: no {RANGE_TYPE} topics and no --params given')
            odoms = bag.topics_of_type(ODOMETRY_TYPE)
            firsts, samples = peek_readings(bag, ranges)
            config, found = config_from_messages(firsts, odoms[0] if odoms else None, samples)
            notes.extend(found)
            config_source = ('none (no --params): sensors found by message type, min and max '
                             'range and field of view from their messages, thresholds the '
                             'defaults')
            if len(odoms) > 1:
                notes.append(f'several odometry topics; using {odoms[0]}')
        wiring, wiring_notes = wire_topics(config, bag.topics)
        notes.extend(wiring_notes)
        result = BagResult(path=str(path), config=config, config_source=config_source,
                           notes=notes)
        if readings_only:
            result.skipped_checks, result.skipped_notice = SKIPPED_CHECKS, SKIPPED_NOTICE
        replayer = Replayer(config, wiring, result, readings_only=readings_only)
        topics = list(wiring.sensors) + ([wiring.odometry] if wiring.odometry else [])
        span = max(bag.end_s - bag.start_s, 1e-9)
        next_report = 0.0
        try:
            for topic, t_s, msg in bag.messages(topics):
                replayer.feed(topic, t_s, msg)
                if progress is not None and t_s >= next_report:
                    progress(min(1.0, (t_s - bag.start_s) / span))
                    next_report = t_s + span / 200
        except RecordingError as err:
            result.error = str(err)
        if progress is not None:
            progress(1.0)
        result = replayer.finish()
        if result.error is None and not any(s.readings for s in result.sensors):
            # nothing was checked: that is no clean bill of health
            found = ', '.join(sorted(bag.topics)) or 'none'
            result.error = (f'{path}: no readings of the configured sensors in the recording '
                            f'(topics: {found})')
        return result

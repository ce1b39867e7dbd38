"""Checking a recording without a parameter file: only what the readings themselves show.

Without ``--params`` nothing is known of the robot: not where the sensors sit or face, not its
footprint, brakes or speed limits, not the firing order. What the Range messages carry (topic,
min and max range, field of view) and when they came is enough to judge each reading (blind,
no echo, invalid, stale, late, jump) and to see pulses in the air together (slot clash). What
needs the robot is skipped, and the report says so once: ``stuck`` (needs each mount's
direction to know the robot moved along the beam), ``overspeed`` and the allowed speed (need
the footprint, the brakes and the limits).
"""
from __future__ import annotations

from collections.abc import Iterable, Mapping
import math
import re
from typing import Any

from sonar_guard.core.acoustics import echo_timeout
from sonar_guard.core.config import Config, build_config
from sonar_guard.core.schedule import estimated_firing_time, infer_slots
from sonar_guard.offline.bags import BagSource
from sonar_guard.ros.convert import stamp_to_s

__all__ = [
    'SKIPPED_CHECKS',
    'SKIPPED_NOTICE',
    'config_from_messages',
    'peek_readings',
]

SKIPPED_CHECKS: tuple[str, ...] = ('stuck', 'overspeed')
"""Event kinds a check without a parameter file does not look for."""

SKIPPED_NOTICE = (
    'No parameter file: only what the readings show was checked (blind, no echo, invalid, '
    'stale, late, jump, slot clash). Skipped: stuck (needs the sensor poses), overspeed and '
    'the allowed speed (need the footprint, braking and limits). To check them, pass '
    "--params with your robot's parameter file: sensor poses, footprint, braking and limits "
    '(start from a copy of the shipped config/sonar_guard.yaml).')
"""Said once at the top of the terminal summary and the reports."""

PEEK_READINGS = 4000
"""Readings looked at to learn each sensor's limits and the firing order."""


def peek_readings(bag: BagSource, topics: Iterable[str], limit: int = PEEK_READINGS
                  ) -> tuple[dict[str, Any], dict[str, list[tuple[float, float]]]]:
    """Return the first message of each topic and (stamp s, range m) of the first readings."""
    wanted = sorted(set(topics))
    firsts: dict[str, Any] = {}
    samples: dict[str, list[tuple[float, float]]] = {t: [] for t in wanted}
    for i, (topic, _, msg) in enumerate(bag.messages(wanted)):
        firsts.setdefault(topic, msg)
        samples[topic].append((stamp_to_s(msg.header.stamp), float(msg.range)))
        if i + 1 >= limit:
            break
    return firsts, samples


def _sensor_name(topic: str, taken: list[str]) -> str:
    name = re.sub(r'[^A-Za-z0-9_]', '_', topic.strip('/')) or 'sonar'
    if not name[0].isalpha():
        name = 's_' + name
    while name in taken:
        name += '_'
    return name


def config_from_messages(firsts: Mapping[str, Any], odometry: str | None,
                         samples: Mapping[str, Iterable[tuple[float, float]]] | None = None,
                         ) -> tuple[Config, list[str]]:
    """Build a configuration for Range topics found by type; return it and notes.

    Each sensor's min and max range and field of view come from its first message; the
    firing slots are inferred from the ``samples`` (stamp s, range m) when given (sensors
    whose pulses are usually in the air together share a slot), else every sensor gets its
    own. Everything else is a schema default and must not be presented as the robot's: run
    the engine with ``readings_only=True``.
    """
    params: dict[str, Any] = {}
    names: dict[str, str] = {}  # topic -> sensor name
    for topic, msg in sorted(firsts.items()):
        name = _sensor_name(topic, list(names.values()))
        names[topic] = name
        params[f'sensors.{name}.topic'] = topic
        params[f'sensors.{name}.min_range'] = float(msg.min_range)
        params[f'sensors.{name}.max_range'] = float(msg.max_range)
        params[f'sensors.{name}.field_of_view'] = float(msg.field_of_view)
    params['sensor_names'] = list(names.values())
    if odometry:
        params['odom_topic'] = odometry
    source = 'defaults from the recorded messages'
    config = build_config(params, source=source)
    notes: list[str] = []
    if samples is None:
        return config, notes
    firings: dict[str, list[float]] = {}
    for topic, name in names.items():
        sensor = config.sensor(name)
        firings[name] = [estimated_firing_time(t, r, sensor) for t, r in samples.get(topic, ())
                         if math.isfinite(t)]
    timeouts = {s.name: echo_timeout(s.max_range_m, s.air_temperature_c)
                for s in config.sensors}
    slots = infer_slots(firings, timeouts)
    for name, slot in slots.items():
        params[f'sensors.{name}.slot'] = slot
    groups: dict[int, list[str]] = {}
    for name, slot in slots.items():
        groups.setdefault(slot, []).append(name)
    together = [' + '.join(g) for g in groups.values() if len(g) > 1]
    if together:
        notes.append('firing order taken from the readings; fire together as a rule (so not '
                     'counted as slot clashes): ' + '; '.join(together))
    return build_config(params, source=source), notes

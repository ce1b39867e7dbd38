"""Timing and speed budget of a configuration: what ``sonar-guard budget`` reports.

For each sensor: its slot, echo timeout, blind range, the cycle time and the worst-case
detection latency. For a few travel headings: the sensors that cover it, the largest safe
speed at a few free distances and from where on the full swept width is watched
(:mod:`sonar_guard.core.watch`); for turning in place, the directions no cone looks into.
Pure computation; the CLI formats it.
"""
from __future__ import annotations

from dataclasses import dataclass

from sonar_guard import SAFETY_CAUTION
from sonar_guard.core.braking import max_safe_speed
from sonar_guard.core.config import Config
from sonar_guard.core.geometry import coverage, heading_name
from sonar_guard.core.monitor import mount_of
from sonar_guard.core.schedule import Schedule, SensorTiming
from sonar_guard.core.watch import full_width_stretches, unwatched_turn_sectors, watch_headings

__all__ = ['Budget', 'FREE_DISTANCES_M', 'HeadingBudget', 'budget_headings', 'budget_of']

FREE_DISTANCES_M: tuple[float, ...] = (0.5, 1.0, 2.0, 3.0)


@dataclass(frozen=True, slots=True)
class HeadingBudget:
    """The sensors covering one travel heading and the safe speeds along it."""

    name: str
    heading_rad: float
    sensors: tuple[str, ...]
    latency_s: float | None
    speeds: tuple[tuple[float, float, float], ...]  # (free m, max safe m/s, allowed m/s)
    # m ahead of the leading edge: the last stretch watched across the full swept width
    # (core.watch.full_width_from_m); None when no cross-section within max range is
    full_width_from_m: float | None = None
    full_width_to_m: float | None = None


@dataclass(frozen=True, slots=True)
class Budget:
    """The whole budget of a configuration."""

    sensors: tuple[SensorTiming, ...]
    cycle_s: float
    headings: tuple[HeadingBudget, ...]
    # (start, end) rad about base_link, counter-clockwise; core.watch.unwatched_turn_sectors
    turn_unwatched_sectors_rad: tuple[tuple[float, float], ...] = ()

    def to_dict(self) -> dict:
        """Return the JSON form printed by ``sonar-guard budget --json``."""
        return {
            'sensors': [
                {'name': t.name, 'slot': t.slot, 'echo_timeout_s': t.echo_timeout_s,
                 'blind_range_m': t.blind_range_m, 'cycle_s': t.cycle_s,
                 'detection_latency_s': t.detection_latency_s}
                for t in self.sensors],
            'headings': [
                {'heading': h.name, 'heading_rad': h.heading_rad, 'sensors': list(h.sensors),
                 'latency_s': h.latency_s,
                 'speeds': [{'free_distance_m': d, 'max_safe_speed_mps': v, 'allowed_mps': a}
                            for d, v, a in h.speeds],
                 'full_width_from_m': h.full_width_from_m,
                 'full_width_to_m': h.full_width_to_m}
                for h in self.headings],
            'turn_unwatched_sectors_rad': [[a, b] for a, b in self.turn_unwatched_sectors_rad],
            'caution': SAFETY_CAUTION,
        }


def budget_headings(config: Config) -> tuple[float, ...]:
    """Return the headings worth reporting: forward and reverse; every 45 deg if holonomic."""
    return watch_headings(config)


def budget_of(config: Config,
              free_distances_m: tuple[float, ...] = FREE_DISTANCES_M) -> Budget:
    """Compute the budget of ``config``."""
    schedule = Schedule.from_config(config)
    timings = schedule.timings()
    by_name = {t.name: t for t in timings}
    headings = budget_headings(config)
    mounts = [mount_of(s) for s in config.sensors]
    footprint = config.robot.footprint
    table = coverage(mounts, footprint, headings)
    robot, lim = config.robot, config.limits
    rows = []
    for heading, covered in zip(headings, table):
        names = tuple(n for n, c in zip(config.sensor_names, covered) if c)
        if names:
            latency = max(by_name[n].detection_latency_s for n in names) + robot.reaction_time_s
            speeds = []
            for d in free_distances_m:
                v = max_safe_speed(d, latency, robot.decel_mps2, lim.margin_m)
                speeds.append((d, v, min(v, lim.max_speed_mps)))
        else:
            latency = None
            speeds = [(d, 0.0, lim.fallback_speed_mps) for d in free_distances_m]
        stretches = full_width_stretches(mounts, footprint, heading)
        start, end = stretches[-1] if stretches else (None, None)
        rows.append(HeadingBudget(heading_name(heading), heading, names, latency,
                                  tuple(speeds), start, end))
    turning = tuple(unwatched_turn_sectors(mounts, footprint))
    return Budget(timings, schedule.cycle_s, tuple(rows), turning)

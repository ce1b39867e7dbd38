"""The demo: an invented linen cart on an invented hotel service corridor, simulated and checked.

Every number here is made up for the demo. The cart is the robot of config/sonar_guard.yaml
(eight sonars, 1.1 m x 0.62 m). It drives along a 2 m wide service corridor and meets, in
order: a room door that swings open into its path, a housekeeping trolley pushed across in
front of it, a glass partition standing at a steep angle (smooth: the pulse glances off), a
person who steps right up to the front of the cart, and a cold loading dock where its sensors
(which assume 21 degC) read long; in the dock the cart is pushed faster than it may go. At the
corridor's end it swings left on an arc into a side corridor, drives into a lift lobby past a
linen bin and turns 90 degrees left in place to face the lift door, the bin close beside it.
"""
from __future__ import annotations

from collections.abc import Iterator, Sequence
from dataclasses import dataclass
import math
from pathlib import Path
from typing import Any

from sonar_guard.core.config import Config
from sonar_guard.core.monitor import EVENT_KINDS, Monitor
from sonar_guard.offline.bagwrite import write_bag
from sonar_guard.offline.causes import EVENT_CAUSES
from sonar_guard.ros.convert import odometry_to_sample, range_to_reading
from sonar_guard.sim.drive import Arc, Line, Run, SpeedProfile, Turn
from sonar_guard.sim.drive import Path as DrivePath
from sonar_guard.sim.sonar import SonarPhysics
from sonar_guard.sim.world import AirZone, Disc, MovingBox, SwingingDoor, Walker, Wall, World

__all__ = ['DEMO_DURATION_S', 'PLANNED', 'Planned', 'corridor_run', 'corridor_world',
           'explain_findings', 'match_planned', 'write_demo_bag']

DEMO_DURATION_S = 97.0
START_TIME_S = 1_767_225_600.0  # bag time of the start (an invented date)
PUSHED = (45.0, 52.0)  # m along the corridor: in the dock the cart is pushed past its limit
HALF_WIDTH = 1.0  # corridor walls at y = +/- 1 m
# The bend and the lift lobby (invented): the corridor ends at x = 60 m and bends left into a
# 2 m wide side corridor (x 58..60 m) that opens into a lift lobby (x 56.5..61.5, y 2.5..6.1 m).
BEND_X = 58.0  # m: the inner corner of the bend is (58, 1); the cart's arc is centred on it
BEND_RADIUS = 1.0  # m: so the cart swings along the side corridor's centre line x = 59 m
LOBBY = (56.5, 2.5, 61.5, 6.1)  # m: x min, y min, x max, y max
TURN_AT = (59.0, 4.5)  # m: where the cart turns 90 degrees left in place, to face the lift
BIN = (58.15, 3.65, 0.25)  # m: a round linen bin parked in the lobby (centre x, y, radius)
TURN_RATE = 1.0  # rad/s: the cart's own top yaw rate (turns in place; on the arc, speed * 1/R)


@dataclass(frozen=True, slots=True)
class Planned:
    """A planned happening of the scenario, the findings that show it, and when (s from start)."""

    what: str
    kinds: tuple[str, ...]
    start: float
    end: float
    label: str = ''  # a short name for one-line summaries


# Windows follow from the world and the cart's speed profile below (checked by the tests).
PLANNED: tuple[Planned, ...] = (
    Planned('room door swings open into the corridor: the cart waits',
            ('no_echo', 'jump'), 8.0, 18.0, 'door'),
    Planned('trolley pushed across in front of the cart', ('jump', 'no_echo'), 23.0, 32.0,
            'trolley'),
    Planned('glass partition at a steep angle: the echo glances off', ('no_echo',), 33.0,
            45.0, 'glass partition'),
    Planned('person steps right up to the front of the cart (into the ring-down range)',
            ('no_echo', 'blind'), 52.0, 64.0, 'person'),
    Planned('cold loading dock: sensors read long, the cart is pushed faster than allowed',
            ('overspeed',), 64.0, 75.0, 'cold dock'),
    Planned('the corridor bends left into a side corridor: the cart swings round on a 1 m arc '
            'and its beams swing off the end wall', ('no_echo', 'jump'), 78.0, 87.0, 'bend'),
    Planned('the cart drives into the lift lobby past a linen bin and turns 90 degrees left in '
            'place to face the lift door, the bin close beside it', ('jump',), 87.0, 97.0,
            'turn in place'),
)

def corridor_world() -> World:
    """Return the corridor with its door, trolley, glass partition, person, cold dock, the bend
    into the side corridor and the lift lobby with its linen bin."""
    x0, y0, x1, y1 = LOBBY
    walls: list[Wall | Disc] = [
        Wall((-2.0, HALF_WIDTH), (BEND_X, HALF_WIDTH), name='left wall'),
        Wall((-2.0, -HALF_WIDTH), (60.0, -HALF_WIDTH), name='right wall'),
        Wall((-2.0, -HALF_WIDTH), (-2.0, HALF_WIDTH), name='start wall'),
        # the end wall runs on as the outer wall of the bend and of the side corridor
        Wall((60.0, -HALF_WIDTH), (60.0, y0), name='end wall'),
        Wall((BEND_X, HALF_WIDTH), (BEND_X, y0), name='side corridor wall'),
        # a glass partition standing out from the left wall at a steep angle
        Wall((26.0, HALF_WIDTH), (29.0, 0.45), smooth=True, name='glass partition'),
        # the lift lobby; the lift door is smooth steel in its left wall, facing the turn
        Wall((BEND_X, y0), (x0, y0), name='lobby wall'),
        Wall((x0, y0), (x0, TURN_AT[1] - 0.6), name='lobby wall'),
        Wall((x0, TURN_AT[1] - 0.6), (x0, TURN_AT[1] + 0.6), smooth=True, name='lift door'),
        Wall((x0, TURN_AT[1] + 0.6), (x0, y1), name='lobby wall'),
        Wall((x0, y1), (x1, y1), name='lobby wall'),
        Wall((x1, y1), (x1, y0), name='lobby wall'),
        Wall((x1, y0), (60.0, y0), name='lobby wall'),
        Disc((BIN[0], BIN[1]), BIN[2], name='linen bin'),
    ]
    door = SwingingDoor(hinge=(11.0, HALF_WIDTH), length=0.85, closed_angle=0.0,
                        open_angle=-math.pi / 2, t_open_start=8.0, t_open_end=9.2,
                        name='room door')
    trolley = MovingBox(waypoints=[(24.0, 19.8, 1.6), (27.5, 19.8, -1.6)], size=(0.7, 0.5),
                        yaw=0.0, name='trolley')
    person = Walker(waypoints=[(54.0, 39.4, -0.9), (56.5, 38.7, -0.05), (59.0, 38.7, -0.05),
                               (60.0, 38.35, -0.05), (62.5, 38.35, -0.05), (64.5, 39.6, -0.9)],
                    name='person')
    dock = AirZone(polygon=[(44.0, -6.0), (56.0, -6.0), (56.0, 6.0), (44.0, 6.0)],
                   temperature_c=2.0)
    return World(walls=walls, movers=[_DoorThatCloses(door), trolley, person], air=[dock],
                 default_air_c=21.0)


@dataclass(frozen=True)
class _DoorThatCloses:
    """The room door opens, stays open while the cart waits, and is closed again."""

    door: SwingingDoor
    t_close_start: float = 13.0
    t_close_end: float = 14.0

    def at(self, t: float) -> Sequence[Wall | Disc]:
        if t <= self.t_close_start:
            return self.door.at(t)
        # mirror time: closing plays the opening backwards
        back = self.door.t_open_end - (t - self.t_close_start) * (
            (self.door.t_open_end - self.door.t_open_start)
            / (self.t_close_end - self.t_close_start))
        return self.door.at(max(back, self.door.t_open_start - 1.0))


class _ObeyingDriver:
    """The cart's controller: it keeps to the limits of a Monitor fed with its own recording
    (the speed limit, and the allowed turn rate where the engine gives one), except while the
    attendant pushes it (then it goes as fast as the profile says)."""

    def __init__(self, config: Config, start_time_s: float,
                 pushed: tuple[float, float]) -> None:
        self.monitor = Monitor(config)
        self.start_time_s = start_time_s
        self.pushed = pushed  # stretch of the path (m along x) where the attendant pushes
        self.x = 0.0
        self._decision: Any = None
        self.names = {'/' + s.topic.lstrip('/'): s.name for s in config.sensors}
        self.odom = '/' + config.odom_topic.lstrip('/')

    def watch(self, records: Iterator[tuple[str, str, float, Any]]
              ) -> Iterator[tuple[str, str, float, Any]]:
        """Pass records through, feeding the monitor on the way."""
        for record in records:
            topic, _, t, msg = record
            name = self.names.get(topic)
            if name is not None:
                self.monitor.on_range(range_to_reading(name, msg, t))
            elif topic == self.odom:
                self.monitor.on_odometry(odometry_to_sample(msg, t))
                self.x = float(msg.pose.pose.position.x)
            yield record

    def decision(self, t: float) -> Any:
        """Return the monitor's decision at simulation time t (one tick per time)."""
        if self._decision is None or self._decision.time_s != self.start_time_s + t:
            self._decision = self.monitor.tick(self.start_time_s + t)
        return self._decision

    def cap(self, t: float, speed: float) -> float:
        """Return the largest speed the cart keeps to at simulation time t, m/s."""
        limit = self.decision(t).limit_mps
        if self.pushed[0] <= self.x < self.pushed[1]:
            return math.inf
        return float(limit)

    def turn_cap(self, t: float, yaw_rate: float) -> float:
        """Return the largest |yaw rate| the cart keeps to at simulation time t, rad/s.

        The allowed turn rate is read only when the engine gives one (issue 17).
        """
        limit = getattr(self.decision(t), 'turn_limit_radps', math.inf)
        if self.pushed[0] <= self.x < self.pushed[1]:
            return math.inf
        return float(limit)


def corridor_run(config: Config, *, seed: int = 7, physics: SonarPhysics | None = None,
                 start_time_s: float = START_TIME_S) -> tuple[Run, _ObeyingDriver]:
    """Return the cart's run along the corridor and the driver that keeps it to the limit."""
    # along the corridor, a quarter circle left into the side corridor, up to the lobby, then a
    # quarter turn left in place to face the lift door (where the run ends, waiting for it)
    bend = Arc(BEND_RADIUS, math.pi / 2)
    path = DrivePath.of(Line(BEND_X), bend, Line(TURN_AT[1] - BEND_RADIUS), Turn(math.pi / 2))
    # speeds (m/s) by distance along the path; 0.6 m/s on the arc is a yaw rate of 0.6 rad/s
    profile = SpeedProfile(points=[(0.0, 0.9), (44.0, 0.9), (44.5, 1.5), (51.0, 1.5),
                                   (52.0, 0.5), (52.5, 0.9), (57.5, 0.9),
                                   (BEND_X, 0.6), (BEND_X + bend.length_m, 0.6),
                                   (BEND_X + bend.length_m + 0.5, 0.8)])
    driver = _ObeyingDriver(config, start_time_s, PUSHED)
    run = Run(corridor_world(), config, path, profile, physics or SonarPhysics(), seed=seed,
              speed_cap=driver.cap, turn_cap=driver.turn_cap, turn_rate_radps=TURN_RATE)
    return run, driver


def match_planned(events: Sequence[Any], t0: float) -> list[tuple[Planned, list[Any]]]:
    """Pair each planned happening with the findings of its kinds inside its window."""
    out = []
    for p in PLANNED:
        hits = [e for e in events if e.kind in p.kinds
                and p.start <= e.t_start - t0 <= p.end]
        out.append((p, hits))
    return out


def explain_findings(events: Sequence[Any], t0: float) -> list[str]:
    """Return one line per kind of finding: how many, which planned happening shows them,
    and why the others (not planned) happened. Times are s from the start (``t0``)."""
    lines = []
    for kind in EVENT_KINDS:
        found = [e for e in events if e.kind == kind]
        if not found:
            continue
        planned: dict[str, int] = {}
        others = []
        for e in found:
            t = e.t_start - t0
            p = next((p for p in PLANNED if kind in p.kinds and p.start <= t <= p.end), None)
            if p is None:
                during = next((p for p in PLANNED if p.start <= t <= p.end), None)
                others.append(f'{t:.1f} s {e.sensor or "robot"}'
                              + (f' ({during.label})' if during else ''))
            else:
                planned[p.label] = planned.get(p.label, 0) + 1
        parts = []
        if planned:
            parts.append(('all ' if not others else '') + 'planned ('
                         + ', '.join(f'{name} {n}' for name, n in planned.items()) + ')')
        if others:
            more = ', ...' if len(others) > 4 else ''
            parts.append(f'not planned {len(others)}, at {", ".join(others[:4])}{more}: '
                         f'{EVENT_CAUSES[kind]}')
        lines.append(f'{kind} {len(found)}: ' + '; '.join(parts))
    return lines


def write_demo_bag(path: Path, config: Config, *, duration_s: float = DEMO_DURATION_S,
                   seed: int = 7) -> Path:
    """Simulate the corridor run (the cart obeying the limit) and write it as MCAP."""
    run, driver = corridor_run(config, seed=seed)
    records = driver.watch(run.records(duration_s, start_time_s=START_TIME_S))
    return write_bag(path, records, storage='mcap')

"""The judge of the speed limit (issue 17): the engine against a brute-force sweep.

Two properties, over generated robots, sensor layouts, obstacles, motions and lost echoes:

* SAFETY: a simulated robot that obeys the published limits (with its reaction time, braking
  at exactly its guaranteed deceleration, keeping its path) never brings its footprint closer
  than ``limits.margin`` to an obstacle point the sensors reported before it set off;
* NOT ABSURDLY LOW: at rest, with readings just taken, the instantaneous limits are at most
  the brute-force largest safe speed of what the issue 17 interface promises (the readings'
  arcs and sectors, each with its time budget) and at least 90 % of it.

The brute force is ``core/sweepref.py`` (plain numpy, nothing from the engine); its own tests
are ``test_sweepref.py``. Every hypothesis test is derandomized (the same cases on every run);
``SONAR_GUARD_FUZZ_SCALE=20`` runs twenty times as many fresh ones.
"""
from __future__ import annotations

from dataclasses import dataclass, field
import heapq
import math
import os
from typing import Any

from core.sweepref import (
    Beam,
    circumradius,
    compose,
    fastest_point_factor,
    largest_safe_speed,
    largest_safe_turn_rate,
    max_safe_speed_closed_form,
    nearest_echo,
    path_grid,
    path_pose,
    path_poses,
    polygon_depth,
    polygon_distance,
    reading_points,
    sector_points,
    sonar_range,
    sweep_distances,
    to_body,
    turn_poses,
)
from hypothesis import HealthCheck, Phase, given, settings
from hypothesis import strategies as st
import numpy as np
import pytest

from sonar_guard.core.acoustics import echo_timeout
from sonar_guard.core.config import Config, build_config, global_specs
from sonar_guard.core.monitor import Monitor, OdometrySample
from sonar_guard.core.readings import RangeReading

ENGINE_LANDED = hasattr(Monitor, 'limit_on_path') and hasattr(Monitor, 'turn_limit_for')
needs_engine = pytest.mark.skipif(not ENGINE_LANDED,
                                  reason='engine of issue 17 not landed yet')
NEW_KEYS = {s.key for s in global_specs()}  # the turn keys exist once the engine landed

# SONAR_GUARD_FUZZ_SCALE=20 runs twenty times the cases, new random ones each run (local use)
_SCALE = float(os.environ.get('SONAR_GUARD_FUZZ_SCALE', '0') or 0)

# How much closer than the margin the footprint may come in the simulation, m. The check
# samples the driven path so that no footprint point moves more than CHECK_STEP_M between two
# poses, so the true closest approach is at most CHECK_STEP_M / 2 nearer than the sampled one
# (triangle inequality); pose integration adds < 1e-6 m (test_sweepref). The rest is slack
# for floating point in the engine, not for any approximation of its geometry.
TOLERANCE_M = 0.001
CHECK_STEP_M = 0.001
RATIO_LOW = 0.9  # the limit must be at least this share of the brute-force one
WATCH_DEPTH_M = 0.01  # how clearly a cone must reach into the swept region (path_is_watched)
TINY = 1e-9  # m/s or rad/s: float rounding of the comparison itself
ODOM_PERIOD_S = 0.02  # odometry at 50 Hz
SETTLE_S = 1.0  # at rest with readings before the robot sets off
START_S = 10.0  # clock at the start of a simulation


def fuzz(examples: int) -> settings:
    """Return the settings of a property: ``examples`` cases, the same on every run.

    No shrinking: a case costs the engine 0.2 to 0.4 s, so shrinking a failure takes minutes;
    every failure message instead carries the whole case (parameters, obstacles, motion,
    faults, readings) to rebuild it with :class:`World`.
    """
    return settings(max_examples=max(1, round(examples * (_SCALE or 1))), deadline=None,
                    derandomize=not _SCALE, database=None, report_multiple_bugs=False,
                    phases=[Phase.explicit, Phase.generate],
                    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                                           HealthCheck.filter_too_much])


# ==========================================================================================
# The world: a robot (flat parameters), obstacle points in the odom frame, a motion, faults
# ==========================================================================================

@dataclass(frozen=True)
class Segment:
    """One motion: along a path (heading rad, curvature 1/m) or turning in place (direction
    +1 counter-clockwise), tried for ``duration_s`` s at the desired rate (or until a stop
    planned at ``amount``), then stopped."""

    kind: str  # 'path' or 'turn'
    heading: float = 0.0
    curvature: float = 0.0
    direction: int = 1
    duration_s: float = 2.0
    amount: float = math.inf  # m or rad: the robot plans to stop there (braking at its rate)


@dataclass(frozen=True)
class Fault:
    """From ``start_s`` to ``end_s`` (s after setting off) a sensor hears no echo (+inf),
    sends nothing ('drop') or sends NaN ('invalid')."""

    sensor: str
    kind: str
    start_s: float
    end_s: float


@dataclass
class World:
    """Everything one case needs; ``describe`` prints it so that it can be rebuilt."""

    params: dict[str, Any]
    obstacles: np.ndarray
    segments: tuple[Segment, ...]
    faults: tuple[Fault, ...] = ()
    accel_mps2: float = 1.0
    config: Config = field(init=False, repr=False)

    def __post_init__(self) -> None:
        """Build the configuration once."""
        self.config = build_config(self.params)

    def describe(self) -> str:
        """Return a reproducible description: parameters, obstacles, motion, faults."""
        return (f'params = {self.params!r}\n'
                f'obstacles = np.array({self.obstacles.tolist()!r})\n'
                f'segments = {self.segments!r}\nfaults = {self.faults!r}\n'
                f'accel_mps2 = {self.accel_mps2!r}')


def polygon_of(config: Config) -> np.ndarray:
    """Return the footprint polygon (N, 2) of a configuration, m."""
    return np.asarray(config.robot.footprint.points, dtype=float)


def beams_of(config: Config) -> dict[str, Beam]:
    """Return the test-world beam of every configured sensor."""
    return {s.name: Beam(s.x_m, s.y_m, s.yaw_rad, s.field_of_view_rad, s.min_range_m,
                         s.max_range_m) for s in config.sensors}


def turn_decel_of(config: Config) -> float:
    """Return the guaranteed turn deceleration, rad/s^2: robot.turn_decel, or when 0 robot.decel
    divided by the footprint's circumradius about base_link (issue 17 interface)."""
    given_value = float(config.to_parameters().get('robot.turn_decel', 0.0) or 0.0)
    return given_value or config.robot.decel_mps2 / circumradius(polygon_of(config))


def max_turn_rate_of(config: Config) -> float:
    """Return limits.max_turn_rate, rad/s (1.5 before the key exists, its planned default)."""
    return float(config.to_parameters().get('limits.max_turn_rate', 1.5))


def configured_latency_s(config: Config, name: str) -> float:
    """Return the configured detection latency, s: cycle - own slot + own echo timeout 2R/c,
    sensors firing one slot after another, a slot lasting its slot_duration or the longest
    echo timeout in it (DEVELOPERS.md layout of schedule.py, issue 17 interface)."""
    slots: dict[int, float] = {}
    for s in config.sensors:
        need = s.slot_duration_s or echo_timeout(s.max_range_m, s.air_temperature_c)
        slots[s.slot] = max(slots.get(s.slot, 0.0), need)
    me = config.sensor(name)
    return (sum(slots.values()) - slots[me.slot]
            + echo_timeout(me.max_range_m, me.air_temperature_c))


def cycle_s(config: Config) -> float:
    """Return the firing cycle: the sum of the slot durations, s."""
    slots: dict[int, float] = {}
    for s in config.sensors:
        need = s.slot_duration_s or echo_timeout(s.max_range_m, s.air_temperature_c)
        slots[s.slot] = max(slots.get(s.slot, 0.0), need)
    return sum(slots.values())


# ------------------------------------------------------------------------- strategies

def _rectangle(length: float, width: float, ox: float, oy: float) -> np.ndarray:
    hl, hw = length / 2, width / 2
    return np.array([[ox + hl, oy - hw], [ox + hl, oy + hw], [ox - hl, oy + hw],
                     [ox - hl, oy - hw]])


@st.composite
def footprints(draw: Any) -> np.ndarray:
    """Draw a counter-clockwise footprint with base_link inside: a rectangle (base_link off
    centre), a convex polygon of 5 to 8 points, or an L-shape (a corner cut away)."""
    kind = draw(st.sampled_from(['rectangle', 'convex', 'ell']))
    if kind == 'convex':
        n = draw(st.integers(5, 8))
        a, b = draw(st.floats(0.25, 0.6)), draw(st.floats(0.2, 0.45))
        cx, cy = draw(st.floats(-0.1, 0.1)), draw(st.floats(-0.06, 0.06))
        jitter = draw(st.lists(st.floats(-0.3, 0.3), min_size=n, max_size=n))
        angles = [2 * math.pi * (i + j) / n for i, j in enumerate(jitter)]
        return np.array([[cx + a * math.cos(t), cy + b * math.sin(t)] for t in angles])
    length, width = draw(st.floats(0.4, 1.2)), draw(st.floats(0.3, 0.9))
    shift = 0.3 if kind == 'rectangle' else 0.1  # base_link off centre, never in the notch
    ox = draw(st.floats(-shift, shift)) * length
    oy = draw(st.floats(-0.1, 0.1)) * width
    box = _rectangle(length, width, ox, oy)
    if kind == 'rectangle':
        return box
    # cut the front-left corner away (at most 0.4 of each side: base_link, within 0.1 of the
    # centre, stays outside the notch), then mirror to put the notch at any corner
    nx, ny = draw(st.floats(0.25, 0.4)) * length, draw(st.floats(0.25, 0.4)) * width
    (x1, y0), (_, y1), (x0, _) = box[0], box[1], box[2]
    ell = np.array([[x1, y0], [x1, y1 - ny], [x1 - nx, y1 - ny], [x1 - nx, y1], [x0, y1],
                    [x0, y0]])
    mirror = draw(st.sampled_from([(1, 1), (-1, 1), (1, -1), (-1, -1)]))
    ell = ell * np.array(mirror)
    if mirror[0] * mirror[1] < 0:  # one mirror turns the outline clockwise
        ell = ell[::-1]
    return ell


def outward_normal(polygon: np.ndarray, edge: int) -> float:
    """Return the bearing of the outward normal of edge ``edge`` (counter-clockwise outline:
    the right-hand side of the edge direction), rad."""
    a, b = polygon[edge], polygon[(edge + 1) % len(polygon)]
    return math.atan2(-(b[0] - a[0]), b[1] - a[1])


@st.composite
def layouts(draw: Any, polygon: np.ndarray, facing: float | None) -> dict[str, Any]:
    """Draw 1 to 8 sensors on the footprint's edges, each facing outward (+/- 0.4 rad), fov 0.2
    to 0.6 rad, max range 1.5 to 5 m; the first on the edge facing most nearly ``facing``."""
    count = draw(st.integers(1, 8))
    names = [f's{i}' for i in range(count)]
    params: dict[str, Any] = {'sensor_names': names}
    edges = len(polygon)
    for i, name in enumerate(names):
        if i == 0 and facing is not None:
            edge = max(range(edges), key=lambda e: math.cos(outward_normal(polygon, e)
                                                            - facing))
        else:
            edge = draw(st.integers(0, edges - 1))
        t = draw(st.floats(0.1, 0.9))
        a, b = polygon[edge], polygon[(edge + 1) % edges]
        x, y = a + t * (b - a)
        yaw = outward_normal(polygon, edge) + draw(st.floats(-0.4, 0.4))
        params.update({
            f'sensors.{name}.x': float(x), f'sensors.{name}.y': float(y),
            f'sensors.{name}.yaw': math.remainder(yaw, 2 * math.pi),
            f'sensors.{name}.field_of_view': draw(st.floats(0.2, 0.6)),
            f'sensors.{name}.max_range': draw(st.floats(1.5, 5.0)),
        })
    return params


@st.composite
def obstacle_points(draw: Any, polygon: np.ndarray, beams: list[Beam], margin: float,
                    blind: bool) -> np.ndarray:
    """Draw 1 to 5 obstacles inside the cones at the start: points, and short walls sampled
    every 1 cm (only their points inside some cone kept); none within the margin (+1 cm) of
    the footprint. ``blind`` allows points nearer than a sensor's min range."""
    found = []
    for _ in range(draw(st.integers(1, 5))):
        beam = beams[draw(st.integers(0, len(beams) - 1))]
        off = draw(st.floats(-0.9, 0.9)) * beam.fov_rad / 2
        low = 0.02 if blind and draw(st.booleans()) else beam.min_range_m + 0.05
        distance = draw(st.floats(low, 0.95 * beam.max_range_m))
        centre = np.array([beam.x_m + distance * math.cos(beam.yaw_rad + off),
                           beam.y_m + distance * math.sin(beam.yaw_rad + off)])
        if draw(st.booleans()):
            found.append(centre[None, :])
            continue
        length = draw(st.floats(0.1, 0.6))
        along = draw(st.floats(0.0, math.pi))
        t = np.linspace(-length / 2, length / 2, max(2, round(length / 0.01) + 1))[:, None]
        found.append(centre + t * np.array([math.cos(along), math.sin(along)]))
    points = np.concatenate(found)
    seen = np.zeros(len(points), dtype=bool)
    for beam in beams:
        rel = points - np.array([beam.x_m, beam.y_m])
        off_axis = np.angle(np.exp(1j * (np.arctan2(rel[:, 1], rel[:, 0]) - beam.yaw_rad)))
        seen |= (np.abs(off_axis) <= beam.fov_rad / 2) & (np.hypot(*rel.T) < beam.max_range_m)
    clear = polygon_distance(points, polygon) >= margin + 0.01
    return points[seen & clear]


MOTIONS = ['forward', 'reverse', 'arc', 'holonomic', 'turn', 'turn_then_reverse',
           'arc_then_reverse']
curvatures = st.one_of(
    st.sampled_from([0.2, 0.5, 1.0, 2.0, 3.0, 5.0, 8.0]),  # including tight ones
    st.floats(0.05, 8.0),
).flatmap(lambda k: st.sampled_from([k, -k]))


@st.composite
def segments(draw: Any) -> tuple[Segment, ...]:
    """Draw a motion: forward, reverse, an arc either way (forward or reverse), a holonomic
    heading (any curvature), turning in place, or a turn or arc followed by reversing."""
    kind = draw(st.sampled_from(MOTIONS))
    duration = draw(st.floats(1.0, 3.0))
    if kind == 'forward':
        return (Segment('path', 0.0, 0.0, duration_s=duration),)
    if kind == 'reverse':
        return (Segment('path', math.pi, 0.0, duration_s=duration),)
    if kind == 'arc':
        heading = draw(st.sampled_from([0.0, math.pi]))
        return (Segment('path', heading, draw(curvatures), duration_s=duration),)
    if kind == 'holonomic':
        k = draw(st.one_of(st.just(0.0), curvatures))
        return (Segment('path', draw(st.floats(0.0, 2 * math.pi)), k, duration_s=duration),)
    turn = Segment('turn', direction=draw(st.sampled_from([1, -1])), duration_s=duration)
    if kind == 'turn':
        return (turn,)
    first = turn if kind == 'turn_then_reverse' else Segment('path', 0.0, draw(curvatures),
                                                             duration_s=duration)
    return (first, Segment('path', math.pi, 0.0, duration_s=draw(st.floats(1.0, 3.0))))


def is_holonomic_motion(motion: tuple[Segment, ...]) -> bool:
    """Tell whether a motion needs a holonomic base (a heading other than 0 or pi)."""
    return any(s.kind == 'path' and s.heading not in (0.0, math.pi) for s in motion)


@st.composite
def worlds(draw: Any, *, blind: bool = False, faults: bool = True,
           fallback: bool = False) -> World:
    """Draw a whole case: robot, layout, obstacles seen at the start, motion, faults; with
    ``fallback`` a non-zero limits.fallback_speed a third of the time."""
    motion = draw(segments())
    polygon = draw(footprints())
    first = motion[0]
    facing = first.heading if first.kind == 'path' else None
    params = draw(layouts(polygon, facing))
    margin = draw(st.floats(0.05, 0.2))
    params.update({
        'robot.footprint': [float(v) for v in polygon.ravel()],
        'robot.decel': draw(st.floats(0.4, 2.0)),
        'robot.reaction_time': draw(st.floats(0.05, 0.3)),
        'robot.holonomic': is_holonomic_motion(motion) or draw(st.booleans()),
        'limits.margin': margin,
        'limits.max_speed': draw(st.floats(0.5, 2.0)),
        'limits.rise_rate': draw(st.sampled_from([0.5, 1.0, 3.0])),
        'limits.fallback_speed': draw(st.sampled_from([0.0, 0.0, 0.2])) if fallback else 0.0,
        'limits.memory_hold': 0.0,  # remembered until a reading clears them: never by time
    })
    if 'limits.max_turn_rate' in NEW_KEYS:
        params['limits.max_turn_rate'] = draw(st.floats(0.5, 2.5))
    if 'robot.turn_decel' in NEW_KEYS:
        params['robot.turn_decel'] = draw(st.one_of(st.just(0.0), st.floats(0.5, 4.0)))
    # silent only after more than a whole cycle: every sensor speaks once per cycle
    probe = build_config(params)
    params['limits.stale_after'] = max(0.3, round(1.5 * cycle_s(probe) + 0.05, 3))
    config = build_config(params)
    beams = list(beams_of(config).values())
    obstacles = draw(obstacle_points(polygon, beams, margin, blind))
    chosen: list[Fault] = []
    if faults:
        for _ in range(draw(st.integers(0, 2))):
            start = draw(st.floats(0.0, 2.0))
            chosen.append(Fault(draw(st.sampled_from(config.sensor_names)),
                                draw(st.sampled_from(['no_echo', 'drop', 'invalid'])),
                                start, start + draw(st.floats(0.1, 1.5))))
    return World(params, obstacles, motion, tuple(chosen), draw(st.floats(0.3, 2.0)))


# ==========================================================================================
# NOT ABSURDLY LOW: static snapshots against the brute force of the promise
# ==========================================================================================

@dataclass
class Snapshot:
    """A monitor at rest right after one reading of every sensor, all stamped ``now``."""

    world: World
    monitor: Monitor
    ranges: dict[str, float]
    now: float = START_S

    @classmethod
    def take(cls, world: World) -> Snapshot:
        """Feed odometry at rest and one reading per sensor from the test world's sonar."""
        monitor = Monitor(world.config)
        now = START_S
        monitor.on_odometry(OdometrySample(now, 0.0, 0.0, 0.0, now))
        ranges = {}
        for name, beam in beams_of(world.config).items():
            ranges[name] = sonar_range(beam, (0.0, 0.0, 0.0), world.obstacles)
            monitor.on_range(RangeReading(name, now, ranges[name], now))
        monitor.tick(now)
        return cls(world, monitor, ranges, now)

    def point_sets(self) -> list[tuple[np.ndarray, float]]:
        """Return each reading's constraint points with its budget, detection latency +
        reaction time (age 0), as the issue 17 interface promises."""
        config = self.world.config
        beams = beams_of(config)
        return [(reading_points(beams[n], r),
                 configured_latency_s(config, n) + config.robot.reaction_time_s)
                for n, r in self.ranges.items()]

    def describe(self) -> str:
        """Return the world and the readings, reproducibly."""
        return f'{self.world.describe()}\nranges at now={self.now} = {self.ranges!r}'


def reference_speed(snap: Snapshot, heading: float, curvature: float) -> float:
    """Return the brute-force largest safe speed of a snapshot along a path, m/s."""
    config = snap.world.config
    return largest_safe_speed(polygon_of(config), snap.point_sets(), heading, curvature,
                              margin=config.limits.margin_m, decel=config.robot.decel_mps2,
                              turn_decel=turn_decel_of(config),
                              max_speed=config.limits.max_speed_mps)


def reference_turn_rate(snap: Snapshot, direction: int) -> float:
    """Return the brute-force largest safe turn rate of a snapshot, rad/s."""
    config = snap.world.config
    return largest_safe_turn_rate(polygon_of(config), snap.point_sets(), direction,
                                  margin=config.limits.margin_m,
                                  turn_decel=turn_decel_of(config),
                                  max_turn_rate=max_turn_rate_of(config))


def path_is_watched(config: Config, heading: float, curvature: float) -> bool:
    """Tell whether a cone clearly watches what the footprint sweeps along the path: some point
    of a sector out to max range (sampled every 2 cm), at least WATCH_DEPTH_M outside the
    footprint now, lies at least WATCH_DEPTH_M inside it somewhere within the longest stop from
    max speed. Only then may the engine not fall back (issue 17 interface: fallback when no
    cone watches the swept region); slivers thinner than that are left to the engine."""
    polygon = polygon_of(config)
    a = config.robot.decel_mps2
    if curvature:
        a = min(a, turn_decel_of(config) / abs(curvature))
    v = config.limits.max_speed_mps
    budget = max(configured_latency_s(config, n) for n in config.sensor_names) \
        + config.robot.reaction_time_s
    length = v * budget + v * v / (2 * a)
    if curvature:
        length = min(length, 2 * math.pi / abs(curvature))
    factor = fastest_point_factor(polygon, heading, curvature)
    poses = path_poses(path_grid(length, 0.005 / factor), heading, curvature)
    reach = circumradius(polygon)
    for b in beams_of(config).values():
        cone = sector_points(b.x_m, b.y_m, b.yaw_rad, b.fov_rad, b.max_range_m, 0.02)
        cone = cone[(np.hypot(cone[:, 0], cone[:, 1]) <= length + reach)
                    & (polygon_distance(cone, polygon) >= WATCH_DEPTH_M)]
        for start in range(0, len(poses), 64):
            block = poses[start:start + 64]
            low, high = block[:, :2].min(axis=0) - reach, block[:, :2].max(axis=0) + reach
            near = cone[np.all((cone >= low) & (cone <= high), axis=1)]
            for pose in block if len(near) else ():
                if (polygon_depth(to_body(near, pose), polygon) >= WATCH_DEPTH_M).any():
                    return True
    return False


def assert_speed_within_reference(snap: Snapshot, heading: float, curvature: float) -> None:
    """The engine's instantaneous limit is at most the brute force (times 1 + 1e-6) and at
    least 90 % of it where it is above 0.05 m/s, where the path is watched; on a path no cone
    watches, the fallback speed is what the promise says."""
    config = snap.world.config
    limit = snap.monitor.limit_on_path(heading, curvature, snap.now)
    ref = reference_speed(snap, heading, curvature)
    where = (f'limit_on_path(h={heading!r}, k={curvature!r}) = {limit!r} m/s, brute force '
             f'{ref!r} m/s\n{snap.describe()}')
    watched = path_is_watched(config, heading, curvature)
    if watched or limit != config.limits.fallback_speed_mps:
        assert limit <= ref * (1 + 1e-6) + TINY, f'ABOVE the brute force: {where}'
    if ref > 0.05 and watched:
        assert limit >= RATIO_LOW * ref, f'absurdly low: {where}'


def assert_turn_within_reference(snap: Snapshot, direction: int) -> None:
    """The same for turning in place, when no reading is blind."""
    limit = snap.monitor.turn_limit_for(direction, snap.now)
    ref = reference_turn_rate(snap, direction)
    where = (f'turn_limit_for({direction}) = {limit!r} rad/s, brute force {ref!r} rad/s\n'
             f'{snap.describe()}')
    assert limit <= ref * (1 + 1e-6) + TINY, f'ABOVE the brute force: {where}'
    if ref > 0.05:
        assert limit >= RATIO_LOW * ref, f'absurdly low: {where}'


@needs_engine
@fuzz(150)  # ~570 limits checked, ~45 s: Monitor setup and first tick cost ~0.2 s a case
@given(worlds(blind=True, faults=False, fallback=True), st.data())
def test_limits_at_rest_are_within_the_brute_force(world, data):
    """Any robot, layout and readings: the limit on the path of the drawn motion and on one
    more drawn heading and curvature, and (no reading blind) both turn limits, lie between
    90 % and 100 % of the brute force."""
    snap = Snapshot.take(world)
    config = world.config
    paths = [(s.heading, s.curvature) for s in world.segments if s.kind == 'path']
    headings = st.floats(0.0, 2 * math.pi) if config.robot.holonomic else st.sampled_from(
        [0.0, math.pi])
    paths.append((data.draw(headings), data.draw(st.one_of(st.just(0.0), curvatures))))
    for heading, curvature in paths:
        assert_speed_within_reference(snap, heading, curvature)
    beams = beams_of(config)
    if all(not r < beams[n].min_range_m for n, r in snap.ranges.items()):
        for direction in (1, -1):
            assert_turn_within_reference(snap, direction)


# ==========================================================================================
# SAFETY: a robot that obeys the limits, in closed loop with the engine
# ==========================================================================================

def advance(speed: float, command: float, up: float, down: float, dt: float
            ) -> tuple[float, float]:
    """Return (speed, distance) after ``dt`` s of moving towards ``command`` at constant
    acceleration ``up`` or deceleration ``down`` and then holding it (uniform acceleration)."""
    rate = -down if speed > command else up
    reach = abs(command - speed) / (down if speed > command else up)
    t = min(dt, reach)
    distance = speed * t + 0.5 * rate * t * t
    end = speed + rate * t
    if t < dt:
        end = command
        distance += command * (dt - t)
    return end, max(0.0, distance)


@dataclass
class Run:
    """What happened in one simulation."""

    starts: list[np.ndarray]  # odom pose at the start of each segment
    reached: list[float]  # path parameter (m or rad) reached in each segment
    trace: list[tuple[float, int, float, float]]  # (time s, segment, parameter, rate)
    seen: dict[int, float]  # obstacle index -> when first reported as an echo, s
    decisions: list[Any]
    set_off_s: float


def simulate(world: World, monitor: Any = None) -> Run:
    """Drive the world's motion in closed loop with the engine.

    Readings every firing cycle (each sensor at the end of its slot, the test world's sonar
    at the pose of that instant, stamp = arrival), odometry at 50 Hz with the true twist,
    ``tick`` at publish_rate and after every reading. The robot rests for SETTLE_S, then
    tries each segment at a desired rate above any limit, resting PAUSE between segments.
    Its command is the limit of the newest decision at least reaction_time old; above it, it
    brakes at exactly robot.decel (min(decel, turn_decel/|k|) on an arc, keeping its
    curvature; turn_decel turning in place), below it it speeds up at ``accel_mps2``.

    Setting off on a path from rest, the published limit was computed for the motion before
    (the engine cannot know the next one); until it has moved for reaction_time plus two
    ticks and two odometry periods, the robot therefore obeys ``limit_on_path`` of its own
    path, asked at the same tick, as a command gate would. After that it obeys the published
    limit alone.
    """
    config = world.config
    polygon = polygon_of(config)
    beams = beams_of(config)
    monitor = Monitor(config) if monitor is None else monitor
    robot, limits = config.robot, config.limits
    reaction = robot.reaction_time_s
    turn_decel = turn_decel_of(config)
    turn_accel = world.accel_mps2 / circumradius(polygon)
    period = 1.0 / config.publish_rate_hz
    pause = reaction + period + 2 * ODOM_PERIOD_S
    set_off_window = reaction + 2 * period + 2 * ODOM_PERIOD_S
    set_off = START_S + SETTLE_S
    cycle = cycle_s(config)
    durations: dict[int, float] = {}
    for s in config.sensors:
        need = s.slot_duration_s or echo_timeout(s.max_range_m, s.air_temperature_c)
        durations[s.slot] = max(durations.get(s.slot, 0.0), need)
    slot_end = {s.name: sum(d for k, d in durations.items() if k <= s.slot)
                for s in config.sensors}
    end = set_off + sum(seg.duration_s + pause + 3.0 for seg in world.segments)

    events: list[tuple[float, int, str, Any]] = []
    for name, offset in slot_end.items():
        for i in range(int((end - START_S) / cycle) + 1):
            heapq.heappush(events, (START_S + offset + i * cycle, 1, 'range', name))
    for i in range(int((end - START_S) / ODOM_PERIOD_S) + 1):
        heapq.heappush(events, (START_S + i * ODOM_PERIOD_S, 0, 'odom', None))
    for i in range(int((end - START_S) / period) + 1):
        heapq.heappush(events, (START_S + i * period, 2, 'tick', None))

    segment, phase, go_at = 0, 'wait', set_off
    parameter, rate = 0.0, 0.0
    moving_since = math.inf  # when the robot began to move in this segment
    starts, reached = [np.zeros(3)], [0.0]
    limit_now = turn_now = 0.0  # what the robot obeys
    trace: list[tuple[float, int, float, float]] = [(START_S, 0, 0.0, 0.0)]
    seen: dict[int, float] = {}
    decisions = []
    t_prev = START_S

    def pose_now() -> np.ndarray:
        seg = world.segments[min(segment, len(world.segments) - 1)]
        return pose_now_of(starts[-1], seg, parameter)

    def twist() -> tuple[float, float, float]:
        if segment >= len(world.segments):
            return 0.0, 0.0, 0.0
        seg = world.segments[segment]
        if seg.kind == 'turn':
            return 0.0, 0.0, seg.direction * rate
        return (rate * math.cos(seg.heading), rate * math.sin(seg.heading),
                seg.curvature * rate)

    while events:
        t, _, kind, payload = heapq.heappop(events)
        if t > end:
            break
        if segment < len(world.segments) and phase != 'wait':
            # move the robot from t_prev to t under a constant command
            seg = world.segments[segment]
            if seg.kind == 'turn':
                desired, up, down = max_turn_rate_of(config) + 0.5, turn_accel, turn_decel
                obeyed = turn_now
            else:
                down = robot.decel_mps2
                if seg.curvature:
                    down = min(down, turn_decel / abs(seg.curvature))
                desired, up, obeyed = limits.max_speed_mps + 0.5, world.accel_mps2, limit_now
            if phase == 'go' and (t_prev >= go_at + seg.duration_s
                                  or parameter + rate * rate / (2 * down) >= seg.amount):
                phase = 'stop'
            command = min(desired if phase == 'go' else 0.0, obeyed)
            rate, moved = advance(rate, command, up, down, t - t_prev)
            if rate > 0.0:
                moving_since = min(moving_since, t_prev)
            parameter += moved
            reached[-1] = parameter
            trace.append((t, segment, parameter, rate))
            if phase == 'stop' and rate == 0.0:
                segment += 1  # stopped: rest, then the next segment from here
                if segment < len(world.segments):
                    starts.append(pose_now_of(starts[-1], seg, parameter))
                    reached.append(0.0)
                    parameter, phase, go_at = 0.0, 'wait', t + pause
                    moving_since = math.inf
        elif phase == 'wait' and t >= go_at:
            phase = 'go'
        t_prev = t
        if kind == 'odom':
            vx, vy, wz = twist()
            monitor.on_odometry(OdometrySample(t, vx, vy, wz, t))
        elif kind == 'range':
            name = payload
            fault = next((f for f in world.faults if f.sensor == name
                          and f.start_s <= t - set_off < f.end_s), None)
            if fault is not None and fault.kind == 'drop':
                continue
            pose = pose_now()
            r = sonar_range(beams[name], pose, world.obstacles)
            if fault is not None:
                r = math.inf if fault.kind == 'no_echo' else math.nan
            elif math.isfinite(r):
                seen.setdefault(nearest_echo(beams[name], pose, world.obstacles), t)
            monitor.on_range(RangeReading(name, t, r, t))
            heapq.heappush(events, (t, 3, 'tick', None))
        elif kind == 'tick':
            decision = monitor.tick(t)
            decisions.append(decision)
            gate = None
            if segment < len(world.segments) and world.segments[segment].kind == 'path':
                seg = world.segments[segment]
                gate = (segment, monitor.limit_on_path(seg.heading, seg.curvature, t))
            heapq.heappush(events, (t + reaction, 4, 'obey', (decision, gate)))
        elif kind == 'obey':
            decision, gate = payload
            limit_now = decision.limit_mps
            turn_now = decision.turn_limit_radps
            if gate is not None and gate[0] == segment and t < moving_since + set_off_window:
                limit_now = gate[1]  # the published limit is still for the motion before
    return Run(starts, reached, trace, seen, decisions, set_off)


def pose_now_of(start: np.ndarray, seg: Segment, parameter: float) -> np.ndarray:
    """Return the odom pose after ``parameter`` (m or rad) of segment ``seg`` from ``start``."""
    local = (path_pose(parameter, seg.heading, seg.curvature) if seg.kind == 'path'
             else turn_poses(np.array([parameter]), seg.direction)[0])
    return compose(start, local[None, :])[0]


def segment_poses(world: World, run: Run, index: int) -> tuple[np.ndarray, np.ndarray]:
    """Return (parameters, odom poses) sampled along the driven part of a segment, no
    footprint point moving more than CHECK_STEP_M between two of them."""
    seg = world.segments[index]
    polygon = polygon_of(world.config)
    if seg.kind == 'path':
        step = CHECK_STEP_M / fastest_point_factor(polygon, seg.heading, seg.curvature)
        grid = path_grid(run.reached[index], step)
        local = path_poses(grid, seg.heading, seg.curvature)
    else:
        grid = path_grid(run.reached[index], CHECK_STEP_M / circumradius(polygon))
        local = turn_poses(grid, seg.direction)
    return grid, compose(run.starts[index], local)


def assert_kept_clear(world: World, run: Run) -> None:
    """No footprint point came closer than margin - TOLERANCE_M to an obstacle point that
    was reported as an echo before the robot set off; otherwise describe when and where."""
    early = sorted(i for i, t in run.seen.items() if t <= run.set_off_s)
    if not early:
        return
    points = world.obstacles[early]
    polygon = polygon_of(world.config)
    margin = world.config.limits.margin_m
    for index in range(len(run.reached)):
        grid, poses = segment_poses(world, run, index)
        distances = sweep_distances(poses, polygon, points)
        bad = np.flatnonzero(distances < margin - TOLERANCE_M)
        if not len(bad):
            continue
        first = int(bad[0])
        worst = int(np.argmin(distances))
        trace = [(t, p, r) for t, s, p, r in run.trace if s == index]
        times = np.array([t for t, _, _ in trace])
        params = np.array([p for _, p, _ in trace])
        when = float(np.interp(grid[first], params, times))
        hit = int(np.argmin(polygon_distance(
            _body(points, poses[first]), polygon)))
        speed = float(np.interp(grid[first], params, [r for _, _, r in trace]))
        raise AssertionError(
            f'footprint came within {distances[worst]:.4f} m (margin {margin} m) of obstacle '
            f'point {points[hit].tolist()} seen at {run.seen[early[hit]]:.3f} s; first below '
            f'margin - {TOLERANCE_M} m at t = {when:.3f} s (set off at {run.set_off_s} s), '
            f'segment {index} {world.segments[index]}, parameter {grid[first]:.4f}, pose '
            f'{poses[first].tolist()}, rate {speed:.3f}\n'
            f'decisions near then: {_decisions_near(run, when)}\n{world.describe()}')


def _body(points: np.ndarray, pose: np.ndarray) -> np.ndarray:
    x, y, yaw = pose
    c, s = math.cos(yaw), math.sin(yaw)
    d = points - np.array([x, y])
    return np.column_stack((c * d[:, 0] + s * d[:, 1], -s * d[:, 0] + c * d[:, 1]))


def _decisions_near(run: Run, when: float) -> str:
    near = [d for d in run.decisions if when - 1.0 <= d.time_s <= when]
    return '; '.join(f'{d.time_s:.3f}: {d.limit_mps:.3f} m/s {d.turn_limit_radps:.3f} rad/s '
                     f'k={d.curvature_1pm:.3f} ({d.reason})' for d in near[-8:])


@needs_engine
@fuzz(100)  # ~35 s: each case runs 5 to 15 s of robot time, ~300 decisions
@given(worlds())
def test_a_robot_obeying_the_limits_keeps_the_margin(world):
    """Any robot, layout, obstacles, motion and lost, dropped or invalid readings: a robot that
    obeys the published limits keeps the margin to everything it saw before setting off."""
    assert_kept_clear(world, simulate(world))


# ==========================================================================================
# The cases, pinned
# ==========================================================================================

def box_world(sensors: dict[str, tuple[float, float, float]], obstacles: list[list[float]],
              segments_: tuple[Segment, ...] = (Segment('path'),), **extra: Any) -> World:
    """Return a world with the 1.0 m x 0.6 m box robot centred on base_link, sensors given
    as name -> (x, y, yaw) with fov 0.4 rad and 4 m range, and the given obstacle points."""
    params: dict[str, Any] = {
        'sensor_names': list(sensors),
        'robot.footprint': [0.5, -0.3, 0.5, 0.3, -0.5, 0.3, -0.5, -0.3],
        'limits.max_speed': 1.5,
    }
    for name, (x, y, yaw) in sensors.items():
        params.update({f'sensors.{name}.x': x, f'sensors.{name}.y': y,
                       f'sensors.{name}.yaw': yaw})
    params.update(extra)
    return World(params, np.array(obstacles, dtype=float).reshape(-1, 2), segments_)


@needs_engine
def test_an_arc_allows_much_less_than_a_straight_line_model():
    """A post ahead-right, seen by a front-right sensor: its echo arc lies beside the straight
    corridor but inside the ring a right turn of radius 0.67 m sweeps, so the arc allows much
    less than straight travel; both limits are within the brute force band."""
    world = box_world({'front': (0.5, 0.0, 0.0), 'right': (0.5, -0.3, -0.8)}, [[0.8, -0.5]],
                      **{'sensors.right.field_of_view': 0.6})
    snap = Snapshot.take(world)
    assert math.isfinite(snap.ranges['right'])
    assert reference_speed(snap, 0.0, -1.5) < 0.5 * reference_speed(snap, 0.0, 0.0)
    straight = snap.monitor.limit_on_path(0.0, 0.0, snap.now)
    right = snap.monitor.limit_on_path(0.0, -1.5, snap.now)
    assert right < 0.5 * straight
    assert_speed_within_reference(snap, 0.0, -1.5)
    assert_speed_within_reference(snap, 0.0, 0.0)


@needs_engine
def test_a_tight_arc_towards_a_post_in_view_counts_as_watched():
    """A post 0.3 m ahead of the front sensor; a left arc of radius 0.25 m (inside the half
    width) swings the front-left corner through the echo's arc: the front cone watches that
    path, so the limit must be the brute force's, not the fallback speed (0.3 m/s here)."""
    world = box_world({'front': (0.5, 0.0, 0.0)}, [[0.8, 0.0]],
                      **{'limits.fallback_speed': 0.3, 'limits.max_speed': 1.0})
    snap = Snapshot.take(world)
    assert path_is_watched(world.config, 0.0, 4.0)
    assert reference_speed(snap, 0.0, 4.0) < 0.3
    assert_speed_within_reference(snap, 0.0, 4.0)


@needs_engine
@pytest.mark.parametrize('direction', [1, -1])
def test_turning_in_place_is_limited_by_a_post_seen_by_a_side_sensor(direction):
    """A post 0.25 m left of the left edge, seen by a side sensor: the corners sweep the
    circumcircle of radius hypot(0.5, 0.3) = 0.58 m, so turning either way must be limited;
    the limit is within the brute force band."""
    world = box_world({'left': (0.0, 0.3, math.pi / 2), 'front': (0.5, 0.0, 0.0)},
                      [[0.0, 0.55]])
    snap = Snapshot.take(world)
    assert math.isfinite(snap.ranges['left'])
    turn = snap.monitor.turn_limit_for(direction, snap.now)
    assert turn < max_turn_rate_of(world.config)
    assert_turn_within_reference(snap, direction)


@needs_engine
def test_reversing_after_a_turn_remembers_what_the_front_sensor_saw():
    """A post 1.2 m ahead seen by the front sensor; the robot turns half round in place, so
    the post is behind it and outside the narrow rear-left cone; reversing, the limit must
    still count the post (memory), and the robot keeps the margin."""
    sensors = {'front': (0.5, 0.0, 0.0), 'rear': (-0.5, 0.25, math.pi - 0.35)}
    post = [[1.7, -0.1]]
    world = box_world(sensors, post, (Segment('turn', direction=1, duration_s=6.0,
                                              amount=math.pi),
                                      Segment('path', math.pi, 0.0, duration_s=3.0)),
                      **{'sensors.rear.field_of_view': 0.2})
    run = simulate(world)
    assert_kept_clear(world, run)
    assert 0 in run.seen and run.seen[0] <= run.set_off_s


@needs_engine
def test_a_lost_echo_keeps_the_limit_down():
    """A wall 1.0 m ahead, then no echo (+inf) for several readings at rest: the limit stays at
    what the remembered arc allows (budget reaction + 1/publish_rate), far below what the max
    range arc alone would allow."""
    world = box_world({'front': (0.5, 0.0, 0.0)}, [[1.5, y] for y in np.linspace(-1, 1, 201)],
                      **{'sensors.front.max_range': 4.0, 'limits.max_speed': 2.0})
    snap = Snapshot.take(world)
    config, monitor = world.config, snap.monitor
    echo = snap.ranges['front']
    assert echo == pytest.approx(1.0)
    now = snap.now
    for _ in range(6):
        now += cycle_s(config)
        monitor.on_odometry(OdometrySample(now, 0.0, 0.0, 0.0, now))
        monitor.on_range(RangeReading('front', now, math.inf, now))
        decision = monitor.tick(now)
    beam = beams_of(config)['front']
    polygon = polygon_of(config)
    kw = dict(margin=config.limits.margin_m, decel=config.robot.decel_mps2,
              turn_decel=turn_decel_of(config), max_speed=config.limits.max_speed_mps)
    latency = configured_latency_s(config, 'front') + config.robot.reaction_time_s
    memory_budget = config.robot.reaction_time_s + 1.0 / config.publish_rate_hz
    remembered = largest_safe_speed(polygon, [(reading_points(beam, echo), memory_budget),
                                              (reading_points(beam, math.inf), latency)],
                                    0.0, 0.0, **kw)
    horizon_only = largest_safe_speed(polygon, [(reading_points(beam, math.inf), latency)],
                                      0.0, 0.0, **kw)
    limit = monitor.limit_on_path(0.0, 0.0, now)
    assert limit <= remembered * (1 + 1e-6) + TINY
    assert limit >= RATIO_LOW * remembered
    assert remembered < 0.8 * horizon_only
    assert decision.memory_limited


@needs_engine
def test_straight_towards_a_wall_in_view_gives_the_closed_form():
    """A wall 2 m ahead of a front-centre sensor with a 0.2 rad cone: the echo arc's ends,
    r cos(fov/2) ahead and r sin(fov/2) = 0.2 m aside (inside the 0.3 m half width), are
    reached first, so the limit is v_max(r cos(fov/2) - margin, latency + reaction, decel)
    of reference.md sec. 5 within 1 %."""
    world = box_world({'front': (0.5, 0.0, 0.0)}, [[2.5, y] for y in np.linspace(-1, 1, 401)],
                      **{'sensors.front.field_of_view': 0.2, 'limits.max_speed': 3.0})
    snap = Snapshot.take(world)
    config = world.config
    r = snap.ranges['front']
    assert r == pytest.approx(2.0)
    room = r * math.cos(0.1) - config.limits.margin_m
    latency = configured_latency_s(config, 'front') + config.robot.reaction_time_s
    expected = max_safe_speed_closed_form(room, latency, config.robot.decel_mps2)
    assert snap.monitor.limit_on_path(0.0, 0.0, snap.now) == pytest.approx(expected, rel=0.01)
    assert snap.monitor.limit_for(0.0, snap.now) == pytest.approx(expected, rel=0.01)


@needs_engine
def test_a_robot_that_reacts_late_to_a_falling_limit_keeps_the_margin():
    """Straight at a wall 1.2 m ahead, reaction 0.3 s, one 1.5 m sensor (9 ms latency): the
    limit falls all the way in, and the robot always drives at the limit published 0.3 s
    earlier. In a steady approach the speed v then satisfies v (T - reaction) + v^2/(2a) =
    room (reference.md sec. 5 with the room of reaction_time ago), which fits the room only
    if T >= 2 reaction: the budget must cover the reaction twice, or the limit overruns."""
    wall = [[1.7, y] for y in np.linspace(-1.0, 1.0, 201)]
    world = box_world({'front': (0.5, 0.0, 0.0)}, wall, (Segment('path', duration_s=6.0),),
                      **{'sensors.front.max_range': 1.5, 'robot.reaction_time': 0.3,
                         'robot.decel': 1.0, 'limits.rise_rate': 3.0})
    run = simulate(world)
    assert run.reached[0] > 0.5  # it did drive towards the wall
    assert_kept_clear(world, run)


@needs_engine
def test_reversing_along_a_slanted_wall_remembers_its_first_echo():
    """A short wall behind-left, slanted so that as the robot reverses each new echo comes
    from a nearer point of it while the first one leaves the rear cone: that first echo must
    stay counted (its arc, or memory of it), so the robot stops with the margin kept. The
    reaction time is short (0.05 s) so that the reaction budget plays no part here."""
    start, end = np.array([-0.93, 0.29]), np.array([-0.86, 0.325])
    wall = [(start + t * (end - start)).tolist() for t in np.linspace(0.0, 1.0, 9)]
    world = box_world({'rear': (-0.5, 0.09, 2.76)}, wall,
                      (Segment('path', math.pi, 0.0, duration_s=3.0),),
                      **{'sensors.rear.field_of_view': 0.43, 'limits.margin': 0.17,
                         'robot.reaction_time': 0.05, 'robot.decel': 1.0})
    run = simulate(world)
    assert len([t for t in run.seen.values() if t > run.set_off_s]) >= 3  # nearer echoes
    assert_kept_clear(world, run)

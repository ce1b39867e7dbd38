"""The invented-world sonar simulator: world shapes, one ping, and recorded robot runs.

Used by the demo and the tests to make recordings with known truth. Every model constant is
invented (see :mod:`sonar_guard.sim.sonar`); nothing here describes a real sensor.
"""
from sonar_guard.sim.absorption import absorption_db_per_m
from sonar_guard.sim.drive import Path, Run, SpeedProfile, Stop
from sonar_guard.sim.sonar import Echo, Scene, SonarPhysics, mount_pose, ping, trace
from sonar_guard.sim.world import (
    AirZone,
    Disc,
    Mover,
    MovingBox,
    SwingingDoor,
    Walker,
    Wall,
    World,
    interpolate_waypoints,
)

__all__ = [
    'AirZone',
    'Disc',
    'Echo',
    'Mover',
    'MovingBox',
    'Path',
    'Run',
    'Scene',
    'SonarPhysics',
    'SpeedProfile',
    'Stop',
    'SwingingDoor',
    'Walker',
    'Wall',
    'World',
    'absorption_db_per_m',
    'interpolate_waypoints',
    'mount_pose',
    'ping',
    'trace',
]

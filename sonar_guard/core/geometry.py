"""Geometry of sonars on a robot: one import for the mounts, footprint and coverage modules.

Frames and units follow REP 103 (``base_link``: x forward, y left, z up; metres, radians).
:mod:`~sonar_guard.core.footprint` holds the outline, :mod:`~sonar_guard.core.mounts` the sonar
poses and beams, :mod:`~sonar_guard.core.coverage` which headings each beam watches and
:mod:`~sonar_guard.core.sweep` how far the robot moves before it comes near a point.
"""
from sonar_guard.core.coverage import (
    coverage,
    covers_heading,
    heading_index,
    heading_name,
    travel_to_arc,
    uniform_headings,
)
from sonar_guard.core.footprint import Footprint, polygon_problems
from sonar_guard.core.mounts import (
    Mount,
    beam_axis,
    edge_offset_m,
    free_distance_m,
    mount_quaternion,
    mount_transform,
)

__all__ = [
    'Footprint',
    'Mount',
    'beam_axis',
    'coverage',
    'covers_heading',
    'edge_offset_m',
    'free_distance_m',
    'heading_index',
    'heading_name',
    'mount_quaternion',
    'mount_transform',
    'polygon_problems',
    'travel_to_arc',
    'uniform_headings',
]

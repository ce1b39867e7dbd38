"""Sonar mounts on the robot: pose in base_link, beam axis, transforms (transforms3d).

Frames and units follow REP 103: ``base_link`` has x forward, y left, z up (right-handed),
lengths in metres, angles in radians, yaw counter-clockwise from +x. A sonar looks along its own
+x axis (sensor_msgs/Range: "0 angle corresponds to the x-axis of the sensor") and hears echoes
from a cone of full angle ``field_of_view_rad``.
"""
from __future__ import annotations

from dataclasses import dataclass
import math

import numpy as np
import numpy.typing as npt
from transforms3d import affines, euler

from sonar_guard.core.footprint import Footprint

__all__ = ['Mount', 'beam_axis', 'edge_offset_m', 'free_distance_m', 'mount_quaternion',
           'mount_transform']

FloatArray = npt.NDArray[np.float64]

_TAU = 2.0 * math.pi


@dataclass(frozen=True, slots=True)
class Mount:
    """Pose of one sonar on the robot, in base_link (m, rad), and its beam."""

    x_m: float
    y_m: float
    z_m: float
    yaw_rad: float
    field_of_view_rad: float  # full cone angle
    max_range_m: float

    def __post_init__(self) -> None:
        """Store every field as a float; raise ValueError listing every bad field."""
        problems: list[str] = []
        for name in ('x_m', 'y_m', 'z_m', 'yaw_rad', 'field_of_view_rad', 'max_range_m'):
            raw = getattr(self, name)
            try:
                value = float(raw)
            except (TypeError, ValueError):
                problems.append(f'Mount.{name} must be a number: {raw!r}')
                continue
            if not math.isfinite(value):
                problems.append(f'Mount.{name} must be finite: {value}')
                continue
            object.__setattr__(self, name, value)
        fov = self.field_of_view_rad
        if isinstance(fov, float) and math.isfinite(fov) and not 0.0 <= fov < _TAU:
            problems.append(f'Mount.field_of_view_rad must be in [0, 2*pi) rad: {fov}')
        reach = self.max_range_m
        if isinstance(reach, float) and math.isfinite(reach) and reach <= 0.0:
            problems.append(f'Mount.max_range_m must be > 0 m: {reach}')
        if problems:
            raise ValueError('; '.join(problems))


def mount_transform(mount: Mount) -> FloatArray:
    """Return the 4x4 homogeneous transform base_link <- sensor (metres; roll = pitch = 0)."""
    # transforms3d's default axes 'sxyz' take (roll, pitch, yaw) about static x, y, z.
    rotation = euler.euler2mat(0.0, 0.0, mount.yaw_rad)
    translation = [mount.x_m, mount.y_m, mount.z_m]
    matrix: FloatArray = affines.compose(translation, rotation, np.ones(3))
    return matrix


def mount_quaternion(mount: Mount) -> tuple[float, float, float, float]:
    """Return the sensor's orientation in base_link as (x, y, z, w), geometry_msgs order."""
    # transforms3d returns (w, x, y, z); geometry_msgs/Quaternion lists x, y, z, w.
    w, x, y, z = euler.euler2quat(0.0, 0.0, mount.yaw_rad)
    return (float(x), float(y), float(z), float(w))


def beam_axis(mount: Mount) -> FloatArray:
    """Return the beam axis (the sensor's +x) as a unit 2-vector in base_link."""
    axis: FloatArray = np.array(mount_transform(mount)[:2, 0], dtype=float)
    return axis


def edge_offset_m(mount: Mount, footprint: Footprint) -> float:
    """Return the distance (m) from the mount along its beam axis to the footprint's edge.

    It is 0.0 when the mount sits on or outside the outline facing out. A mount set inside the
    outline (a padded footprint) gets the stretch of beam still over the robot.
    """
    return footprint.exit_distance((mount.x_m, mount.y_m), beam_axis(mount))


def free_distance_m(range_m: float, mount: Mount, footprint: Footprint) -> float:
    """Return range minus the beam-axis edge offset (m), floored at 0.0; +inf stays +inf.

    -inf (REP 117: too close to measure) gives 0.0; NaN (an invalid reading) raises ValueError,
    because deciding what an invalid reading means is the validator's job. The offset is taken
    along the beam axis: an echo from the edge of the cone may sit nearer the outline than this.
    """
    reading = float(range_m)
    if math.isnan(reading):
        raise ValueError('range_m must not be NaN (REP 117: an invalid reading)')
    if reading == math.inf:
        return math.inf
    return max(reading - edge_offset_m(mount, footprint), 0.0)



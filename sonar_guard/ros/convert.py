"""The one seam where ROS messages meet core types, for the live node and the offline checker.

Works on anything with the message's field names: rclpy messages and rosbags' deserialized
messages alike (duck typing, no rclpy import here). Times become float seconds.
"""
from __future__ import annotations

import math
from typing import Any

from sonar_guard.core.monitor import OdometrySample
from sonar_guard.core.readings import RangeReading

__all__ = [
    'odometry_to_sample',
    'range_to_reading',
    'seconds_to_stamp_parts',
    'stamp_to_s',
]


def stamp_to_s(stamp: Any) -> float:
    """Return a builtin_interfaces/Time (sec, nanosec) as float seconds."""
    return float(stamp.sec) + float(stamp.nanosec) * 1e-9


def seconds_to_stamp_parts(t_s: float) -> tuple[int, int]:
    """Return (sec, nanosec) of float seconds, nanosec in [0, 1e9)."""
    if not math.isfinite(t_s):
        raise ValueError(f't_s must be finite: {t_s!r}')
    ns = int(round(t_s * 1e9))
    return ns // 1_000_000_000, ns % 1_000_000_000


def range_to_reading(sensor: str, msg: Any, arrival_s: float) -> RangeReading:
    """Convert a sensor_msgs/Range into the core's reading of sensor ``sensor``."""
    return RangeReading(
        sensor=sensor,
        stamp_s=stamp_to_s(msg.header.stamp),
        range_m=float(msg.range),
        arrival_s=arrival_s,
        min_range_m=float(msg.min_range),
        max_range_m=float(msg.max_range),
        field_of_view_rad=float(msg.field_of_view),
        radiation_type=int(msg.radiation_type),
        frame_id=str(msg.header.frame_id),
    )


def odometry_to_sample(msg: Any, arrival_s: float) -> OdometrySample:
    """Convert a nav_msgs/Odometry into body velocity (twist is in child_frame_id, REP 105)."""
    twist = msg.twist.twist
    return OdometrySample(
        stamp_s=stamp_to_s(msg.header.stamp),
        vx_mps=float(twist.linear.x),
        vy_mps=float(twist.linear.y),
        wz_radps=float(twist.angular.z),
        arrival_s=arrival_s,
    )

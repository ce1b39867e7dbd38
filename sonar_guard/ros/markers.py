"""Build visualization_msgs/MarkerArray messages: one beam cone per sensor and the speed limit.

Pure functions: no node, no ``rclpy.init``. Each sonar's beam is drawn as a cone with its apex
at the transducer, its axis along the sensor's +x (sensor_msgs/Range: "0 angle corresponds to
the x-axis of the sensor") and a half-angle of ``field_of_view / 2``; its length is the last
range, clipped to ``[min_range, max_range]``, or ``max_range`` when there is no echo, no
usable number (NaN) or the sensor is silent. The rim sits in the plane ``x = length``.

The cone is a TRIANGLE_LIST fan of its side surface rather than a LINE_STRIP outline: with
alpha 0.35 a filled, see-through surface shows the volume the beam listens to from any viewing
angle, and the robot and obstacles stay visible through it; a thin outline at that alpha is
hard to see and reads as a flat wedge. The base is left open so the echo's end of the cone does
not hide what lies behind it.

A cone is drawn in the sensor's own frame when ``frame_id`` is configured (the TF tree then
places it), otherwise in ``base_link`` at the configured mount pose. Its colour says how far
the reading can be trusted, on the same rules as the diagnostic levels:

===========  ==============  ==========================================================
shade        colour          when
===========  ==============  ==========================================================
trusted      green           ``ok``, ``no_echo`` (diagnostic OK)
caution      amber           ``blind``, ``jump``, ``late``, ``stale``, obstacle held (WARN)
untrusted    red             ``invalid``, ``stuck`` (ERROR)
silent       grey            silent or never heard (STALE)
===========  ==============  ==========================================================

A TEXT_VIEW_FACING marker in ``base_link`` above the robot shows the limit and a short reason.
Marker ids are stable (cone id = the sensor's index in ``config.sensors``, text id = the number
of sensors), so RViz replaces markers instead of piling them up; each lives 1 s, so a stopped
node's markers fade away. Units: metres, radians.
"""
from __future__ import annotations

from collections.abc import Sequence
import math

from builtin_interfaces.msg import Duration, Time
from geometry_msgs.msg import Point
from std_msgs.msg import ColorRGBA
from visualization_msgs.msg import Marker, MarkerArray

from sonar_guard.core.arguments import count_at_least
from sonar_guard.core.config import Config, SensorConfig
from sonar_guard.core.geometry import mount_quaternion
from sonar_guard.core.monitor import Decision, SensorStatus, mount_of
from sonar_guard.ros.diagnostics import (
    LEVEL_ERROR,
    LEVEL_OK,
    LEVEL_STALE,
    LEVEL_WARN,
    sensor_level,
)

__all__ = [
    'BASE_FRAME',
    'CONE_ALPHA',
    'LIFETIME_S',
    'PALETTE',
    'TEXT_HEIGHT_M',
    'build_markers',
    'cone_length_m',
    'cone_points',
    'shade_of',
]

BASE_FRAME = 'base_link'  # REP 105
CONE_ALPHA = 0.35
LIFETIME_S = 1
TEXT_HEIGHT_M = 0.15  # height of a capital letter in RViz, m
_TEXT_LIFT_M = 0.5  # how far above the highest sensor the limit text floats, m

PALETTE: dict[str, tuple[float, float, float]] = {
    'trusted': (0.20, 0.75, 0.30),
    'caution': (1.00, 0.70, 0.10),
    'untrusted': (0.90, 0.15, 0.15),
    'silent': (0.55, 0.55, 0.55),
}
_SHADE_OF_LEVEL = {LEVEL_OK: 'trusted', LEVEL_WARN: 'caution', LEVEL_ERROR: 'untrusted',
                   LEVEL_STALE: 'silent'}


def cone_points(length_m: float, fov_rad: float,
                segments: int = 12) -> list[tuple[float, float, float]]:
    """Return TRIANGLE_LIST vertices (m) of a cone's side: apex at 0, axis +x, rim at x=length.

    Three points per triangle, ``segments`` triangles: ``(apex, rim[k], rim[k+1])``. The rim
    is a circle of radius ``length_m * tan(fov_rad / 2)`` in the plane ``x = length_m``, so each
    rim point lies ``length_m / cos(fov_rad / 2)`` from the apex, at ``fov_rad / 2`` from +x.
    """
    length = float(length_m)
    if not math.isfinite(length) or length < 0.0:
        raise ValueError(f'length_m must be a finite number >= 0 m: {length_m!r}')
    fov = float(fov_rad)
    if not 0.0 < fov < math.pi:
        raise ValueError(f'fov_rad must be in (0, pi) rad: {fov_rad!r}')
    count = count_at_least('segments', segments, 3)
    radius = length * math.tan(fov / 2.0)
    rim = [(length, radius * math.cos(2.0 * math.pi * k / count),
            radius * math.sin(2.0 * math.pi * k / count)) for k in range(count)]
    apex = (0.0, 0.0, 0.0)
    points: list[tuple[float, float, float]] = []
    for k in range(count):
        points += [apex, rim[k], rim[(k + 1) % count]]
    return points


def cone_length_m(sensor: SensorConfig, status: SensorStatus | None) -> float:
    """Return how long (m) to draw a sensor's cone: last range clipped, else max_range."""
    if status is None or status.silent or status.verdict is None:
        return sensor.max_range_m
    reading = status.last_range_m
    if math.isnan(reading) or reading == math.inf:
        return sensor.max_range_m
    return min(max(reading, sensor.min_range_m), sensor.max_range_m)


def shade_of(status: SensorStatus | None) -> str:
    """Return the palette name of a sensor's cone: trusted, caution, untrusted or silent."""
    if status is None:
        return 'silent'
    return _SHADE_OF_LEVEL[sensor_level(status)]


def _colour(shade: str, alpha: float) -> ColorRGBA:
    r, g, b = PALETTE[shade]
    return ColorRGBA(r=r, g=g, b=b, a=alpha)


def _base(marker_type: int, marker_id: int, frame_id: str, stamp: Time,
          namespace: str) -> Marker:
    marker = Marker(type=marker_type, id=marker_id, ns=namespace, action=Marker.ADD,
                    frame_locked=False, lifetime=Duration(sec=LIFETIME_S, nanosec=0))
    marker.header.frame_id = frame_id
    marker.header.stamp = stamp
    marker.pose.orientation.w = 1.0
    return marker


def _cone_marker(index: int, sensor: SensorConfig, status: SensorStatus | None, stamp: Time,
                 namespace: str) -> Marker:
    frame = sensor.frame_id or BASE_FRAME
    marker = _base(Marker.TRIANGLE_LIST, index, frame, stamp, namespace)
    if not sensor.frame_id:
        marker.pose.position.x = sensor.x_m
        marker.pose.position.y = sensor.y_m
        marker.pose.position.z = sensor.z_m
        x, y, z, w = mount_quaternion(mount_of(sensor))
        orientation = marker.pose.orientation
        orientation.x, orientation.y, orientation.z, orientation.w = x, y, z, w
    # TRIANGLE_LIST points are multiplied by scale: 1 keeps them in metres.
    marker.scale.x = marker.scale.y = marker.scale.z = 1.0
    marker.color = _colour(shade_of(status), CONE_ALPHA)
    marker.points = [Point(x=px, y=py, z=pz) for px, py, pz in
                     cone_points(cone_length_m(sensor, status), sensor.field_of_view_rad)]
    return marker


def _short_reason(reason: str) -> str:
    """Return the reason up to its first comma (drops the latency detail)."""
    return reason.split(',', 1)[0].strip()


def _text_marker(marker_id: int, config: Config, decision: Decision, stamp: Time,
                 namespace: str) -> Marker:
    marker = _base(Marker.TEXT_VIEW_FACING, marker_id, BASE_FRAME, stamp, namespace)
    centre = config.robot.footprint.points.mean(axis=0)
    marker.pose.position.x = float(centre[0])
    marker.pose.position.y = float(centre[1])
    marker.pose.position.z = max((s.z_m for s in config.sensors), default=0.0) + _TEXT_LIFT_M
    marker.scale.z = TEXT_HEIGHT_M  # TEXT_VIEW_FACING uses only scale.z
    marker.color = ColorRGBA(r=1.0, g=1.0, b=1.0, a=1.0)
    marker.text = f'{decision.limit_mps:.2f} m/s\n{_short_reason(decision.reason)}'
    return marker


def build_markers(config: Config, statuses: Sequence[SensorStatus], decision: Decision,
                  stamp: Time, *, namespace: str = 'sonar_guard') -> MarkerArray:
    """Return a MarkerArray stamped ``stamp``: a cone per configured sensor and the limit text.

    Sensors without a status in ``statuses`` are drawn as silent at full length.
    """
    by_name = {s.name: s for s in statuses}
    markers = [_cone_marker(i, sensor, by_name.get(sensor.name), stamp, namespace)
               for i, sensor in enumerate(config.sensors)]
    markers.append(_text_marker(len(config.sensors), config, decision, stamp, namespace))
    return MarkerArray(markers=markers)

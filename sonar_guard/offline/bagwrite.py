"""Write recordings (rosbag2 MCAP or SQLite3 directories, ROS 1 .bag files) with rosbags.

For tests, the demo simulator and users who want to build a recording from their own data.
Records stream straight to the storage, so a generator of millions of messages is fine; what
stays in memory is rosbags' per-message index of a ROS 1 bag (a few tens of bytes each).
Times are float seconds; log times become int nanoseconds in the file.
"""
from __future__ import annotations

from collections.abc import Iterable
import dataclasses
from functools import cache
import math
from pathlib import Path
import shutil
from typing import Any

import numpy as np
from rosbags.rosbag1 import Writer as Writer1
from rosbags.rosbag2 import StoragePlugin
from rosbags.rosbag2 import Writer as Writer2
from rosbags.typesys import Stores, get_typestore
from rosbags.typesys.store import Typestore

__all__ = [
    'DISTROS',
    'STORAGES',
    'odometry_msg',
    'range_msg',
    'twist_msg',
    'typestore_for',
    'write_bag',
]

DISTROS: dict[str, Stores] = {
    'humble': Stores.ROS2_HUMBLE,
    'iron': Stores.ROS2_IRON,
    'jazzy': Stores.ROS2_JAZZY,
    'kilted': Stores.ROS2_KILTED,
    'noetic': Stores.ROS1_NOETIC,
}
"""Distribution name -> rosbags typestore; ``noetic`` is the only ROS 1 entry."""

STORAGES: tuple[str, ...] = ('mcap', 'rosbag1', 'sqlite3')
"""Storage names :func:`write_bag` accepts."""

_ROS1_DISTROS = frozenset({'noetic'})
# rosbag2 metadata version per distribution: Jazzy changed the QoS serialization (version 9);
# rosbags writes 8 or 9 only, so older distributions get 8.
_METADATA_VERSION = {'jazzy': 9, 'kilted': 9}
_NS_PER_S = 1_000_000_000
_MAX_NS = 2**63 - 1


@cache
def typestore_for(distro: str) -> Typestore:
    """Return the rosbags typestore of ``distro`` (a key of DISTROS), shared: do not register."""
    try:
        return get_typestore(DISTROS[distro])
    except KeyError:
        allowed = ', '.join(sorted(DISTROS))
        raise ValueError(f'distro must be one of {allowed}: {distro!r}') from None


def _stamp_ns(t_s: float, what: str) -> int:
    """Return float seconds as int nanoseconds, rejecting NaN, infinities and negatives."""
    try:
        value = float(t_s)
    except (TypeError, ValueError):
        value = math.nan
    if not math.isfinite(value) or value < 0:
        raise ValueError(f'{what} must be a finite time >= 0 s: {t_s!r}')
    # Whole seconds and the fraction apart: value * 1e9 in one float would round epoch times
    # (~1.7e18 ns) to 256 ns steps; the fraction of a float is exact, so this is not.
    whole = math.floor(value)
    ns = int(whole) * _NS_PER_S + round((value - whole) * _NS_PER_S)
    if ns > _MAX_NS:
        raise ValueError(f'{what} is beyond the 64-bit nanosecond range: {t_s!r}')
    return ns


# Fields only some distributions have: ROS 1 headers carry ``seq``, Range gained ``variance``
# in Iron. One builder serves every distro by passing these only where the class has them.
_DISTRO_SPECIFIC = frozenset({'seq', 'variance'})


def _build(ts: Typestore, msgtype: str, **values: Any) -> Any:
    """Instantiate ``msgtype`` of ``ts`` from ``values``, dropping distro-specific extras."""
    cls = ts.types[msgtype]
    names = {f.name for f in dataclasses.fields(cls)}
    kwargs = {k: v for k, v in values.items() if k in names or k not in _DISTRO_SPECIFIC}
    return cls(**kwargs)


def _header(ts: Typestore, stamp_s: float, frame_id: str) -> Any:
    """Return a std_msgs/Header of ``ts`` stamped ``stamp_s`` (s) in ``frame_id``."""
    sec, nanosec = divmod(_stamp_ns(stamp_s, 'stamp_s'), _NS_PER_S)
    if sec > 2**31 - 1:
        raise ValueError(f'stamp_s does not fit a 32-bit seconds field: {stamp_s!r}')
    stamp = ts.types['builtin_interfaces/msg/Time'](sec=sec, nanosec=nanosec)
    return _build(ts, 'std_msgs/msg/Header', seq=0, stamp=stamp, frame_id=frame_id)


def _vector3(ts: Typestore, x: float, y: float, z: float) -> Any:
    """Return a geometry_msgs/Vector3 of ``ts``."""
    return ts.types['geometry_msgs/msg/Vector3'](x=float(x), y=float(y), z=float(z))


def range_msg(
    stamp_s: float,
    frame_id: str,
    range_m: float,
    *,
    min_range: float,
    max_range: float,
    field_of_view: float,
    radiation_type: int = 0,
    distro: str = 'humble',
) -> Any:
    """Return a sensor_msgs/Range of ``distro`` (m, rad; variance 0 where the distro has it)."""
    ts = typestore_for(distro)
    return _build(
        ts,
        'sensor_msgs/msg/Range',
        header=_header(ts, stamp_s, frame_id),
        radiation_type=int(radiation_type),
        field_of_view=float(field_of_view),
        min_range=float(min_range),
        max_range=float(max_range),
        range=float(range_m),
        variance=0.0,
    )


def twist_msg(vx: float, wz: float = 0.0, *, vy: float = 0.0, distro: str = 'humble') -> Any:
    """Return a geometry_msgs/Twist of ``distro`` (m/s, rad/s)."""
    ts = typestore_for(distro)
    return ts.types['geometry_msgs/msg/Twist'](
        linear=_vector3(ts, vx, vy, 0.0), angular=_vector3(ts, 0.0, 0.0, wz))


def odometry_msg(
    stamp_s: float,
    vx: float,
    vy: float = 0.0,
    wz: float = 0.0,
    *,
    frame_id: str = 'odom',
    child_frame_id: str = 'base_link',
    x: float = 0.0,
    y: float = 0.0,
    yaw: float = 0.0,
    distro: str = 'humble',
) -> Any:
    """Return a nav_msgs/Odometry of ``distro``: pose (m, rad yaw) and body twist (m/s, rad/s)."""
    ts = typestore_for(distro)
    types = ts.types
    orientation = types['geometry_msgs/msg/Quaternion'](
        x=0.0, y=0.0, z=math.sin(yaw / 2.0), w=math.cos(yaw / 2.0))
    pose = types['geometry_msgs/msg/Pose'](
        position=types['geometry_msgs/msg/Point'](x=float(x), y=float(y), z=0.0),
        orientation=orientation)
    return types['nav_msgs/msg/Odometry'](
        header=_header(ts, stamp_s, frame_id),
        child_frame_id=child_frame_id,
        pose=types['geometry_msgs/msg/PoseWithCovariance'](
            pose=pose, covariance=np.zeros(36, dtype=np.float64)),
        twist=types['geometry_msgs/msg/TwistWithCovariance'](
            twist=twist_msg(vx, wz, vy=vy, distro=distro),
            covariance=np.zeros(36, dtype=np.float64)),
    )


def write_bag(
    path: str | Path,
    records: Iterable[tuple[str, str, float, Any]],
    *,
    storage: str = 'mcap',
    distro: str | None = None,
) -> Path:
    """Write ``(topic, msgtype, log_time_s, message)`` records to a new recording at ``path``.

    Records must come in non-decreasing log time (s), the order a recorder writes them and the
    one that keeps reading memory flat. ``storage`` 'mcap' or 'sqlite3' makes a rosbag2
    directory, 'rosbag1' a single .bag file; ``path`` must not exist. Messages must belong to
    ``distro``'s typestore (default 'humble' for rosbag2, 'noetic' for rosbag1; build them with
    the same ``distro``). Each (topic, msgtype) gets a connection on first use. On any error the
    partly written output is removed and the error propagates (ValueError for bad records).
    Returns the path written.
    """
    path = Path(path)
    if storage not in STORAGES:
        raise ValueError(f'storage must be one of {", ".join(STORAGES)}: {storage!r}')
    if distro is None:
        distro = 'noetic' if storage == 'rosbag1' else 'humble'
    ts = typestore_for(distro)
    if (storage == 'rosbag1') != (distro in _ROS1_DISTROS):
        kind = 'a ROS 1' if storage == 'rosbag1' else 'a ROS 2'
        raise ValueError(f'storage {storage!r} needs {kind} distro, not {distro!r}')
    if path.exists() or path.is_symlink():
        raise FileExistsError(f'{path} exists already; write_bag only creates new recordings')
    opened: list[bool] = []  # set by the writers once they have created ``path``
    try:
        if storage == 'rosbag1':
            _write_ros1(path, records, ts, distro, opened)
        else:
            plugin = StoragePlugin.MCAP if storage == 'mcap' else StoragePlugin.SQLITE3
            _write_ros2(path, records, ts, distro, plugin, opened)
    except BaseException:
        if opened:  # remove only what this call created
            if path.is_dir() and not path.is_symlink():
                shutil.rmtree(path, ignore_errors=True)
            elif path.exists():
                path.unlink()
        raise
    return path


class _Checker:
    """Validate records one by one: known type, time finite and non-decreasing."""

    __slots__ = ('distro', 'index', 'last_ns', 'ts')

    def __init__(self, ts: Typestore, distro: str) -> None:
        self.ts = ts
        self.distro = distro
        self.index = -1
        self.last_ns = -1

    def check(self, record: tuple[str, str, float, Any]) -> tuple[str, str, int, Any]:
        """Return the record with its log time in int nanoseconds, or raise ValueError."""
        self.index += 1
        try:
            topic, msgtype, log_time_s, message = record
        except (TypeError, ValueError):
            raise ValueError(f'record {self.index} is not (topic, msgtype, log_time_s, message): '
                             f'{record!r:.120}') from None
        if not isinstance(topic, str) or not topic:
            raise ValueError(f'record {self.index}: topic must be a non-empty string: {topic!r}')
        if msgtype not in self.ts.types:
            raise ValueError(f'record {self.index} on {topic}: {msgtype!r} is not a message type '
                             f'of the {self.distro} typestore')
        ns = _stamp_ns(log_time_s, f'record {self.index} on {topic}: log_time_s')
        if ns < self.last_ns:
            raise ValueError(
                f'record {self.index} on {topic}: log time {log_time_s!r} s is before the '
                f'previous record ({self.last_ns / _NS_PER_S!r} s); records must be in time order')
        self.last_ns = ns
        return topic, msgtype, ns, message

    def failed(self, topic: str, msgtype: str, err: Exception) -> ValueError:
        """Return the error for a message that does not serialize as ``msgtype``."""
        return ValueError(
            f'record {self.index} on {topic}: cannot serialize the message as {msgtype} with the '
            f'{self.distro} typestore (build it with the same distro): '
            f'{type(err).__name__}: {err}')


_SERIALIZE_ERRORS = (AttributeError, TypeError, ValueError, OverflowError, IndexError, KeyError)


def _write_ros2(path: Path, records: Iterable[tuple[str, str, float, Any]], ts: Typestore,
                distro: str, plugin: StoragePlugin, opened: list[bool]) -> None:
    """Stream records into a rosbag2 directory with ``plugin`` storage."""
    checker = _Checker(ts, distro)
    connections: dict[tuple[str, str], Any] = {}
    version = _METADATA_VERSION.get(distro, 8)
    with Writer2(path, version=version, storage_plugin=plugin) as writer:
        opened.append(True)
        for record in records:
            topic, msgtype, ns, message = checker.check(record)
            try:
                raw = ts.serialize_cdr(message, msgtype, little_endian=True)
            except _SERIALIZE_ERRORS as err:
                raise checker.failed(topic, msgtype, err) from err
            conn = connections.get((topic, msgtype))
            if conn is None:
                conn = writer.add_connection(topic, msgtype, typestore=ts)
                connections[(topic, msgtype)] = conn
            writer.write(conn, ns, raw)


def _write_ros1(path: Path, records: Iterable[tuple[str, str, float, Any]], ts: Typestore,
                distro: str, opened: list[bool]) -> None:
    """Stream records into a ROS 1 (v2.0) bag file."""
    checker = _Checker(ts, distro)
    connections: dict[tuple[str, str], Any] = {}
    with Writer1(path) as writer:
        opened.append(True)
        for record in records:
            topic, msgtype, ns, message = checker.check(record)
            try:
                raw = ts.serialize_ros1(message, msgtype)
            except _SERIALIZE_ERRORS as err:
                raise checker.failed(topic, msgtype, err) from err
            conn = connections.get((topic, msgtype))
            if conn is None:
                msgdef, md5sum = ts.generate_msgdef(msgtype)
                conn = writer.add_connection(topic, msgtype, msgdef=msgdef, md5sum=md5sum)
                connections[(topic, msgtype)] = conn
            writer.write(conn, ns, raw)
